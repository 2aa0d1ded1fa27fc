"""Scenario files (TOML): a strict schema loaded into the same objects the Python API uses.

Top-level tables
----------------
``[scenario]``  title, output folder (relative to the scenario file), notes
``[neuron]``    ``model`` = "LIF" | "EIF" | "QIF" | "PIF" | "custom" and that model's parameters
``[noise]``     ``kind`` = "escape" with a ``[noise.hazard]`` table, or "white" with ``sigma`` (mV)
``[input]``     ``shape`` = "constant" | "step" | "pulse" | "ramp" | "sine" | "trace" and its parameters
``[run]``       ``t_end``, ``dt``, ``record_interval``, ``snapshot_interval`` (ms), ``montecarlo_neurons``, ``seed``
``[gain]``, ``[stationary]``, ``[transfer]``  steady-state and linear-response analyses
                (see :mod:`popdens.analyses`)
``[[cohort]]``, ``[[pathway]]``, ``[network]``  a network scenario instead (see
                :mod:`popdens.network_scenario`)
``[sweep]``     optional: values to sweep and the analysis; checked by ``popdens/sweep_scenario.py``

``[neuron]`` and ``[noise]`` are required, and at least one analysis: a
time-domain run (``[input]`` with ``[run]``) or an analysis table.

Unknown keys are rejected with the nearest valid key suggested; each error
names the file, the table, the key, the value and what was expected.
Expressions (custom drift or escape function) go through the safe parser.
"""

from __future__ import annotations

import difflib
import hashlib
import math
import reprlib
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from . import drive as drive_mod
from . import hazard as hazard_mod
from . import _validation as v
from .analyses import ANALYSIS_TABLES, parse_analyses
from .exceptions import ExpressionError, ScenarioError
from .models import EIF, LIF, PIF, QIF, CustomNeuron
from .noise import EscapeNoise, Population, WhiteNoise

__all__ = ["Scenario", "load_scenario", "parse_scenario"]

NEURON_MODELS = {
    "LIF": (LIF, {"tau_m", "threshold", "reset", "refractory", "rest"}, {"rest"}),
    "EIF": (EIF, {"tau_m", "soft_threshold", "slope_factor", "cutoff", "reset", "refractory", "rest"}, {"rest"}),
    "QIF": (QIF, {"tau_m", "critical", "cutoff", "reset", "refractory", "rest"}, {"rest"}),
    "PIF": (PIF, {"tau_m", "threshold", "reset", "refractory"}, set()),
    "custom": (CustomNeuron, {"drift", "tau_m", "threshold", "reset", "refractory", "parameters", "cutoff", "rest"},
               {"parameters", "cutoff", "rest"}),
}
HAZARDS = {
    "exponential": (hazard_mod.Exponential, {"rate", "width"}),
    "linear": (hazard_mod.Linear, {"slope"}),
    "erf": (hazard_mod.ErfEscape, {"max_rate", "width"}),
    "arrhenius-current": (hazard_mod.ArrheniusCurrent, {"sigma", "tau", "c1", "c2"}),
    "custom": (hazard_mod.CustomEscape, {"expression", "parameters"}),
}
INPUTS = {
    "constant": (drive_mod.Constant, {"mu"}),
    "step": (drive_mod.Step, {"t", "before", "after"}),
    "pulse": (drive_mod.Pulse, {"t", "duration", "base", "amplitude"}),
    "ramp": (drive_mod.Ramp, {"t_start", "t_stop", "start", "stop"}),
    "sine": (drive_mod.Sine, {"mean", "amplitude", "frequency", "phase"}),
    "trace": (None, {"file", "times", "values"}),
}
RUN_KEYS = {"t_end", "dt", "record_interval", "snapshot_interval", "montecarlo_neurons", "seed"}
SCENARIO_KEYS = {"title", "output", "notes"}
TOP_LEVEL = {"scenario", "neuron", "noise", "input", "run", "sweep"} | set(ANALYSIS_TABLES)
#: Largest accepted number of Monte Carlo neurons in a scenario.
MAX_NEURONS = 10_000_000
#: Largest accepted number of time steps in a scenario: the solvers keep three
#: float64 arrays per step (1.2 GB at this limit), so more would exhaust memory.
MAX_STEPS = 50_000_000
#: Time step (ms) assumed when a scenario gives none (the solvers' default).
DEFAULT_DT = 0.1


@dataclass(frozen=True)
class Scenario:
    """A validated scenario: the objects a script would build by hand."""

    source: Path
    title: str
    output: Path
    population: Population
    drive: drive_mod.Drive | None
    t_end: float | None
    dt: float | None
    record_interval: float | None
    montecarlo_neurons: int
    seed: int
    digest: str
    raw: dict
    snapshot_interval: float | None = None
    #: ``(table name, analysis object)`` pairs, see :mod:`popdens.analyses`
    analyses: tuple = ()

    @property
    def runs_in_time(self) -> bool:
        """Whether the scenario asks for a time-domain run (``[input]`` and ``[run]``)."""
        return self.t_end is not None


def _err(src, table, key, value, expected) -> ScenarioError:
    where = _where(table)
    k = f" key `{key}`" if key else ""
    return ScenarioError(f"{src}: {where}{k} = {_REPR.repr(value)}: expected {expected}")


_REPR = reprlib.Repr()
_REPR.maxstring, _REPR.maxother, _REPR.maxlevel, _REPR.maxlist, _REPR.maxdict = 80, 80, 3, 8, 8


def _where(table: str) -> str:
    return f"[{table}]" if table else "top level"


def _check_keys(src, table, data: dict, allowed: set, required: set = frozenset()):
    if not isinstance(data, dict):
        raise _err(src, table, None, data, "a table")
    for key in data:
        if key not in allowed:
            near = difflib.get_close_matches(str(key), sorted(allowed), n=1)
            hint = f"; did you mean `{near[0]}`?" if near else f"; valid keys: {sorted(allowed)}"
            shown = key if isinstance(key, str) and key.strip() and key.isprintable() and "`" not in key \
                else _REPR.repr(key)
            raise ScenarioError(f"{src}: {_where(table)} unknown key `{shown}`{hint}")
    for key in sorted(required):
        if key not in data:
            raise ScenarioError(f"{src}: {_where(table)} missing key `{key}`")


def _number(src, table, key, value) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise _err(src, table, key, value, "a finite number")
    try:
        x = float(value)  # a TOML integer has no size limit: float() may overflow
    except OverflowError:
        x = math.inf
    if not math.isfinite(x):
        raise _err(src, table, key, value, "a finite number")
    return x


def _build(src, table, cls, params: dict, text_key: str | None = None):
    try:
        return cls(**params)
    except ExpressionError as exc:
        key = f" key `{text_key}`:" if text_key and text_key in params else ""
        raise ScenarioError(f"{src}: [{table}]{key} {exc}") from None
    except (ValueError, TypeError) as exc:
        raise ScenarioError(f"{src}: [{table}] {exc}") from None


def _select(src, table, value, selector: str, registry: dict):
    """Copy of a table without its selector key, the selected name and its registry entry."""
    if not isinstance(value, dict):
        raise _err(src, table, None, value, "a table")
    items = dict(value)
    name = items.pop(selector, None)
    if not isinstance(name, str) or name not in registry:
        raise _err(src, table, selector, name, f"one of {sorted(registry)}")
    return items, name, registry[name]


def _model_params(src, table, items: dict, text_key: str) -> dict:
    """Numbers, one expression string (``text_key``) and a ``parameters`` table of named numbers."""
    params = {}
    for k, val in items.items():
        if k == text_key:
            if not isinstance(val, str):
                raise _err(src, table, k, val, "an expression string")
            params[k] = val
        elif k == "parameters":
            if not isinstance(val, dict):
                raise _err(src, table, k, val, "a table of named numbers")
            params[k] = {str(pk): _number(src, f"{table}.parameters", pk, pv) for pk, pv in val.items()}
        else:
            params[k] = _number(src, table, k, val)
    return params


def parse_meta(src, data: dict) -> tuple[str, Path]:
    """The ``[scenario]`` table → (title, output folder), the folder checked by :func:`_output_folder`."""
    meta = data.get("scenario", {})
    _check_keys(src, "scenario", meta, SCENARIO_KEYS)
    title = meta.get("title", Path(src).stem)
    if not isinstance(title, str):
        raise _err(src, "scenario", "title", title, "a string")
    out = meta.get("output", f"{Path(src).stem}-output")
    if not isinstance(out, str) or not out.strip():
        raise _err(src, "scenario", "output", out, "a folder name")
    return title, _output_folder(src, out)


def parse_population(src, neuron_data, noise_data, prefix: str = "") -> Population:
    """The neuron and noise tables (``[{prefix}neuron]``, ``[{prefix}noise]``) → a validated Population."""
    t_neuron, t_noise = f"{prefix}neuron", f"{prefix}noise"
    nd, _, (cls, allowed, optional) = _select(src, t_neuron, neuron_data, "model", NEURON_MODELS)
    _check_keys(src, t_neuron, nd, allowed, allowed - optional)
    neuron = _build(src, t_neuron, cls, _model_params(src, t_neuron, nd, text_key="drift"), "drift")

    no = noise_data
    if not isinstance(no, dict):
        raise _err(src, t_noise, None, no, "a table")
    kind = no.get("kind")
    if kind == "escape":
        _check_keys(src, t_noise, no, {"kind", "hazard"}, {"kind", "hazard"})
        t_hz = f"{t_noise}.hazard"
        hz, _, (hcls, hallowed) = _select(src, t_hz, no["hazard"], "shape", HAZARDS)
        required = hallowed - {"parameters"}
        _check_keys(src, t_hz, hz, hallowed, required)
        hp = _model_params(src, t_hz, hz, text_key="expression")
        noise = EscapeNoise(_build(src, t_hz, hcls, hp, "expression"))
    elif kind == "white":
        _check_keys(src, t_noise, no, {"kind", "sigma"}, {"kind", "sigma"})
        noise = _build(src, t_noise, WhiteNoise, {"sigma": _number(src, t_noise, "sigma", no["sigma"])})
    else:
        raise _err(src, t_noise, "kind", kind, "'escape' or 'white'")
    return Population(neuron, noise)


def parse_scenario(data: dict, source: str | Path = "<scenario>") -> Scenario:
    """Validate a scenario given as a dict (as read from TOML).

    A scenario with ``[[cohort]]`` tables is a network scenario
    (:mod:`popdens.network_scenario`) and gives a ``NetworkScenario``.
    """
    src = str(source)
    if isinstance(data, dict) and "cohort" in data:
        from .network_scenario import parse_network_scenario

        return parse_network_scenario(data, source)
    _check_keys(src, "", data, TOP_LEVEL, {"neuron", "noise"})
    if ("input" in data) != ("run" in data):
        missing = "run" if "input" in data else "input"
        raise ScenarioError(f"{src}: missing table `{missing}`: a time-domain run needs both [input] and [run]")
    if "run" not in data and not any(k in data for k in ANALYSIS_TABLES):
        raise ScenarioError(f"{src}: nothing to compute: add the tables `input` and `run` for a time-domain "
                            f"run, or one of the analysis tables {', '.join('`' + k + '`' for k in ANALYSIS_TABLES)}")
    title, out_path = parse_meta(src, data)
    population = parse_population(src, data["neuron"], data["noise"])
    noise = population.noise

    analyses = parse_analyses(src, data, white=isinstance(noise, WhiteNoise))
    digest = hashlib.sha256(repr(sorted(_flatten(data))).encode()).hexdigest()[:16]
    if "run" not in data:
        return Scenario(source=Path(src), title=title, output=out_path, population=population, drive=None,
                        t_end=None, dt=None, record_interval=None, montecarlo_neurons=0, seed=0,
                        digest=digest, raw=data, analyses=analyses)

    # input
    inp, shape, (dcls, dallowed) = _select(src, "input", data["input"], "shape", INPUTS)
    if shape == "trace":
        _check_keys(src, "input", inp, dallowed)
        if "file" in inp:
            f = inp["file"]
            if not isinstance(f, str) or Path(f).is_absolute() or ".." in Path(f).parts:
                raise _err(src, "input", "file", f, "a CSV file name relative to the scenario")
            try:
                drv = drive_mod.Trace.from_csv(Path(src).parent / f)
            except (OSError, ValueError) as exc:
                raise ScenarioError(f"{src}: [input] key `file`: {exc}") from None
        else:
            ts, vs = inp.get("times"), inp.get("values")
            if not isinstance(ts, list) or not isinstance(vs, list):
                raise ScenarioError(f"{src}: [input] a trace needs `file`, or `times` and `values` lists")
            drv = _build(src, "input", drive_mod.Trace,
                         {"times": [_number(src, "input", "times", x) for x in ts],
                          "values": [_number(src, "input", "values", x) for x in vs]})
    else:
        _check_keys(src, "input", inp, dallowed, dallowed - {"phase"})
        drv = _build(src, "input", dcls, {k: _number(src, "input", k, val) for k, val in inp.items()})

    # run
    run = data["run"]
    _check_keys(src, "run", run, RUN_KEYS, {"t_end"})
    t_end = _number(src, "run", "t_end", run["t_end"])
    dt = _number(src, "run", "dt", run["dt"]) if "dt" in run else None
    rec = _number(src, "run", "record_interval", run["record_interval"]) if "record_interval" in run else None
    snap = _number(src, "run", "snapshot_interval", run["snapshot_interval"]) if "snapshot_interval" in run else None
    n_mc = run.get("montecarlo_neurons", 0)
    if isinstance(n_mc, bool) or not isinstance(n_mc, int) or not 0 <= n_mc <= MAX_NEURONS:
        raise _err(src, "run", "montecarlo_neurons", n_mc, f"an integer from 0 to {MAX_NEURONS}")
    seed = run.get("seed", 0)
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise _err(src, "run", "seed", seed, "a non-negative integer")
    _check_time_grid(src, t_end, dt, rec, snap)
    return Scenario(source=Path(src), title=title, output=out_path, population=population, drive=drv,
                    t_end=t_end, dt=dt, record_interval=rec, montecarlo_neurons=n_mc, seed=seed,
                    digest=digest, raw=data, snapshot_interval=snap, analyses=analyses)


def _output_folder(src, out: str) -> Path:
    """The scenario's ``output``: a plain relative folder below the scenario's folder.

    Rule (documented in DEVELOPERS.md, "Guarantees"): not absolute, no ``..``, not the
    scenario's folder itself (``.``), no control characters.  Only ``--out`` on the
    command line (or ``output=`` in :func:`popdens.runner.run_scenario`) may point
    elsewhere.  Symbolic links that lead outside are refused when the run starts.
    """
    expected = "a relative folder below the scenario's folder (no `..`, not absolute, not `.`)"
    if any(ord(c) < 32 or ord(c) == 127 for c in out):
        raise _err(src, "scenario", "output", out, expected + ", without control characters")
    path = Path(out)
    if path.is_absolute() or path.drive or ".." in path.parts or not path.parts or "\\" in out:
        raise _err(src, "scenario", "output", out, expected)
    return path


def _check_time_grid(src, t_end, dt, rec, snap=None) -> None:
    """Refuse run settings that no solver can use, before any work starts."""
    from ._recording import make_grid  # noqa: PLC0415 - avoid a cycle at import

    step = DEFAULT_DT if dt is None else dt
    key = "dt" if dt is not None else "t_end"
    try:
        n = v.positive("t_end", t_end) / v.positive("dt", step)
        if n > MAX_STEPS:
            raise ValueError(f"`t_end` / `dt` = {n:.3g} steps is more than the limit of {MAX_STEPS:.0e}; "
                             f"use a larger `dt` or split the run")
        make_grid(t_end, step, rec, snap)
    except ValueError as exc:
        msg = str(exc)
        named = [k for k in ("record_interval", "snapshot_interval", "t_end", "dt") if f"`{k}`" in msg]
        raise ScenarioError(f"{src}: [run] key `{named[0] if named else key}`: {msg}") from None


def _flatten(d: Any, prefix=""):
    if isinstance(d, dict):
        for k, v in d.items():
            yield from _flatten(v, f"{prefix}.{k}")
    else:
        yield (prefix, repr(d))


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
