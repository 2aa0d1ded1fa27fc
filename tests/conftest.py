"""Test hygiene: seeded generators, Agg backend, float errors raise, slow tests gated."""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import numpy as np  # noqa: E402
import pytest  # noqa: E402


def pytest_addoption(parser):
    parser.addoption("--runslow", action="store_true", default=False, help="run tests marked slow")


def pytest_configure(config):
    """Hypothesis profiles: few deterministic examples by default, many random ones with --runslow.

    Property tests scale their ``max_examples`` from ``hypothesis.settings.default``
    (the profile loaded here, before the test modules are imported).
    """
    try:
        from hypothesis import settings
    except ImportError:  # pragma: no cover - hypothesis is in the test extra
        return
    settings.register_profile("popdens", max_examples=10, deadline=None, derandomize=True, database=None)
    settings.register_profile("popdens-slow", max_examples=100, deadline=None, database=None)
    settings.load_profile("popdens-slow" if config.getoption("--runslow") else "popdens")


def pytest_collection_modifyitems(config, items):
    if config.getoption("--runslow"):
        return
    skip = pytest.mark.skip(reason="slow: run with --runslow")
    for item in items:
        if "slow" in item.keywords:
            item.add_marker(skip)


@pytest.fixture
def rng():
    """A seeded generator; pass it explicitly, never seed globally."""
    return np.random.default_rng(20261202)


@pytest.fixture(autouse=True)
def _close_figures():
    yield
    import matplotlib.pyplot as plt

    plt.close("all")
