"""The public surface: an explicit, sorted __all__ that matches what is exported."""

import types

import popdens


def test_all_is_sorted_and_complete():
    assert popdens.__all__ == sorted(popdens.__all__)
    for name in popdens.__all__:
        assert hasattr(popdens, name), name
    # every public class or function reachable at top level is listed in __all__
    listed = set(popdens.__all__)
    for name in dir(popdens):
        obj = getattr(popdens, name)
        if name.startswith("_") or isinstance(obj, types.ModuleType):
            continue
        if callable(obj) and getattr(obj, "__module__", "").startswith("popdens"):
            assert name in listed, f"{name} is public but missing from __all__"


def test_version_string():
    assert popdens.__version__.count(".") == 2
