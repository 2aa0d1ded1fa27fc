"""Sweeps in scenario files: the ``[sweep]`` table, the built-in analyses, and running them.

A scenario with a ``[sweep]`` table describes many runs: the base scenario
with some of its values replaced at each point.  Swept values are named by
dotted keys (quoted in TOML), each given a list of values or an evenly spaced
range::

    [sweep]
    analysis = "transfer"          # "summary" (default), "gain" or "transfer"
    mode = "grid"                  # "grid": every combination; "list": i-th values together
    seed = 7                       # default: [run] seed
    retries = 1                    # extra attempts for a point that raises
    frequencies = [1.0, 10.0, 100.0]   # Hz; transfer only
    "input.mu" = { start = 20.0, stop = 30.0, count = 11 }
    "noise.hazard.width" = [1.5, 2.0, 3.0]

Analyses (each maps one point's scenario to named outputs, units in the names):

``summary``
    time-domain run of the density solver (``popdens.simulate``) over the
    scenario's input: mean, peak, final rate (Hz), time of the peak (ms),
    final mean potential (mV); with ``montecarlo_neurons`` also the Monte Carlo
    mean rate and the share of output bins within 4 standard errors.
``gain``
    stationary rate (Hz) at the constant drive ``[input] mu`` from
    ``popdens.gain``, or the gain curve over ``drives`` (mV).
``transfer``
    amplitude (Hz/mV) and phase (degrees) of ``popdens.transfer`` at the
    constant drive ``[input] mu`` over ``frequencies`` (Hz).

``gain`` and ``transfer`` are looked up by name when used, so a sweep names a
clear error if this installation lacks them.
"""

from __future__ import annotations

import copy
import hashlib
import json
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..model import drive as drive_mod
from ..exceptions import ScenarioError
from .loader import load_scenario, parse_scenario
from ._schema import short
from .single import Scenario
from ..sweeps.engine import Curve, SweepResult, sweep

__all__ = ["ANALYSES", "ScenarioPoint", "SweepPlan", "plan_sweep", "run_sweep_scenario"]

#: Settings of the [sweep] table; every other key must be a dotted parameter key.
SETTINGS = {"analysis", "mode", "seed", "retries", "frequencies", "drives", "rates_over_time"}
MODES = ("grid", "list")
#: Tables whose values may be swept.
SWEEPABLE = ("neuron", "noise", "input", "run")
RANGE_KEYS = {"start", "stop", "count"}
#: Most parts of a swept dotted key (``noise.hazard.width`` has 3).
MAX_KEY_PARTS = 6
#: Largest number of values in a range (a guard against typos).
MAX_RANGE_COUNT = 100_000


# ------------------------------------------------------------------ analyses
def _constant_mu(sc: Scenario, analysis: str) -> float:
    if not isinstance(sc.drive, drive_mod.Constant):
        raise ValueError(f"analysis `{analysis}` needs [input] shape = 'constant' (its `mu` is the "
                         f"stationary drive, mV), got {type(sc.drive).__name__}")
    return float(sc.drive.mu)


def _reraise_interrupt(res) -> None:
    """The time-domain front ends turn Ctrl-C into a stopped result; a sweep must stop instead
    of recording the point as failed."""
    from ..result import STATUS_INTERRUPTED

    if res.status == STATUS_INTERRUPTED:
        raise KeyboardInterrupt(res.message)


def summary_analysis(sc: Scenario, seed: np.random.SeedSequence, options: dict) -> dict:
    """Density solution over the scenario's input, optionally checked by the Monte Carlo twin."""
    from ..solvers.frontend import simulate

    pred = simulate(sc.population, sc.drive, sc.t_end, sc.dt, record_interval=sc.record_interval, progress=False)
    _reraise_interrupt(pred)
    if not pred.success:
        raise RuntimeError(f"the density solver stopped: {pred.message}")
    width = np.diff(pred.t)
    k = int(np.argmax(pred.rate))
    out = {"mean_rate_Hz": float(np.sum(pred.rate[1:] * width) / np.sum(width)),
           "peak_rate_Hz": float(pred.rate[k]), "peak_time_ms": float(pred.t[k]),
           "final_rate_Hz": float(pred.rate[-1]), "final_mean_u_mV": float(pred.mean_u[-1])}
    if options.get("rates_over_time"):
        out["rate_Hz"] = Curve("t_ms", pred.t[1:], pred.rate[1:])
    if sc.montecarlo_neurons:
        from ..twins.agreement import agreement
        from ..twins.population import montecarlo

        mc = montecarlo(sc.population, sc.drive, sc.t_end, sc.montecarlo_neurons, dt=pred.dt,
                        seed=np.random.default_rng(seed), record_interval=sc.record_interval, progress=False)
        _reraise_interrupt(mc)
        check = agreement(pred, mc, drive=sc.drive)
        out["montecarlo_mean_rate_Hz"] = float(np.sum(mc.rate[1:] * width) / np.sum(width))
        out["montecarlo_fraction_within_4_se"] = float(check.fraction_within_4_se)
        out["montecarlo_chi2_p_value"] = float(check.p_value)
        out["montecarlo_mean_p_value"] = float(check.mean_p_value)
        out["montecarlo_agrees"] = float(check.agrees)
        if check.modulation is not None:
            out["montecarlo_modulation_Hz"] = float(check.modulation.amplitude_hz)
            out["predicted_modulation_Hz"] = float(check.modulation.predicted_amplitude_hz)
        if options.get("rates_over_time"):
            out["montecarlo_rate_Hz"] = Curve("t_ms", mc.t[1:], mc.rate[1:])
    return out


def gain_analysis(sc: Scenario, seed: np.random.SeedSequence, options: dict) -> dict:
    """Stationary rate at the constant drive, or along ``drives`` (mV)."""
    from ..theory.steady_state import gain

    if "drives" in options:
        mus = np.asarray(options["drives"], dtype=float)
        try:
            rates = np.asarray(gain(sc.population, mus), dtype=float).reshape(mus.shape)
        except (TypeError, ValueError):  # a scalar-only gain: one call per drive
            rates = np.array([float(gain(sc.population, float(m))) for m in mus])
        return {"rate_Hz": Curve("drive_mV", mus, rates)}
    return {"rate_Hz": float(np.asarray(gain(sc.population, _constant_mu(sc, "gain")), dtype=float))}


def transfer_analysis(sc: Scenario, seed: np.random.SeedSequence, options: dict) -> dict:
    """Amplitude (Hz/mV) and phase (degrees) of the transfer function over ``frequencies`` (Hz)."""
    from ..theory.linear_response import transfer

    f = np.asarray(options["frequencies"], dtype=float)
    chi = np.asarray(transfer(sc.population, _constant_mu(sc, "transfer"), f))
    return {"transfer_amplitude_Hz_per_mV": Curve("frequency_Hz", f, np.abs(chi)),
            "transfer_phase_deg": Curve("frequency_Hz", f, np.degrees(np.angle(chi)))}


def _check_summary(sc, options):
    pass


def _check_gain(sc, options):
    if "drives" not in options:
        _constant_mu(sc, "gain")


def _check_transfer(sc, options):
    _constant_mu(sc, "transfer")
    if "frequencies" not in options:
        raise ValueError("analysis `transfer` needs `frequencies` (a list of frequencies, Hz)")


#: name -> (analysis, check run once on the base scenario, options it accepts)
ANALYSES = {
    "summary": (summary_analysis, _check_summary, {"rates_over_time"}),
    "gain": (gain_analysis, _check_gain, {"drives"}),
    "transfer": (transfer_analysis, _check_transfer, {"frequencies"}),
}


# ------------------------------------------------------------------ one point
def _set_dotted(data: dict, key: str, value, src: str) -> None:
    parts = key.split(".")
    if parts[0] not in SWEEPABLE or not 2 <= len(parts) <= MAX_KEY_PARTS or not all(parts):
        raise ScenarioError(f"{src}: [sweep] key `{short(key)}` ({len(parts)} parts): expected a dotted key of at "
                            f"most {MAX_KEY_PARTS} parts into one of {list(SWEEPABLE)}, e.g. \"neuron.tau_m\"")
    node = data
    for i, part in enumerate(parts[:-1]):
        nxt = node.get(part) if isinstance(node, dict) else None
        if not isinstance(nxt, dict):
            raise ScenarioError(f"{src}: [sweep] key `{key}`: the scenario has no table "
                                f"[{'.'.join(parts[:i + 1])}]")
        node = nxt
    node[parts[-1]] = value


@dataclass(frozen=True)
class ScenarioPoint:
    """The analysis of one sweep point: the base scenario with the point's values set.

    Picklable (plain data only), so it runs in any worker process.

    Parameters
    ----------
    base : dict
        The scenario as read from TOML, without its ``[sweep]`` table.
    source : str
        The scenario file (absolute), for messages and relative trace files.
    analysis : str
        A key of :data:`ANALYSES`.
    options : dict
        The analysis' settings (``frequencies``, ``drives``).
    """

    base: dict
    source: str
    analysis: str
    options: dict

    def scenario(self, params: dict) -> Scenario:
        data = copy.deepcopy(self.base)
        for key, value in params.items():
            _set_dotted(data, key, value, self.source)
        return parse_scenario(data, self.source)

    def __call__(self, params: dict, seed: np.random.SeedSequence) -> dict:
        return ANALYSES[self.analysis][0](self.scenario(params), seed, self.options)

    def fingerprint(self) -> str:
        text = json.dumps([self.base, self.analysis, self.options], sort_keys=True, default=repr)
        return f"scenario:{self.analysis}:{hashlib.sha256(text.encode()).hexdigest()[:16]}"


@dataclass(frozen=True)
class SweepPlan:
    """A validated ``[sweep]`` table: the point function, the points, seed and retries."""

    point: ScenarioPoint
    points: object  # a mapping of axes (grid) or a list of dicts
    n_points: int
    seed: int
    retries: int


def _values(src, key, val) -> list:
    if isinstance(val, dict):
        if set(val) != RANGE_KEYS:
            raise ScenarioError(f"{src}: [sweep] key `{key}` = {val!r}: expected a list of values or "
                                "{ start = ..., stop = ..., count = ... }")
        a, b, n = val["start"], val["stop"], val["count"]
        for nm, x in (("start", a), ("stop", b)):
            if isinstance(x, bool) or not isinstance(x, (int, float)) or not math.isfinite(x):
                raise ScenarioError(f"{src}: [sweep] key `{key}`: `{nm}` = {x!r}: expected a finite number")
        if isinstance(n, bool) or not isinstance(n, int) or not 1 <= n <= MAX_RANGE_COUNT:
            raise ScenarioError(f"{src}: [sweep] key `{key}`: `count` = {n!r}: expected an integer "
                                f"from 1 to {MAX_RANGE_COUNT}")
        return [float(x) for x in np.linspace(float(a), float(b), n)]
    if not isinstance(val, list) or not val:
        raise ScenarioError(f"{src}: [sweep] key `{key}` = {val!r}: expected a non-empty list of values")
    for x in val:
        if isinstance(x, (dict, list)):
            raise ScenarioError(f"{src}: [sweep] key `{key}`: value {x!r}: expected numbers or strings")
        if isinstance(x, float) and not math.isfinite(x):
            raise ScenarioError(f"{src}: [sweep] key `{key}`: value {x!r}: expected a finite number")
    return list(val)


def _number_list(src, key, val, *, non_negative: bool) -> list[float]:
    if not isinstance(val, list) or not val or any(
            isinstance(x, bool) or not isinstance(x, (int, float)) or not math.isfinite(x)
            or (non_negative and x < 0) for x in val):
        what = "non-negative numbers" if non_negative else "finite numbers"
        raise ScenarioError(f"{src}: [sweep] key `{key}` = {val!r}: expected a non-empty list of {what}")
    return [float(x) for x in val]


def _unprefixed(exc: Exception, source: str) -> str:
    """The message without the leading ``file: `` that parse_scenario puts in front."""
    msg = str(exc)
    return msg[len(source) + 2:] if msg.startswith(f"{source}: ") else msg


def plan_sweep(sc: Scenario, *, validate_points: bool = True) -> SweepPlan:
    """Validate the ``[sweep]`` table of ``sc`` (and, by default, every point's scenario).

    Raises
    ------
    ScenarioError
        Naming the file, the key and what was expected, or the first point
        whose scenario is invalid.
    """
    src = str(sc.source)
    table = sc.raw.get("sweep")
    if not isinstance(table, dict):
        raise ScenarioError(f"{src}: no [sweep] table")
    settings = {k: val for k, val in table.items() if "." not in k}
    for k in settings:
        if k not in SETTINGS:
            import difflib

            near = difflib.get_close_matches(k, sorted(SETTINGS), n=1)
            hint = f"; did you mean `{near[0]}`?" if near else (
                f"; settings are {sorted(SETTINGS)}, swept values use dotted keys such as \"neuron.tau_m\"")
            raise ScenarioError(f"{src}: [sweep] unknown key `{k}`{hint}")
    analysis = settings.get("analysis", "summary")
    if analysis not in ANALYSES:
        raise ScenarioError(f"{src}: [sweep] key `analysis` = {analysis!r}: expected one of {sorted(ANALYSES)}")
    mode = settings.get("mode", "grid")
    if mode not in MODES:
        raise ScenarioError(f"{src}: [sweep] key `mode` = {mode!r}: expected one of {list(MODES)}")
    seed = settings.get("seed", sc.seed)
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise ScenarioError(f"{src}: [sweep] key `seed` = {seed!r}: expected a non-negative integer")
    retries = settings.get("retries", 1)
    if isinstance(retries, bool) or not isinstance(retries, int) or not 0 <= retries <= 100:
        raise ScenarioError(f"{src}: [sweep] key `retries` = {retries!r}: expected an integer from 0 to 100")
    _, check, accepted = ANALYSES[analysis]
    options = {}
    if "rates_over_time" in settings:
        if "rates_over_time" not in accepted:
            raise ScenarioError(f"{src}: [sweep] key `rates_over_time` is used by analysis `summary` only")
        if not isinstance(settings["rates_over_time"], bool):
            raise ScenarioError(f"{src}: [sweep] key `rates_over_time` = {settings['rates_over_time']!r}: expected "
                                "true or false")
        options["rates_over_time"] = settings["rates_over_time"]
    for k in ("frequencies", "drives"):
        if k in settings:
            if k not in accepted:
                raise ScenarioError(f"{src}: [sweep] key `{k}` is not used by analysis `{analysis}`")
            options[k] = _number_list(src, k, settings[k], non_negative=(k == "frequencies"))
    axes = {k: _values(src, k, val) for k, val in table.items() if "." in k}
    if not axes:
        raise ScenarioError(f"{src}: [sweep] names no values to sweep; add e.g. \"neuron.tau_m\" = [10.0, 20.0]")
    base = {k: val for k, val in sc.raw.items() if k != "sweep"}
    point = ScenarioPoint(base=base, source=str(Path(src).resolve()), analysis=analysis, options=options)
    if mode == "grid":
        points = axes
        n = math.prod(len(vs) for vs in axes.values())
    else:
        lengths = {k: len(vs) for k, vs in axes.items()}
        if len(set(lengths.values())) != 1:
            raise ScenarioError(f"{src}: [sweep] mode = 'list' needs lists of equal length, got {lengths}")
        n = next(iter(lengths.values()))
        points = [{k: axes[k][i] for k in axes} for i in range(n)]
    from ..sweeps.engine import grid_points

    all_points = grid_points(axes) if mode == "grid" else points
    for i, params in enumerate(all_points if validate_points else all_points[:1]):
        try:
            point_sc = point.scenario(params)
        except ScenarioError as exc:
            raise ScenarioError(f"{src}: [sweep] point {i} {short(params)}: {_unprefixed(exc, point.source)}") from None
        if i == 0:
            try:
                check(point_sc, options)
            except ValueError as exc:
                raise ScenarioError(f"{src}: [sweep] {exc}") from None
    return SweepPlan(point=point, points=points, n_points=n, seed=seed, retries=retries)


def run_sweep_scenario(scenario: Scenario | str | Path, output: str | Path | None = None, *,
                       backend: str | None = None, workers: int | None = None, scheduler: str | None = None,
                       resume: bool = False, overwrite: bool = False, retry_failed: bool = False,
                       figures: bool = True, progress: bool | None = None) -> SweepResult:
    """Run the sweep described by a scenario's ``[sweep]`` table.

    The output folder defaults to the scenario's ``[scenario] output`` next to
    the scenario file.  Other arguments are those of :func:`popdens.sweep`.

    Returns
    -------
    SweepResult
    """
    sc = scenario if isinstance(scenario, Scenario) else load_scenario(scenario)
    plan = plan_sweep(sc)
    dest = Path(output) if output is not None else sc.source.parent / sc.output
    return sweep(plan.point, plan.points, dest, seed=plan.seed, backend=backend, workers=workers,
                 scheduler=scheduler, retries=plan.retries, resume=resume, overwrite=overwrite,
                 retry_failed=retry_failed, figures=figures, progress=progress, title=sc.title)
