"""Benchmarks, run with ``popdens bench NAME`` (or ``python -m popdens.benchmarks.NAME``).

Each module has a ``main()`` that prints wall times and a speed ratio measured
in one run (solver against the Monte Carlo twin or a long solver run at equal
accuracy), because shared machines make separate timings incomparable.
They are not tests: nothing here is timed in CI.
"""

from __future__ import annotations

import importlib
import pkgutil

__all__ = ["available", "run"]


def available() -> list[str]:
    """Names of the benchmark modules."""
    return sorted(m.name for m in pkgutil.iter_modules(__path__) if not m.name.startswith("_"))


def run(name: str) -> None:
    """Run benchmark ``name`` (see :func:`available`)."""
    if name not in available():
        raise KeyError(name)
    importlib.import_module(f"{__name__}.{name}").main()
