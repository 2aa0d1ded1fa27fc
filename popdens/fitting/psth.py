"""Fitting escape-noise neurons to spike trains recorded under a known, time-varying stimulus.

The exact point-process likelihood of every spike train given the stimulus
(:mod:`popdens.fitting._likelihood`) is maximised over the free parameters:
escape-function parameters, neuron parameters (``refractory``...), and the
map from the stimulus to the drive, ``mu(t) = scale * stimulus(t) + offset``
(mV).  For an exponential escape function on a LIF with fixed time
constants the log-likelihood is concave in the log-linear parameters
(Paninski 2004, Network 15:243), so the maximum is unique; note that with an
exponential hazard ``rate``, ``width``, ``scale`` and ``offset`` are not all
identifiable at once (the hazard depends on ``(u - threshold)/width`` only):
free at most three of them.

Adapting neurons (``adaptation=[...]``: adaptation currents and moving
thresholds) have an intensity that depends on every earlier spike of the
train through the spike-triggered kernels; the likelihood steps each trial's
adaptation exactly as the Monte Carlo twin does, starting at the trial's
first spike.  The adaptation left by spikes before the recording is unknown,
so the first ``history`` ms of every trial only set the adaptation (default
``HISTORY_TAUS`` times the slowest adaptation time constant, after which
that unknown part has decayed to ``exp(-HISTORY_TAUS)`` = 0.7 % of its
value); the log-likelihood counts the spikes and silences after it.
"""

from __future__ import annotations

import math

import numpy as np

from .. import _validation as v
from ..model.drive import Drive, Trace, as_drive
from ..exceptions import ConvergenceError
from ..model.adaptation import step_args
from ..model.noise import EscapeNoise
from ..twins.population import _escape_args
from ._likelihood import escape_train_loglik, escape_train_loglik_adapting
from .data import SpikeTrains
from .estimate import FitResult, maximise
from .params import ParameterSet
from .rescaling import ks_uniform

__all__ = ["fit_psth", "psth_loglik"]

#: Default likelihood time step (ms): the Monte Carlo twin's default.
DEFAULT_DT = 0.1
#: Trials of the first, cheap optimisation (when there are at least twice as many).
WARM_TRIALS = 10
#: Default PSTH bin (ms) of the predicted-vs-observed figure.
PSTH_BIN_MS = 10.0
#: Default history of adapting neurons, in units of the slowest adaptation time constant.
HISTORY_TAUS = 5.0


def _history_steps(population, history, dt: float, duration: float) -> int:
    """Steps at the start of each trial that only set the adaptation (0 for a neuron without adaptation)."""
    nrn = population.neuron
    if history is None:
        history = HISTORY_TAUS * max(a.tau for a in nrn.adaptation) if nrn.adaptation else 0.0
    history = v.non_negative("history", history)
    if history > 0.0 and not nrn.adaptation:
        raise ValueError(f"`history` is for adapting neurons (it sets their adaptation), got {history:g} ms; "
                         "without adaptation every trial starts exactly at its first spike")
    if history >= duration:
        raise ValueError(f"`history` ({history:g} ms) must be shorter than the recording ({duration:g} ms): "
                         "the likelihood counts the spikes after it")
    return int(math.ceil(history / dt - 1e-9))


class _Binned:
    """Spike trains on a time grid of step ``dt`` and the stimulus at the grid times."""

    def __init__(self, spikes: SpikeTrains, stimulus: Drive, dt: float, k_count: int = 0):
        self.dt = dt
        self.k_count = int(k_count)
        self.n_steps = v.n_steps_for(spikes.duration, dt, name_t="duration")
        bins, first = [], [0]
        for i, tr in enumerate(spikes.trains):
            b = np.floor(tr / dt + 1e-9).astype(np.int64)
            if b.size > 1 and np.any(np.diff(b) == 0):
                raise ValueError(f"trial {spikes.ids[i]!r} has two spikes within one step of `dt` = {dt!r} ms: "
                                 "use a smaller `dt`")
            bins.append(b)
            first.append(first[-1] + b.size)
        self.bins = np.ascontiguousarray(np.concatenate(bins))
        self.first = np.asarray(first, dtype=np.int64)
        self.t = np.arange(self.n_steps + 1) * dt
        self.stimulus = np.asarray(stimulus(self.t), dtype=float)
        if not np.all(np.isfinite(self.stimulus)):
            raise ValueError("the stimulus is not finite on the recording span")
        n = spikes.n_trials
        self.scratch = [np.zeros(n) for _ in range(4)] + [np.zeros(n, dtype=np.int64)]
        self.rescaled = np.full(self.bins.size, np.nan)
        #: spikes after the history: the observations of the likelihood
        self.n_counted = int(np.sum(self.bins >= self.k_count))

    def loglik(self, population, drives, record=False, uniforms=None):
        if not isinstance(population.noise, EscapeNoise):
            raise ValueError("the spike-train (PSTH) likelihood needs an escape-noise population")
        mu = drives["scale"] * self.stimulus + drives["offset"]
        args = _escape_args(population, self.dt)
        nrn, hz = population.neuron, population.noise.hazard
        size = max(nrn.program[0].size, hz.program[0].size) + 2
        u = uniforms if uniforms is not None else np.zeros(1)
        if nrn.adaptation:
            adapt = step_args(nrn, self.dt)
            st = np.zeros((len(nrn.adaptation), self.first.size - 1))
            return escape_train_loglik_adapting(*args, *adapt, st, mu, self.bins, self.first, self.k_count,
                                                *self.scratch, self.rescaled, u, record, np.empty(size),
                                                np.zeros(3))
        if self.k_count:
            raise ValueError("`history` is for adapting neurons (it sets their adaptation); without adaptation "
                             "every trial starts exactly at its first spike")
        return escape_train_loglik(*args, mu, self.bins, self.first, *self.scratch, self.rescaled, u, record,
                                   np.empty(size), np.zeros(3))


def psth_loglik(population, spikes: SpikeTrains, stimulus, *, dt=DEFAULT_DT, scale=1.0, offset=0.0,
                history=None) -> float:
    """Log-likelihood of spike trains under an escape-noise population driven by ``scale * stimulus + offset``.

    The discrete-time point-process log-likelihood at step ``dt`` (ms),
    conditioned on each trial's first spike (see
    :mod:`popdens.fitting._likelihood`); for adapting neurons, on the
    spikes of the first ``history`` ms too (see :func:`fit_psth`).
    """
    if not isinstance(spikes, SpikeTrains):
        raise ValueError(f"`spikes` must be SpikeTrains, got {type(spikes).__name__}")
    dt = v.positive("dt", dt)
    data = _Binned(spikes, as_drive(stimulus), dt, _history_steps(population, history, dt, spikes.duration))
    return float(data.loglik(population, {"scale": v.as_finite_float("scale", scale),
                                          "offset": v.as_finite_float("offset", offset)}))


def fit_psth(population, spikes: SpikeTrains, stimulus, free, *, dt=DEFAULT_DT, scale=1.0, offset=0.0,
             profile=False, seed=0, psth_bin=PSTH_BIN_MS, predict=True, history=None) -> FitResult:
    """Fit an escape-noise population to spike trains recorded under a known stimulus.

    Parameters
    ----------
    population : Population
        Escape-noise model; its parameters are the fixed values and the
        start of the free ones.
    spikes : SpikeTrains
        Repeated trials (or independent neurons) under the same stimulus (ms).
    stimulus : Drive or float
        The stimulus over trial time (ms).  The drive is ``scale *
        stimulus + offset`` (mV).
    free : sequence of str or mapping
        Parameters to fit (see :class:`popdens.fitting.params.ParameterSet`),
        e.g. ``["rate", "width", "refractory"]`` or ``{"offset": (0, 20)}``;
        for adapting neurons also ``"adaptation[k].jump"`` (mV),
        ``"adaptation[k].tau"`` (ms) or ``"adaptation[k].coupling"`` of the
        neuron's ``k``-th adaptation component (from 0).
    dt : float
        Likelihood time step (ms); must divide the trial duration and leave
        at most one spike per step of each trial.
    scale, offset : float
        Drive map (mV per stimulus unit, mV): fixed values or start values.
    profile : bool
        Also compute 95 % profile-likelihood intervals (slower).
    seed : int
        Seed of the uniform numbers of the discrete-time rescaling correction.
    psth_bin : float
        Bin (ms) of the observed PSTH in the figure.
    predict : bool
        Compute the predicted PSTH (refractory-density solver at the
        estimates) for the figure; ``False`` skips it (e.g. in repeated fits).
    history : float, optional
        Adapting neurons only: the first ``history`` ms of every trial set
        the adaptation and the log-likelihood counts what follows (default
        ``HISTORY_TAUS`` = 5 times the slowest adaptation time constant).
        The adaptation left by spikes before the recording decays as
        ``exp(-history / tau)``; ``history`` = 0 assumes none (each trial
        starts at its first spike with that spike's adaptation alone).
        When an adaptation ``tau`` is free the default is set from its
        start value.

    Returns
    -------
    FitResult
        Estimates with standard errors (observed information), log-likelihood
        and AIC, the time-rescaling KS test in ``goodness`` and the predicted
        (refractory-density solver) against the observed PSTH in ``.plot()``.
    """
    if not isinstance(spikes, SpikeTrains):
        raise ValueError(f"`spikes` must be SpikeTrains, got {type(spikes).__name__}")
    if not isinstance(population.noise, EscapeNoise):
        raise ValueError("`population`: the spike-train (PSTH) fit needs escape noise; for white noise fit ISIs "
                         "under constant drive (fit_isi)")
    stimulus = as_drive(stimulus)
    dt = v.positive("dt", dt)
    k_count = _history_steps(population, history, dt, spikes.duration)
    data = _Binned(spikes, stimulus, dt, k_count)
    params = ParameterSet.make(population, free, {"scale": v.as_finite_float("scale", scale),
                                                  "offset": v.as_finite_float("offset", offset)})
    if "refractory" in params.names:
        isis = spikes.isis()
        if isis.size:
            lo, hi = params.bounds[params.names.index("refractory")]
            hi = min(hi, float(isis.min()))
            b = list(params.bounds)
            b[params.names.index("refractory")] = (lo, hi)
            object.__setattr__(params, "bounds", tuple(b))
    n_intervals = int(sum(max(tr.size - 1, 0) for tr in spikes.trains)) if not k_count else data.n_counted
    warm = None
    if spikes.n_trials >= 2 * WARM_TRIALS:
        # optimise on every m-th trial first, then finish with Newton steps on all trials
        m = spikes.n_trials // WARM_TRIALS
        part = SpikeTrains(spikes.trains[::m], duration=spikes.duration)
        warm_data = _Binned(part, stimulus, dt, k_count)
        warm = warm_data.loglik
        fraction = warm_data.n_counted / max(data.n_counted, 1)
    fit = maximise(data.loglik, params, kind="psth", n_observations=n_intervals, profile=profile, warm=warm,
                   warm_fraction=fraction if warm is not None else 1.0)
    if "refractory" in fit.names and spikes.isis().size:
        shortest = float(spikes.isis().min())
        if fit.estimates["refractory"] + 2.0 * dt >= shortest:
            raise ConvergenceError(
                f"the estimate of `refractory` ({fit.estimates['refractory']:.4g} ms) sits at the shortest interval "
                f"({shortest:.4g} ms): the hazard after the refractory period is large, so the maximum lies at "
                "this limit of the data, which has no standard error; fix `refractory` (e.g. just below the "
                "shortest interval) and fit the others")
    uniforms = np.random.default_rng(seed).uniform(size=data.bins.size)
    data.loglik(fit.population, fit.drive_values, record=True, uniforms=uniforms)
    goodness = ks_uniform(data.rescaled)
    # predicted PSTH from the refractory-density solver at the estimates
    edges, observed = spikes.psth(psth_bin)
    plot_data = {"pred_t": np.zeros(0), "pred_rate": np.zeros(0), "edges": edges, "observed": observed,
                 "n_trials": spikes.n_trials, "bin": psth_bin, "z_sorted": goodness.pop("z_sorted"),
                 "band_95": goodness["band_95"]}
    if predict:
        from ..solvers.frontend import simulate

        mu = fit.drive_values["scale"] * data.stimulus + fit.drive_values["offset"]
        pred = simulate(fit.population, Trace(data.t, mu), t_end=spikes.duration, dt=dt, progress=False)
        plot_data["pred_t"], plot_data["pred_rate"] = pred.t, pred.rate
    diag = dict(fit.diagnostics)
    diag["loglik"] = (f"discrete-time point-process log-likelihood at dt = {dt:g} ms, each trial conditioned on its "
                      "first spike" + (f" and the spikes of its first {k_count * dt:g} ms (the adaptation history)"
                                       if k_count else ""))
    diag["dt_ms"] = dt
    return _replace(fit, goodness=goodness, plot_data=plot_data, diagnostics=diag)


def _replace(fit, **kw):
    from dataclasses import replace

    return replace(fit, **kw)
