"""Scenario files: the TOML schemas (single population, network, sweep), the analyses named in them,
the runner and the HTML report."""

from .loader import load_scenario, parse_scenario
from .runner import run_scenario

__all__ = [
    "load_scenario", "parse_scenario", "run_scenario",
]
