"""Reading a scenario file: TOML in, a validated scenario out, whichever kind the file describes.

A file with ``[[cohort]]`` tables is a network scenario (:mod:`.network`);
any other is a single-population scenario (:mod:`.single`), which may also
carry a ``[sweep]`` table (:mod:`.sweep`).
"""

from __future__ import annotations

import tomllib
from pathlib import Path

from .._files import read_regular_file
from ..exceptions import ScenarioError
from ._schema import MAX_TABLE_DEPTH, table_depth
from .network import NetworkScenario, parse_network_scenario
from .single import Scenario, parse_single_scenario

__all__ = ["load_scenario", "parse_scenario"]


#: Largest scenario file read (bytes): scenarios are a few kilobytes; this guards against a wrong file.
MAX_SCENARIO_BYTES = 10_000_000


def parse_scenario(data: dict, source: str | Path = "<scenario>") -> Scenario | NetworkScenario:
    """Validate a scenario given as a dict (as read from TOML).

    A scenario with ``[[cohort]]`` tables is a network scenario and gives a
    :class:`~popdens.scenario.network.NetworkScenario`; any other a
    :class:`~popdens.scenario.single.Scenario`.
    """
    depth = table_depth(data)
    if depth > MAX_TABLE_DEPTH:
        raise ScenarioError(f"{source}: tables nested {depth} deep (at most {MAX_TABLE_DEPTH}); a dotted key with "
                            "many parts nests one table per part")
    try:
        if isinstance(data, dict) and "cohort" in data:
            return parse_network_scenario(data, source)
        return parse_single_scenario(data, source)
    except RecursionError:
        raise ScenarioError(f"{source}: a value nests too deeply to be read") from None


def load_scenario(path: str | Path) -> Scenario:
    """Read and validate a scenario file.

    Raises
    ------
    ScenarioError
        For unreadable files, TOML syntax errors and schema violations.
    """
    path = Path(path)
    try:
        raw = read_regular_file(path, MAX_SCENARIO_BYTES, "scenario file")
    except OSError as exc:
        raise ScenarioError(f"{path}: cannot read: {exc.strerror or exc}") from None
    except ValueError as exc:
        raise ScenarioError(str(exc)) from None
    try:
        data = tomllib.loads(raw.decode("utf-8"))
    except UnicodeDecodeError:
        raise ScenarioError(f"{path}: not UTF-8 text") from None
    except tomllib.TOMLDecodeError as exc:
        raise ScenarioError(f"{path}: TOML syntax error: {exc}") from None
    except RecursionError:  # the TOML reader recurses once per nested array or inline table
        raise ScenarioError(f"{path}: arrays or tables nested too deeply") from None
    return parse_scenario(data, path)
