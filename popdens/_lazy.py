"""Names of a package imported on first use (PEP 562), so that importing the package stays fast.

The numerical modules pull in scipy, numba and sympy (about 1.5 s together); a package's
``__init__`` that re-exports them eagerly would make ``import popdens`` and ``popdens --help``
pay that on every start.  See DEVELOPERS.md, "Heavy imports".
"""

from __future__ import annotations

import importlib
from typing import Callable, Mapping


def lazy_names(package: str, where: Mapping[str, str], namespace: dict) -> tuple[Callable, Callable]:
    """Module ``__getattr__`` and ``__dir__`` for ``package``.

    Parameters
    ----------
    package : str
        The package's ``__name__``.
    where : mapping of str to str
        Public name -> sub-module (relative to ``package``, dotted) that defines it.
    namespace : dict
        The package's ``globals()``: a name, once imported, is stored there so later look-ups are
        plain attribute reads.
    """

    def __getattr__(name: str):
        module = where.get(name)
        if module is None:
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        value = getattr(importlib.import_module(f"{package}.{module}"), name)
        namespace[name] = value
        return value

    def __dir__():
        return sorted(set(namespace) | set(where))

    return __getattr__, __dir__
