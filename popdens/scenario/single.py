"""Scenario files (TOML): a strict schema loaded into the same objects the Python API uses.

Top-level tables
----------------
``[scenario]``  title, output folder (relative to the scenario file), notes
``[neuron]``    ``model`` = "LIF" | "EIF" | "QIF" | "PIF" | "custom" and that model's parameters;
                optional ``[[neuron.adaptation]]`` entries (``kind`` = "current" | "threshold",
                ``tau`` ms, ``jump`` mV, ``coupling``), see :func:`parse_adaptation`
``[noise]``     ``kind`` = "escape" with a ``[noise.hazard]`` table, "white" with ``sigma`` (mV),
                "coloured" with ``sigma`` (mV) and ``tau_syn`` (ms), or "shot" (finite PSPs) with
                ``exc_rate`` (Hz), ``exc_psp`` (mV), optional ``inh_rate`` (Hz), ``inh_psp`` (mV) and
                ``amplitudes`` = "fixed" | "exponential", or "conductance" (Poisson input through
                exponential conductances, leak units) with ``exc_rate`` (Hz), ``exc_weight`` (1),
                ``exc_tau`` (ms), ``exc_reversal`` (mV), optional ``inh_rate``, ``inh_weight``,
                ``inh_tau``, ``inh_reversal``
``[input]``     ``shape`` = "constant" | "step" | "pulse" | "ramp" | "sine" | "trace" and its parameters
``[run]``       ``t_end``, ``dt``, ``record_interval``, ``snapshot_interval`` (ms), ``montecarlo_neurons``, ``seed``;
                ``population_size`` (escape noise: also integrate a population of that many neurons, the
                finite-size mesoscopic equations) with ``trials`` realisations (default 10)
``[gain]``, ``[stationary]``, ``[transfer]``, ``[approximations]``  steady-state and linear-response
                analyses, the coloured- or shot-noise approximations against the twin
                (see :mod:`popdens.scenario.analyses`)
``[[cohort]]``, ``[[pathway]]``, ``[network]``  a network scenario instead (see
                :mod:`popdens.scenario.network`)
``[fit]``       fit the model to recorded data (see :mod:`popdens.scenario.fit`)
``[sweep]``     optional: values to sweep and the analysis; checked by :mod:`popdens.scenario.sweep`

``[neuron]`` and ``[noise]`` are required, and at least one analysis: a
time-domain run (``[input]`` with ``[run]``) or an analysis table.

Unknown keys are rejected with the nearest valid key suggested; each error
names the file, the table, the key, the value and what was expected.
Expressions (custom drift or escape function) go through the safe parser.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from pathlib import Path

from .. import _validation as v
from ..exceptions import ScenarioError
from ..model import drive as drive_mod
from ..model import hazard as hazard_mod
from ..model.adaptation import Adaptation, MovingThreshold
from ..model.neurons import EIF, LIF, PIF, QIF, CustomNeuron
from ..model.noise import EscapeNoise, Population, WhiteNoise
from ..model.shot import AMPLITUDE_LAWS, ShotNoise
from ..model.conductance import ConductanceNoise
from ..model.synaptic import ColouredNoise
from ..solvers._recording import make_grid
from ._schema import build, check_keys, err, flatten, model_params, number, parse_meta, select
from .analyses import ANALYSIS_TABLES, check_approximations, parse_analyses
from .fit import parse_fit

__all__ = ["Scenario", "parse_population", "parse_single_scenario"]

NEURON_MODELS = {
    "LIF": (LIF, {"tau_m", "threshold", "reset", "refractory", "rest"}, {"rest"}),
    "EIF": (EIF, {"tau_m", "soft_threshold", "slope_factor", "cutoff", "reset", "refractory", "rest"}, {"rest"}),
    "QIF": (QIF, {"tau_m", "critical", "cutoff", "reset", "refractory", "rest"}, {"rest"}),
    "PIF": (PIF, {"tau_m", "threshold", "reset", "refractory"}, set()),
    "custom": (CustomNeuron, {"drift", "tau_m", "threshold", "reset", "refractory", "parameters", "cutoff", "rest"},
               {"parameters", "cutoff", "rest"}),
}
ADAPTATION_KINDS = {
    "current": (Adaptation, {"tau", "jump", "coupling"}),
    "threshold": (MovingThreshold, {"tau", "jump"}),
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
RUN_KEYS = {"t_end", "dt", "record_interval", "snapshot_interval", "montecarlo_neurons", "seed", "population_size",
            "trials"}
#: Realisations of a finite population when ``population_size`` is given without ``trials``.
DEFAULT_TRIALS = 10
#: Most realisations of a finite population in a scenario.
MAX_TRIALS = 100_000
TOP_LEVEL = {"scenario", "neuron", "noise", "input", "run", "sweep", "fit"} | set(ANALYSIS_TABLES)
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
    #: ``(table name, analysis object)`` pairs, see :mod:`popdens.scenario.analyses`
    analyses: tuple = ()
    #: Neurons of the finite population integrated beside the infinite one (0: none) and its realisations.
    population_size: int = 0
    trials: int = 0

    @property
    def runs_in_time(self) -> bool:
        """Whether the scenario asks for a time-domain run (``[input]`` and ``[run]``)."""
        return self.t_end is not None






def parse_adaptation(src, table: str, data) -> list:
    """``[[neuron.adaptation]]`` entries → :class:`~popdens.Adaptation` / :class:`~popdens.MovingThreshold` objects.

    Each entry: ``kind`` = "current" (default; keys ``tau`` ms, ``jump`` mV,
    optional ``coupling``) or "threshold" (keys ``tau`` ms, ``jump`` mV).
    """
    if data is None:
        return []
    if not isinstance(data, list):
        raise err(src, table, None, data, "an array of tables ([[neuron.adaptation]])")
    out = []
    for i, entry in enumerate(data):
        where = f"{table}[{i}]"
        if not isinstance(entry, dict):
            raise err(src, where, None, entry, "a table with `tau` and `jump`")
        kind = entry.get("kind", "current")
        if kind not in ADAPTATION_KINDS:
            raise err(src, where, "kind", kind, f"one of {sorted(ADAPTATION_KINDS)}")
        cls, allowed = ADAPTATION_KINDS[kind]
        check_keys(src, where, entry, allowed | {"kind"}, {"tau", "jump"})
        out.append(build(src, where, cls, {k: number(src, where, k, val) for k, val in entry.items() if k != "kind"}))
    return out


def parse_population(src, neuron_data, noise_data, prefix: str = "") -> Population:
    """The neuron and noise tables (``[{prefix}neuron]``, ``[{prefix}noise]``) → a validated Population."""
    t_neuron, t_noise = f"{prefix}neuron", f"{prefix}noise"
    nd, _, (cls, allowed, optional) = select(src, t_neuron, neuron_data, "model", NEURON_MODELS)
    adaptation = parse_adaptation(src, f"{t_neuron}.adaptation", nd.pop("adaptation", None))
    check_keys(src, t_neuron, nd, allowed | {"adaptation"}, allowed - optional)
    params = model_params(src, t_neuron, nd, text_key="drift")
    if adaptation:
        params["adaptation"] = adaptation
    neuron = build(src, t_neuron, cls, params, "drift")

    no = noise_data
    if not isinstance(no, dict):
        raise err(src, t_noise, None, no, "a table")
    kind = no.get("kind")
    if kind == "escape":
        check_keys(src, t_noise, no, {"kind", "hazard"}, {"kind", "hazard"})
        t_hz = f"{t_noise}.hazard"
        hz, _, (hcls, hallowed) = select(src, t_hz, no["hazard"], "shape", HAZARDS)
        required = hallowed - {"parameters"}
        check_keys(src, t_hz, hz, hallowed, required)
        hp = model_params(src, t_hz, hz, text_key="expression")
        noise = EscapeNoise(build(src, t_hz, hcls, hp, "expression"))
    elif kind == "white":
        check_keys(src, t_noise, no, {"kind", "sigma"}, {"kind", "sigma"})
        noise = build(src, t_noise, WhiteNoise, {"sigma": number(src, t_noise, "sigma", no["sigma"])})
    elif kind == "coloured":
        check_keys(src, t_noise, no, {"kind", "sigma", "tau_syn"}, {"kind", "sigma", "tau_syn"})
        noise = build(src, t_noise, ColouredNoise, {k: number(src, t_noise, k, no[k]) for k in ("sigma", "tau_syn")})
    elif kind == "shot":
        keys = {"exc_rate", "exc_psp", "inh_rate", "inh_psp"}
        check_keys(src, t_noise, no, keys | {"kind", "amplitudes"}, {"kind", "exc_rate", "exc_psp"})
        params = {k: number(src, t_noise, k, no[k]) for k in keys if k in no}
        if "amplitudes" in no:
            if no["amplitudes"] not in AMPLITUDE_LAWS:
                raise err(src, t_noise, "amplitudes", no["amplitudes"], " or ".join(f"'{a}'" for a in AMPLITUDE_LAWS))
            params["amplitudes"] = no["amplitudes"]
        noise = build(src, t_noise, ShotNoise, params)
    elif kind == "conductance":
        keys = {"exc_rate", "exc_weight", "exc_tau", "exc_reversal", "inh_rate", "inh_weight", "inh_tau",
                "inh_reversal"}
        check_keys(src, t_noise, no, keys | {"kind"}, {"kind", "exc_rate", "exc_weight", "exc_tau", "exc_reversal"})
        noise = build(src, t_noise, ConductanceNoise, {k: number(src, t_noise, k, no[k]) for k in keys if k in no})
    else:
        raise err(src, t_noise, "kind", kind, "'escape', 'white', 'coloured', 'shot' or 'conductance'")
    return build(src, t_neuron, Population, {"neuron": neuron, "noise": noise})


def parse_single_scenario(data: dict, source: str | Path = "<scenario>") -> Scenario:
    """Validate a single-population scenario given as a dict (as read from TOML)."""
    src = str(source)
    check_keys(src, "", data, TOP_LEVEL, {"neuron", "noise"})
    if ("input" in data) != ("run" in data):
        missing = "run" if "input" in data else "input"
        raise ScenarioError(f"{src}: missing table `{missing}`: a time-domain run needs both [input] and [run]")
    if "run" not in data and not any(k in data for k in (*ANALYSIS_TABLES, "fit")):
        raise ScenarioError(f"{src}: nothing to compute: add the tables `input` and `run` for a time-domain "
                            f"run, or one of the analysis tables "
                            f"{', '.join('`' + k + '`' for k in (*ANALYSIS_TABLES, 'fit'))}")
    title, out_path = parse_meta(src, data)
    population = parse_population(src, data["neuron"], data["noise"])
    noise = population.noise

    analyses = parse_analyses(src, data, white=isinstance(noise, (WhiteNoise, ColouredNoise)))
    if "approximations" in data:
        check_approximations(src, data["approximations"], noise)
    if "fit" in data:
        analyses = (*analyses, ("fit", parse_fit(src, data["fit"])))
    digest = hashlib.sha256(repr(sorted(flatten(data))).encode()).hexdigest()[:16]
    if "run" not in data:
        return Scenario(source=Path(src), title=title, output=out_path, population=population, drive=None,
                        t_end=None, dt=None, record_interval=None, montecarlo_neurons=0, seed=0,
                        digest=digest, raw=data, analyses=analyses)

    # input
    inp, shape, (dcls, dallowed) = select(src, "input", data["input"], "shape", INPUTS)
    if shape == "trace":
        check_keys(src, "input", inp, dallowed)
        if "file" in inp:
            f = inp["file"]
            if not isinstance(f, str) or Path(f).is_absolute() or ".." in Path(f).parts:
                raise err(src, "input", "file", f, "a CSV file name relative to the scenario")
            try:
                drv = drive_mod.Trace.from_csv(Path(src).parent / f)
            except (OSError, ValueError) as exc:
                raise ScenarioError(f"{src}: [input] key `file`: {exc}") from None
        else:
            ts, vs = inp.get("times"), inp.get("values")
            if not isinstance(ts, list) or not isinstance(vs, list):
                raise ScenarioError(f"{src}: [input] a trace needs `file`, or `times` and `values` lists")
            drv = build(src, "input", drive_mod.Trace,
                         {"times": [number(src, "input", "times", x) for x in ts],
                          "values": [number(src, "input", "values", x) for x in vs]})
    else:
        check_keys(src, "input", inp, dallowed, dallowed - {"phase"})
        drv = build(src, "input", dcls, {k: number(src, "input", k, val) for k, val in inp.items()})

    # run
    run = data["run"]
    check_keys(src, "run", run, RUN_KEYS, {"t_end"})
    t_end = number(src, "run", "t_end", run["t_end"])
    dt = number(src, "run", "dt", run["dt"]) if "dt" in run else None
    rec = number(src, "run", "record_interval", run["record_interval"]) if "record_interval" in run else None
    snap = number(src, "run", "snapshot_interval", run["snapshot_interval"]) if "snapshot_interval" in run else None
    n_mc = run.get("montecarlo_neurons", 0)
    if isinstance(n_mc, bool) or not isinstance(n_mc, int) or not 0 <= n_mc <= MAX_NEURONS:
        raise err(src, "run", "montecarlo_neurons", n_mc, f"an integer from 0 to {MAX_NEURONS}")
    seed = run.get("seed", 0)
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise err(src, "run", "seed", seed, "a non-negative integer")
    _check_time_grid(src, t_end, dt, rec, snap)
    n_fin, trials = _finite_population(src, run, population, t_end, dt)
    return Scenario(source=Path(src), title=title, output=out_path, population=population, drive=drv,
                    t_end=t_end, dt=dt, record_interval=rec, montecarlo_neurons=n_mc, seed=seed,
                    digest=digest, raw=data, snapshot_interval=snap, analyses=analyses,
                    population_size=n_fin, trials=trials)


def _finite_population(src, run, population, t_end, dt) -> tuple[int, int]:
    """``population_size`` and ``trials`` of ``[run]``: checked for the population and the step budget."""
    if "population_size" not in run:
        if "trials" in run:
            raise err(src, "run", "trials", run["trials"], "given only with `population_size`")
        return 0, 0
    n = run["population_size"]
    if isinstance(n, bool) or not isinstance(n, int) or not 1 <= n <= MAX_NEURONS:
        raise err(src, "run", "population_size", n, f"an integer from 1 to {MAX_NEURONS}")
    if not isinstance(population.noise, EscapeNoise):
        raise err(src, "run", "population_size", n, "absent for white noise (finite-size integration is for "
                  "escape noise; use `montecarlo_neurons` for a finite white-noise population)")
    if population.neuron.adaptation:
        raise err(src, "run", "population_size", n, "absent for adapting neurons (not supported yet)")
    trials = run.get("trials", DEFAULT_TRIALS)
    if isinstance(trials, bool) or not isinstance(trials, int) or not 1 <= trials <= MAX_TRIALS:
        raise err(src, "run", "trials", trials, f"an integer from 1 to {MAX_TRIALS}")
    steps = t_end / (DEFAULT_DT if dt is None else dt) * trials
    if steps > MAX_STEPS:
        raise err(src, "run", "trials", trials, f"fewer: `trials` x `t_end` / `dt` = {steps:.3g} steps is more than "
                  f"the limit of {MAX_STEPS:.0e}")
    return n, trials



def _check_time_grid(src, t_end, dt, rec, snap=None) -> None:
    """Refuse run settings that no solver can use, before any work starts."""
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
