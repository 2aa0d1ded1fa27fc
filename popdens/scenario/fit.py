"""The ``[fit]`` table of a scenario: fit the scenario's model to recorded data.

Keys
----
``kind``
    ``"psth"`` (spike trains under a stimulus, escape noise), ``"isi"`` (ISIs
    under a constant drive) or ``"gain"`` (a measured f-I curve).
``data``
    The data file, relative to the scenario's folder: spike trains as
    ``.nwb``, ``.csv`` (trial id, spike time) or ``.npz`` for ``psth`` and
    ``isi``; a CSV of drive (mV), rate (Hz), SE (Hz) for ``gain``.
``free``
    Table of the parameters to fit: ``name = start`` or ``name = [low, high]``
    (the model's parameter names, plus ``mu``, ``scale``, ``offset``).
``stimulus`` (psth)
    Stimulus file (``.csv``: time ms, value; or the same ``.nwb`` with
    ``stimulus_name``); ``scale`` and ``offset`` map it to the drive (mV).
``mu`` (isi)
    The constant drive (mV) (start value when ``mu`` is free).
``unit``, ``duration``
    Time unit of the spike file (``"ms"`` or ``"s"``) and trial length.
``dt``, ``profile``
    Likelihood step (ms, psth) and profile-likelihood intervals (true/false).
``history`` (psth, adapting neurons)
    The first ``history`` ms of every trial only set the adaptation; the
    log-likelihood counts what follows (ms, >= 0 and shorter than a trial;
    default five times the slowest adaptation time constant, see
    :func:`popdens.fit_psth`).

Outputs: ``fit.csv`` (one row per free parameter: estimate, SE, Wald and
profile intervals, with the log-likelihood, AIC and goodness of fit in the
header) and the fit figure (data against the fitted model, KS plot).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from ..exceptions import PopdensError, ScenarioError
from .analyses import _err, _finite, _unknown, describe_population, write_table

__all__ = ["FitTable", "parse_fit"]

KEYS = {"kind", "data", "free", "stimulus", "stimulus_name", "mu", "scale", "offset", "unit", "duration", "dt",
        "profile", "history"}
KINDS = ("psth", "isi", "gain")


def _relative_file(src, key, value) -> Path:
    if not isinstance(value, str) or not value or Path(value).is_absolute() or ".." in Path(value).parts:
        raise _err(src, "fit", key, value, "a file name relative to the scenario's folder (no '..')")
    path = Path(src).parent / value
    if not path.is_file():
        raise _err(src, "fit", key, value, f"an existing file (not found: {path})")
    return path


@dataclass(frozen=True)
class FitTable:
    """A parsed ``[fit]`` table."""

    kind: str
    data: Path
    free: dict
    stimulus: Path | None
    stimulus_name: str | None
    mu: float | None
    scale: float
    offset: float
    unit: str | None
    duration: float | None
    dt: float
    profile: bool
    history: float | None = None

    def run(self, population):
        import popdens.fitting as fitting

        if self.kind == "gain":
            return fitting.fit_gain(population, fitting.load_gain_curve(self.data), self.free, scale=self.scale,
                                    offset=self.offset, profile=self.profile)
        spikes = fitting.load_spike_trains(self.data, unit=self.unit, duration=self.duration)
        if self.kind == "isi":
            return fitting.fit_isi(population, spikes, self.free, mu=self.mu, profile=self.profile)
        stim = fitting.load_stimulus(self.stimulus, name=self.stimulus_name)
        return fitting.fit_psth(population, spikes, stim, self.free, dt=self.dt, scale=self.scale,
                                offset=self.offset, profile=self.profile, history=self.history)

    def write(self, population, folder: Path, header: dict) -> dict:
        from ..plotting import save_figure

        try:
            fit = self.run(population)
        except (PopdensError, ValueError, ImportError) as exc:
            raise ScenarioError(f"[fit]: {exc}") from None
        rows = fit.table()
        cols = {"estimate": [r["estimate"] for r in rows], "se": [r["se"] for r in rows],
                "wald_low": [r["wald_low"] for r in rows], "wald_high": [r["wald_high"] for r in rows]}
        if fit.profile is not None:
            cols["profile_low"] = [r["profile_low"] for r in rows]
            cols["profile_high"] = [r["profile_high"] for r in rows]
        goodness = {k: float(val) for k, val in fit.goodness.items() if not hasattr(val, "__len__")}
        write_table(folder / "fit.csv", cols,
                    {**header, "kind": self.kind, "data": self.data.name,
                     "parameters (rows)": ", ".join(f"{n} ({fit.units[n]})" for n in fit.names),
                     "loglik": fit.loglik, "aic": fit.aic, "goodness": goodness,
                     "fitted population": describe_population(fit.population)})
        figs = save_figure(fit.plot(), folder, "fit")
        return {"table": "fit.csv", "figures": figs, "kind": self.kind, "estimates": fit.estimates, "se": fit.se,
                "loglik": fit.loglik, "aic": fit.aic, "goodness": goodness, "n_observations": fit.n_observations}


def parse_fit(src, data) -> FitTable:
    """The ``[fit]`` table of a scenario (``data`` as read from TOML)."""
    _unknown(src, "fit", data, KEYS, ("kind", "data", "free"))
    kind = data["kind"]
    if kind not in KINDS:
        raise _err(src, "fit", "kind", kind, " or ".join(repr(k) for k in KINDS))
    free = data["free"]
    if not isinstance(free, dict) or not free:
        raise _err(src, "fit", "free", free, "a table of parameter = start or parameter = [low, high]")
    parsed = {}
    for name, spec in free.items():
        if isinstance(spec, list):
            if len(spec) != 2:
                raise _err(src, "fit.free", name, spec, "a start value or a [low, high] range")
            parsed[name] = tuple(_finite(src, "fit.free", name, x) for x in spec)
        else:
            parsed[name] = _finite(src, "fit.free", name, spec)
    path = _relative_file(src, "data", data["data"])
    stim = None
    if kind == "psth":
        if "stimulus" not in data:
            raise ScenarioError(f"{src}: [fit] missing required key `stimulus` (kind = 'psth')")
        stim = _relative_file(src, "stimulus", data["stimulus"])
    elif "stimulus" in data:
        raise _err(src, "fit", "stimulus", data["stimulus"], "no stimulus (only kind = 'psth' has one)")
    mu = None
    if kind == "isi":
        if "mu" not in data:
            raise ScenarioError(f"{src}: [fit] missing required key `mu` (kind = 'isi': the constant drive, mV)")
        mu = _finite(src, "fit", "mu", data["mu"])
    unit = data.get("unit")
    if unit is not None and unit not in ("ms", "s"):
        raise _err(src, "fit", "unit", unit, "'ms' or 's'")
    duration = _finite(src, "fit", "duration", data["duration"]) if "duration" in data else None
    dt = _finite(src, "fit", "dt", data.get("dt", 0.1))
    if not dt > 0 or (duration is not None and not duration > 0):
        raise _err(src, "fit", "dt" if not dt > 0 else "duration", dt if not dt > 0 else duration, "a number > 0")
    profile = data.get("profile", False)
    if not isinstance(profile, bool):
        raise _err(src, "fit", "profile", profile, "true or false")
    name = data.get("stimulus_name")
    if name is not None and not isinstance(name, str):
        raise _err(src, "fit", "stimulus_name", name, "the name of an NWB acquisition")
    scale = _finite(src, "fit", "scale", data.get("scale", 1.0))
    offset = _finite(src, "fit", "offset", data.get("offset", 0.0))
    history = None
    if "history" in data:
        if kind != "psth":
            raise _err(src, "fit", "history", data["history"], "no history (only kind = 'psth' has one)")
        history = _finite(src, "fit", "history", data["history"])
        if history < 0.0 or (duration is not None and history >= duration):
            raise _err(src, "fit", "history", history, "a number of ms >= 0 and shorter than `duration`")
    return FitTable(kind, path, parsed, stim, name, mu, scale, offset, unit, duration, dt, profile, history)
