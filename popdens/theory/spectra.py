"""Spike-train power spectra in the stationary state.

A stationary neuron of either noise model is a renewal process: its
intervals are independent with the stationary ISI density ``P0(T)``.  The
power spectrum of its spike train ``x(t) = sum_k delta(t - t_k)`` then
follows from the Fourier transform ``P_hat(f) = E[exp(-2 pi i f T)]`` (Cox
1962, "Renewal Theory"; Stratonovich 1967):

.. math:: S(f) = r_0\\,\\mathrm{Re}\\,\\frac{1 + \\hat P(f)}{1 - \\hat P(f)},
          \\qquad f \\neq 0,

with the limits ``S(0) = r0 CV^2`` (the delta peak ``r0^2 delta(f)`` of the
mean is left out) and ``S(f) -> r0`` at high frequency.  Convention:
two-sided density, ``S(f) = lim_T <|int_0^T (x - r0) exp(-2 pi i f t) dt|^2> / T``,
in Hz (spikes^2 / s^2 per Hz).  The population rate ``A = (1/N) sum_i x_i`` of
``N`` independent neurons has ``S_A(f) = S(f) / N``.

``P_hat`` comes from the same sweeps as the transfer function: the age
integrals of the renewal equation (escape noise) and threshold integration
of the first-passage problem (white noise; Richardson 2008, Biol. Cybern.
99:381).  Shot noise is exactly renewal (input during refractoriness is
lost, arrivals are memoryless): ``P_hat`` is the passage-time transform of
the jump-density operator (:func:`popdens.theory._stationary_shot.shot_passage_transform`).  Conductance input uses the ISI transform of its effective equation
(:class:`popdens.theory._conductance.ConductanceSweep`; a renewal approximation).  For white noise the ISI moments needed at ``f = 0`` are the
Taylor coefficients of ``P_hat(s)``, taken by the trapezoidal rule on a
circle in the complex ``s`` plane (Cauchy's formula; exponentially
convergent).
"""

from __future__ import annotations

import math

import numpy as np

from .. import _validation as v
from ._modulated_threshold import NODES_PER_SIGMA, Sweep
from ..model.adaptation import refuse
from .linear_response import FREQ_BLOCK, _AgeGrid, _check_population, _sigma_of
from ..model.effective import white_equivalent
from ..model.noise import EscapeNoise, Population
from ..model.conductance import ConductanceNoise
from ..model.shot import ShotNoise
from ._conductance import ConductanceSweep
from ._stationary_shot import shot_passage_moments, shot_passage_transform

__all__ = ["isi_transform", "spike_train_spectrum", "population_rate_spectrum"]

#: Points on the Cauchy circle for the ISI moments (white noise).
CAUCHY_POINTS = 64
#: Radius of the Cauchy circle in units of the stationary rate (inside the analytic region).
CAUCHY_RADIUS = 0.25
#: Folded frequencies f + k/b kept on each side for the spectrum of binned rates; the rest of the
#: sum is bounded by max|S - r0| beyond ALIASES/b times 2/(pi^2 ALIASES) (< 3 % of it here).
ALIASES = 8


def _real_freqs(freqs) -> np.ndarray:
    f = np.asarray(freqs)
    if f.dtype.kind not in "biuf":
        raise ValueError("`freqs` must be real numbers (Hz)")
    f = f.astype(float)
    if not np.all(np.isfinite(f)):
        raise ValueError("`freqs` must be finite (Hz)")
    return f


class _Renewal:
    """ISI transform, rate and ISI moments of one stationary population."""

    def __init__(self, population, mu):
        shot = isinstance(population, Population) and isinstance(population.noise, ShotNoise)
        conductance = isinstance(population, Population) and isinstance(population.noise, ConductanceNoise)
        self.population = population if shot or conductance else _check_population(population)
        refuse(population, "the renewal spectra (ISI transform, spike-train and population-rate spectra)")
        self.mu = v.as_finite_float("mu", mu)
        if shot:
            # input arriving during refractoriness is lost and Poisson arrivals are memoryless, so
            # the spike train is exactly a renewal process
            t_ref = float(population.neuron.refractory)
            t1, t2 = shot_passage_moments(population, self.mu)
            self.rate = 1000.0 / (t_ref + t1)
            self.cv2 = (t_ref * t_ref + 2.0 * t_ref * t1 + t2) / (t_ref + t1) ** 2 - 1.0
        elif isinstance(population.noise, EscapeNoise):
            self.grid = _AgeGrid(population, self.mu)
            g = self.grid
            mass = float(np.sum(g.weights * g.h0 * g.surv)) + (g.surv[-1] if g.tail else 0.0)
            self._mass = mass
            m1, m2 = g.mean_isi / mass, g.isi_second / mass
            self.rate = 1000.0 / m1
            self.cv2 = m2 / m1 ** 2 - 1.0
        else:
            if conductance:
                # the effective equation of conductance input (a renewal approximation: the conductances
                # carry memory across spikes, ignored here; popdens.theory._conductance)
                self.sweeps = (ConductanceSweep(population, self.mu),
                               ConductanceSweep(population, self.mu, 2 * NODES_PER_SIGMA))
            else:
                # coloured noise: the effective white-noise problem (a renewal approximation: the
                # synaptic current carries memory across spikes, ignored here)
                white = white_equivalent(population)
                sigma = _sigma_of(white)
                self.sweeps = (Sweep(white.neuron, self.mu, sigma, NODES_PER_SIGMA),
                               Sweep(white.neuron, self.mu, sigma, 2 * NODES_PER_SIGMA))
            self.rate = (4.0 * self.sweeps[1].rate - self.sweeps[0].rate) / 3.0
            rho = CAUCHY_RADIUS * self.rate * 1e-3  # 1/ms
            theta = 2.0 * math.pi * np.arange(CAUCHY_POINTS) / CAUCHY_POINTS
            z = rho * np.exp(1j * theta)
            p = self._laplace(z)
            c1 = np.mean(p * np.exp(-1j * theta)) / rho  # = -E[T]
            c2 = np.mean(p * np.exp(-2j * theta)) / rho ** 2  # = E[T^2] / 2
            m1, m2 = -c1.real, 2.0 * c2.real
            self.cv2 = m2 / m1 ** 2 - 1.0

    def _laplace(self, s):
        """E[exp(-s T)] at Laplace variables ``s`` (1/ms)."""
        s = np.asarray(s, dtype=complex).ravel()
        if isinstance(self.population.noise, ShotNoise):
            t_ref = float(self.population.neuron.refractory)
            return np.exp(-s * t_ref) * shot_passage_transform(self.population, self.mu, s)
        if isinstance(self.population.noise, EscapeNoise):
            out = np.empty(s.shape, dtype=complex)
            for i0 in range(0, s.size, FREQ_BLOCK):
                out[i0:i0 + FREQ_BLOCK] = self.grid.sweep(s[i0:i0 + FREQ_BLOCK], self.population.neuron.tau_m)[1]
            return out / self._mass  # the discrete ISI density, normalised
        coarse, fine = self.sweeps
        return (4.0 * fine.solve(s)[1] - coarse.solve(s)[1]) / 3.0

    def spectrum(self, f):
        s = (2j * math.pi * 1e-3) * f.ravel()
        p = self._laplace(s)
        out = np.empty(s.shape)
        nz = s != 0
        out[nz] = self.rate * ((1.0 + p[nz]) / (1.0 - p[nz])).real
        out[~nz] = self.rate * self.cv2
        return out.reshape(f.shape)


def isi_transform(population, mu, freqs) -> np.ndarray:
    """Fourier transform of the stationary ISI density, ``E[exp(-2 pi i f T)]``.

    Parameters
    ----------
    population : Population
    mu : float
        Stationary drive (mV).
    freqs : array_like
        Frequencies (Hz); complex values as in :func:`popdens.linear_response.transfer`.

    Returns
    -------
    ndarray of complex (dimensionless), 1 at ``f = 0``.
    """
    f = np.asarray(freqs)
    if f.dtype.kind not in "biufc" or not np.all(np.isfinite(f)):
        raise ValueError("`freqs` must be finite numbers (Hz)")
    ren = _Renewal(population, mu)
    return ren._laplace((2j * math.pi * 1e-3) * f.astype(complex)).reshape(f.shape)


def spike_train_spectrum(population, mu, freqs, *, with_moments: bool = False):
    """Power spectrum (Hz) of one neuron's spike train in the stationary state at drive ``mu``.

    Parameters
    ----------
    population : Population
        The neurons and their noise model.
    mu : float
        Stationary drive (mV).
    freqs : array_like of float
        Frequencies (Hz); the spectrum is even in ``f``.
    with_moments : bool
        Also return the stationary rate (Hz) and the ISI CV^2.

    Returns
    -------
    ndarray of float
        Two-sided spectral density (Hz), without the ``r0^2 delta(f)`` peak;
        ``S(0) = r0 CV^2`` and ``S -> r0`` at high frequency.
    (rate, cv2) : tuple of float
        Only with ``with_moments``: the stationary rate (Hz) and the squared ISI CV.
    """
    f = _real_freqs(freqs)
    ren = _Renewal(population, mu)
    spec = ren.spectrum(f)
    return (spec, (ren.rate, ren.cv2)) if with_moments else spec


def population_rate_spectrum(population, mu, freqs, n, *, bin_width=None) -> np.ndarray:
    """Power spectrum (Hz) of the rate ``A = (1/n) sum_i x_i`` of ``n`` independent neurons.

    ``S_A(f) = S(f) / n`` with ``S`` from :func:`spike_train_spectrum` (the
    neurons are independent, so cross-spectra vanish); two-sided, in Hz, the
    ``r0^2 delta(f)`` peak left out.  A rate histogram with bins ``b`` (ms)
    therefore has variance ``~ S(0)/n / (b/1000)`` for bins long compared with
    the correlation time, and ``r0 / (n b/1000)`` for short bins.

    With ``bin_width`` = ``b`` (ms) the spectrum of the *binned* rate sampled every
    ``b`` is returned (what :meth:`popdens.Result.spectrum` estimates; ``|f| <= 500/b``):
    the bin average multiplies the spectrum by ``sinc^2(pi f b)`` and sampling folds
    the frequencies ``f + k/b`` onto ``f``,

    .. math:: S_b(f) = \\frac{1}{n}\\Big[r_0 + \\sum_k \\big(S(f + k/b) - r_0\\big)
              \\,\\mathrm{sinc}^2\\big(\\pi (f + k/b) b\\big)\\Big],

    using ``sum_k sinc^2(pi (f + k/b) b) = 1`` for the flat part ``r0`` (exact) and
    the folded terms ``|k| <= ALIASES`` for the rest (standard sampling theory).

    Parameters
    ----------
    population : Population
        The neurons and their noise model.
    mu : float
        Stationary drive (mV).
    freqs : array_like of float
        Frequencies (Hz).
    n : int
        Number of neurons, >= 1.
    bin_width : float, optional
        Width (ms) of the bins the rate is averaged over and sampled at; default
        None: the spectrum of the instantaneous rate.

    Returns
    -------
    ndarray of float
        Two-sided spectral density of the population rate (Hz).
    """
    n = v.positive_int("n", n)
    if bin_width is None:
        return spike_train_spectrum(population, mu, freqs) / n
    b = v.positive("bin_width", bin_width) * 1e-3  # s
    f = _real_freqs(freqs)
    if np.any(np.abs(f) > 0.5 / b * (1.0 + 1e-12)):
        raise ValueError(f"`freqs` must lie within the Nyquist frequency {0.5 / b:g} Hz of bins of {bin_width!r} ms")
    k = np.arange(-ALIASES, ALIASES + 1)
    fk = f.ravel()[:, None] + k[None, :] / b
    spec, (r0, _) = spike_train_spectrum(population, mu, fk, with_moments=True)
    folded = r0 + np.sum((spec - r0) * np.sinc(fk * b) ** 2, axis=1)
    return (folded / n).reshape(f.shape)
