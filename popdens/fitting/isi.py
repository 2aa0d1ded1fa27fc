"""Fitting inter-spike intervals recorded under constant drive.

Under a constant drive every neuron model here is a renewal process, so the
log-likelihood of the intervals is ``sum log p(ISI_i)`` with ``p`` the
model's stationary ISI density (1/ms):

* escape noise: the renewal density ``h(u(t)) exp(-int h)`` along the free
  trajectory after reset (:func:`popdens.stationary`);
* white noise: the first-passage-time density from reset to threshold,
  shifted by the refractory period, from its Laplace transform by threshold
  integration at complex frequency (:mod:`popdens.theory._isi_diffusive`;
  maximum-likelihood fitting of white-noise integrate-and-fire neurons from
  the passage-time density as in Ladenbauer, McKenzie, English, Hagens &
  Ostojic 2019, Nat. Commun. 10:4933).  For a fit the Fourier grid
  (period and number of frequencies) is fixed at the start, and the density
  is interpolated at the intervals by a cubic spline, so the
  log-likelihood is a smooth function of the parameters.

Spike trains recorded in trials (:class:`~popdens.fitting.SpikeTrains`)
are fitted by the exact likelihood of a stationary renewal process seen
through a window ``[0, T]`` (Cox & Lewis 1966, "The Statistical Analysis of
Series of Events", ch. 4): per trial with spikes ``t_1 < ... < t_n`` it is
``S(t_1)/m * prod p(t_{i+1} - t_i) * S(T - t_n)`` (the first spike from
the forward recurrence time, the last interval censored), and a trial
without spikes contributes ``1 - (1/m) int_0^T S``; ``S`` is the ISI
survivor function and ``m`` the mean ISI (ms).  The product of the complete
intervals' densities alone under-represents long intervals (an interval of
length ``L`` is complete with probability ``(T - L)/T``): measured with
trials of about 8 mean intervals, ``mu`` came out 0.27 mV (1.7 SE) high and
its 95 % intervals covered 63 % (DEVELOPERS.md).  Intervals given as an
array are fitted by the product of their densities (no window known).

For white noise the start values of ``mu`` and ``sigma`` (when both are
free and no start is given) match the observed rate and CV
(:func:`popdens.drive_and_noise_for`).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from .. import _validation as v
from ..exceptions import PopdensError
from ..model.adaptation import refuse
from ..model.noise import EscapeNoise, WhiteNoise
from ..theory._isi_diffusive import _cells, laplace_passage
from .data import SpikeTrains
from .estimate import FitResult, maximise
from .params import ParameterSet
from .rescaling import ks_uniform

__all__ = ["fit_isi", "isi_loglik"]

#: Fewest intervals accepted.
MIN_INTERVALS = 10
#: Highest Fourier coefficient |F| kept for the fixed grid of a white-noise fit.
SPECTRUM_FLOOR = 1e-12
#: Largest number of frequencies of the fixed grid.
MAX_FREQS = 2 ** 14
#: Density floor (1/ms): an interval where the model's density vanishes costs log(1e-300).
DENSITY_FLOOR = 1e-300


def _as_isis(data) -> np.ndarray:
    if isinstance(data, SpikeTrains):
        isis = data.isis()
    else:
        isis = v.finite_array("isis", data).ravel()
        if np.any(isis <= 0.0):
            raise ValueError("`isis` must be > 0 (ms)")
    if isis.size < MIN_INTERVALS:
        raise ValueError(f"`isis`: {isis.size} intervals; a fit needs at least {MIN_INTERVALS}")
    return np.asarray(isis, dtype=float)


class _WhiteGrid:
    """A fixed Fourier grid for the passage-time density of one fit."""

    def __init__(self, isis, population, mu, sigma):
        from ..theory.steady_state import stationary

        st = stationary(population, mu, sigma=sigma)
        mean_pass = st.mean_isi - population.neuron.refractory
        span = max(1.5 * float(isis.max()), mean_pass + 14.0 * st.cv * st.mean_isi)
        self.period = 2.0 * span
        g, widths, k_r, d = _cells(population, mu, sigma)
        n_f = 256
        while n_f < MAX_FREQS:
            f_hat = np.empty(1, dtype=complex)
            laplace_passage(g, widths, k_r, d, np.array([1j * 2.0 * math.pi * n_f / self.period]), f_hat)
            if abs(f_hat[0]) < SPECTRUM_FLOOR:
                break
            n_f *= 2
        # twice the frequencies the start needs: the fit may move to narrower densities
        self.n_f = min(2 * n_f, MAX_FREQS)
        self.s = 1j * 2.0 * math.pi * np.arange(self.n_f + 1) / self.period
        self.out = np.empty(self.n_f + 1, dtype=complex)

    def density(self, population, mu, sigma, t):
        from scipy.interpolate import CubicSpline

        g, widths, k_r, d = _cells(population, mu, sigma)
        laplace_passage(g, widths, k_r, d, self.s, self.out)
        n_t = 2 * self.n_f
        dens = np.fft.irfft(self.out, n=n_t) * (n_t / self.period)
        grid = np.arange(n_t) * (self.period / n_t)
        half = n_t // 2 + 1
        return CubicSpline(grid[:half], dens[:half])(np.clip(t, 0.0, grid[half - 1]))

    def passage(self, population, mu, sigma, t_density, t_survivor, horizon=None):
        """Passage-time density at ``t_density``, survivor at ``t_survivor`` (times after the refractory
        period, ms), mean passage time (ms) and, with ``horizon``, ``int_0^horizon S`` (ms), all from one
        transform: the survivor by the trapezoid rule on the grid, the mean as the survivor's integral."""
        from scipy.interpolate import CubicSpline

        g, widths, k_r, d = _cells(population, mu, sigma)
        laplace_passage(g, widths, k_r, d, self.s, self.out)
        n_t = 2 * self.n_f
        dens = np.fft.irfft(self.out, n=n_t) * (n_t / self.period)
        half = n_t // 2 + 1
        grid = np.arange(half) * (self.period / n_t)
        p = CubicSpline(grid, dens[:half])(np.clip(t_density, 0.0, grid[-1]))
        step = self.period / n_t
        cum = np.concatenate([[0.0], np.cumsum(0.5 * (dens[1:half] + dens[:half - 1]) * step)])
        surv_grid = np.clip(1.0 - cum, 0.0, 1.0)
        surv = np.interp(t_survivor, grid, surv_grid, right=0.0)
        area = np.concatenate([[0.0], np.cumsum(0.5 * (surv_grid[1:] + surv_grid[:-1]) * step)])
        mean = float(area[-1])
        within = None if horizon is None else float(np.interp(horizon, grid, area, right=mean))
        return p, surv, mean, within


def _survivor_white(grid, population, mu, sigma, t):
    """Survivor function of the passage time (trapezoid on the fixed grid), for the rescaling test."""
    g, widths, k_r, d = _cells(population, mu, sigma)
    laplace_passage(g, widths, k_r, d, grid.s, grid.out)
    n_t = 2 * grid.n_f
    dens = np.fft.irfft(grid.out, n=n_t) * (n_t / grid.period)
    dt = grid.period / n_t
    cum = np.concatenate([[0.0], np.cumsum(0.5 * (dens[1:] + dens[:-1]) * dt)])
    return np.clip(1.0 - np.interp(t, np.arange(n_t) * dt, cum), 0.0, 1.0)


class _Windows:
    """What the window likelihood needs of recorded trials: complete intervals, first-spike times,
    censored end gaps (ms), the number of trials without spikes and the trial duration ``T`` (ms)."""

    def __init__(self, trains: SpikeTrains):
        self.isis = np.asarray(trains.isis(), dtype=float)
        self.duration = float(trains.duration)
        self.first = np.array([float(a[0]) for a in trains.trains if a.size])
        self.gaps = np.array([self.duration - float(a[-1]) for a in trains.trains if a.size])
        self.empty = sum(1 for a in trains.trains if a.size == 0)

    @property
    def longest(self) -> float:
        return float(max(self.isis.max(initial=0.0), self.first.max(initial=0.0), self.gaps.max(initial=0.0)))


def _window_loglik(population, win: _Windows, mu: float, grid) -> float:
    """Exact log-likelihood of trials seen through ``[0, T]`` (module docstring)."""
    ref = float(population.neuron.refractory)
    if isinstance(population.noise, EscapeNoise):
        from ..theory.steady_state import stationary

        pts = np.concatenate([win.isis, win.first, win.gaps])
        order = np.argsort(pts)
        st = stationary(population, mu, isi_t=pts[order])
        dens, surv = np.empty(pts.size), np.empty(pts.size)
        dens[order], surv[order] = st.isi_density, st.survivor
        mean = 1000.0 / float(st.rate)
        within = None
        if win.empty:
            t = np.linspace(0.0, win.duration, 4001)
            s = stationary(population, mu, isi_t=t).survivor
            within = float(np.sum(0.5 * (s[1:] + s[:-1]) * np.diff(t)))
        n_i = win.isis.size
        p, s_first, s_gap = dens[:n_i], surv[n_i:n_i + win.first.size], surv[n_i + win.first.size:]
    else:
        sigma = float(population.noise.sigma)
        times = np.concatenate([win.first, win.gaps]) - ref
        p, s, mean_pass, within_pass = grid.passage(population, mu, sigma, win.isis - ref, np.maximum(times, 0.0),
                                                    win.duration - ref if win.empty else None)
        p = np.where(win.isis > ref, p, 0.0)
        s = np.where(times > 0.0, s, 1.0)
        s_first, s_gap = s[:win.first.size], s[win.first.size:]
        mean = ref + mean_pass
        within = None if within_pass is None else min(win.duration, ref) + max(within_pass, 0.0)
    floor = DENSITY_FLOOR
    total = float(np.sum(np.log(np.maximum(p, floor))))
    total += float(np.sum(np.log(np.maximum(s_first, floor)))) - win.first.size * math.log(mean)
    total += float(np.sum(np.log(np.maximum(s_gap, floor))))
    if win.empty:
        total += win.empty * math.log(max(1.0 - within / mean, floor))
    return total


def isi_loglik(population, isis, *, mu, grid=None) -> float:
    """Log-likelihood (densities in 1/ms) of intervals at constant drive ``mu`` (mV).

    For an array of intervals, ``sum log p(ISI_i)``; for :class:`~popdens.fitting.SpikeTrains`, the
    exact likelihood of stationary renewal trials seen through their window (module docstring).
    """
    if isinstance(isis, SpikeTrains):
        win = _Windows(isis)
        mu = v.as_finite_float("mu", mu)
        if grid is None and isinstance(population.noise, WhiteNoise):
            grid = _WhiteGrid(np.array([win.longest]), population, mu, float(population.noise.sigma))
        return _window_loglik(population, win, mu, grid)
    isis = _as_isis(isis)
    mu = v.as_finite_float("mu", mu)
    if isinstance(population.noise, EscapeNoise):
        from ..theory.steady_state import stationary

        order = np.argsort(isis)
        st = stationary(population, mu, isi_t=isis[order])
        dens = st.isi_density
    else:
        sigma = float(population.noise.sigma)
        if grid is None:
            grid = _WhiteGrid(isis, population, mu, sigma)
        dens = grid.density(population, mu, sigma, isis - population.neuron.refractory)
        dens = np.where(isis > population.neuron.refractory, dens, 0.0)
    return float(np.sum(np.log(np.maximum(dens, DENSITY_FLOOR))))


def _start_mu_sigma(population, isis):
    from ..theory.steady_state import drive_and_noise_for

    rate = 1000.0 / isis.mean()
    cv = isis.std() / isis.mean()
    try:
        return drive_and_noise_for(population, rate, cv)
    except (PopdensError, ValueError, ArithmeticError):
        return None


def fit_isi(population, data, free, *, mu, profile=False) -> FitResult:
    """Fit inter-spike intervals recorded under a constant drive, by maximum likelihood.

    Parameters
    ----------
    population : Population
        White-noise model (free e.g. ``["mu", "sigma"]``) or escape-noise
        model (free e.g. the escape function's ``["rate", "width"]``, with
        ``mu`` known; ``mu`` with an exponential hazard on a LIF trades off
        against ``rate``, so free at most two of ``rate``, ``width``, ``mu``
        unless the intervals are long compared with ``tau_m``).  Its
        parameter values are the fixed ones and the start of the free ones.
    data : SpikeTrains or array_like
        Spike trains recorded in trials of length `duration` (exact window likelihood, module
        docstring) or the intervals themselves (ms; product of their densities).
    free : sequence of str or mapping
        Parameters to fit (see :class:`popdens.fitting.params.ParameterSet`).
    mu : float
        The constant drive (mV): fixed, or the start value when ``"mu"`` is free.
    profile : bool
        Also compute 95 % profile-likelihood intervals.

    Returns
    -------
    FitResult
        Estimates, standard errors (observed information), log-likelihood
        (``sum log p``, p in 1/ms) and AIC; the KS test of the intervals
        against the fitted ISI distribution (time rescaling for a renewal
        process) in ``goodness``; ``.plot()`` shows the ISI histogram with the
        fitted density and the KS plot.
    """
    isis = _as_isis(data)
    mu = v.as_finite_float("mu", mu)
    refuse(population, "the ISI fit (adapting neurons are not renewal processes; fit their spike trains with fit_psth)")
    white = isinstance(population.noise, WhiteNoise)
    if not white and not isinstance(population.noise, EscapeNoise):
        raise ValueError(f"`population`: the ISI fit takes escape or white noise, got {type(population.noise).__name__}; "
                         "its exact ISI density is not available for filtered (coloured), shot-noise or conductance input "
                         "(fit_gain takes them, with their gain functions)")
    if white and isinstance(free, (list, tuple)) and {"mu", "sigma"} <= set(free):
        start = _start_mu_sigma(population, isis)
        if start is not None:
            current = ParameterSet.current_values(population, {"mu": mu})
            free = {n: current[n] for n in free}
            free["mu"], free["sigma"] = start
    params = ParameterSet.make(population, free, {"mu": mu})
    win = _Windows(data) if isinstance(data, SpikeTrains) else None
    grid = None
    if white:
        pop0, d0 = params.build(params.start)
        grid = _WhiteGrid(isis if win is None else np.array([win.longest]), pop0, d0["mu"], float(pop0.noise.sigma))

    def loglik(pop, drives):
        if win is not None:
            return _window_loglik(pop, win, float(drives["mu"]), grid)
        return isi_loglik(pop, isis, mu=drives["mu"], grid=grid)

    fit = maximise(loglik, params, kind="isi", n_observations=isis.size, profile=profile,
                   good_start=white and set(params.names) == {"mu", "sigma"} and isinstance(free, dict))
    pop, mu_hat = fit.population, fit.drive_values["mu"]
    # time rescaling of a renewal process: z = F(ISI) is uniform under the model
    if white:
        surv = _survivor_white(grid, pop, mu_hat, float(pop.noise.sigma), isis - pop.neuron.refractory)
        surv = np.where(isis > pop.neuron.refractory, surv, 1.0)
    else:
        from ..theory.steady_state import stationary

        order = np.argsort(isis)
        surv = np.empty(isis.size)
        surv[order] = stationary(pop, mu_hat, isi_t=isis[order]).survivor
    goodness = ks_uniform(-np.log(np.maximum(surv, 1e-300)))
    from ..theory.steady_state import stationary

    st = stationary(pop, mu_hat)
    plot_data = {"isis": isis, "model_t": st.isi_t, "model_density": st.isi_density,
                 "z_sorted": goodness.pop("z_sorted"), "band_95": goodness["band_95"]}
    diag = dict(fit.diagnostics)
    diag["loglik"] = ("sum of log ISI densities (1/ms) at the recorded intervals" if win is None else
                      "exact log-likelihood of stationary renewal trials seen through [0, duration]: complete "
                      "intervals (densities, 1/ms), first spikes (forward recurrence), censored ends")
    if grid is not None:
        diag["fourier_grid"] = {"period_ms": grid.period, "frequencies": grid.n_f}
    return replace(fit, goodness=goodness, plot_data=plot_data, diagnostics=diag)
