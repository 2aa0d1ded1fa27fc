"""Reading a scenario file: TOML in, a validated scenario out, whichever kind the file describes.

A file with ``[[cohort]]`` tables is a network scenario (:mod:`.network`);
any other is a single-population scenario (:mod:`.single`), which may also
carry a ``[sweep]`` table (:mod:`.sweep`).
"""

from __future__ import annotations

import tomllib
from pathlib import Path

from ..exceptions import ScenarioError
from .network import NetworkScenario, parse_network_scenario
from .single import Scenario, parse_single_scenario

__all__ = ["load_scenario", "parse_scenario"]


def parse_scenario(data: dict, source: str | Path = "<scenario>") -> Scenario | NetworkScenario:
    """Validate a scenario given as a dict (as read from TOML).

    A scenario with ``[[cohort]]`` tables is a network scenario and gives a
    :class:`~popdens.scenario.network.NetworkScenario`; any other a
    :class:`~popdens.scenario.single.Scenario`.
    """
    if isinstance(data, dict) and "cohort" in data:
        return parse_network_scenario(data, source)
    return parse_single_scenario(data, source)


def load_scenario(path: str | Path) -> Scenario:
    """Read and validate a scenario file.

    Raises
    ------
    ScenarioError
        For unreadable files, TOML syntax errors and schema violations.
    """
    path = Path(path)
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise ScenarioError(f"{path}: cannot read: {exc.strerror or exc}") from None
    try:
        data = tomllib.loads(raw.decode("utf-8"))
    except UnicodeDecodeError:
        raise ScenarioError(f"{path}: not UTF-8 text") from None
    except tomllib.TOMLDecodeError as exc:
        raise ScenarioError(f"{path}: TOML syntax error: {exc}") from None
    except RecursionError:  # the TOML reader recurses once per nested array or inline table
        raise ScenarioError(f"{path}: arrays or tables nested too deeply") from None
    return parse_scenario(data, path)
