"""Scenario files: the TOML schemas (single population, network, sweep), the analyses named in them,
the runner and the HTML report.

Names are imported on first use (PEP 562): checking a scenario file needs no solver."""

from __future__ import annotations

from .._lazy import lazy_names

_LAZY = {"load_scenario": "loader", "parse_scenario": "loader", "run_scenario": "runner"}

__all__ = [
    "load_scenario", "parse_scenario", "run_scenario",
]

__getattr__, __dir__ = lazy_names(__name__, _LAZY, globals())
