"""Linear response of a population in its stationary state: the transfer function.

For escape noise the population obeys the renewal (refractory-density)
equation.  Linearising it around the stationary state at drive ``mu``
(Gerstner 2000, Neural Comput. 12:43) gives, for an input modulation
``mu + eps * exp(i w t)``, a rate modulation ``eps * chi(w) * exp(i w t)`` with

.. math::
    \\chi(\\omega) = \\frac{A_0\\, Q(\\omega)}{1 - \\hat P_0(\\omega)},\\qquad
    Q(\\omega) = \\int_0^\\infty S_0(a)\\Big[h'(a)\\,U(a,\\omega)
        - h_0(a)\\int_0^a h'(a')\\,U(a',\\omega)\\,e^{-i\\omega(a-a')}\\,da'\\Big]da,

where :math:`a` is the age (time since the last spike), :math:`u_0(a)` the free
membrane trajectory after reset, :math:`h_0(a) = h(u_0(a))`, :math:`h'(a) =
\\partial h/\\partial u` at :math:`u_0(a)`, :math:`S_0` the survivor function,
:math:`P_0 = h_0 S_0` the ISI density, :math:`A_0 = 1/\\int S_0` the
stationary rate, and :math:`U(a,\\omega)` the membrane response of a neuron of
age :math:`a` to the modulation since its last reset,
:math:`\\partial_a U = (F'(u_0) U + 1)/\\tau_m - i\\omega U` after the refractory
period and 0 before it.

Units: frequencies in Hz, ``chi`` in Hz per mV of drive.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from . import _validation as v
from .noise import EscapeNoise, Population

__all__ = ["transfer"]

#: Age step (ms) of the quadrature grid, at most; refined for fast membranes.
AGE_STEP_MS = 0.01
#: The age grid extends until the survivor function falls below this.
SURVIVOR_FLOOR = 1e-13
#: Longest age grid considered (ms) before giving up on a vanishing rate.
MAX_AGE_MS = 1e5
#: Frequencies handled per vectorised block (memory: block x ages complex numbers).
FREQ_BLOCK = 8


def _free_trajectory(neuron, mu: float, ages: np.ndarray) -> np.ndarray:
    """Potential (mV) after reset at constant drive, held at reset while refractory."""
    t_free = np.maximum(ages - neuron.refractory, 0.0)
    if neuron.code == 0:  # LIF: closed form
        target = neuron.rest + mu
        return target + (neuron.reset - target) * np.exp(-t_free / neuron.tau_m)
    if neuron.code == 3:  # PIF
        return neuron.reset + mu * t_free / neuron.tau_m
    from scipy.integrate import solve_ivp

    free_ages = t_free[t_free > 0]
    u = np.full(ages.shape, float(neuron.reset))
    if free_ages.size:
        sol = solve_ivp(lambda a, y: (neuron.drift(y[0]) + mu) / neuron.tau_m, (0.0, float(free_ages[-1])),
                        [float(neuron.reset)], t_eval=free_ages, rtol=1e-10, atol=1e-10, method="LSODA")
        if sol.status != 0 or sol.y.shape[1] != free_ages.size:
            raise ValueError(f"the free membrane trajectory at `mu` = {mu!r} mV could not be integrated")
        u[t_free > 0] = sol.y[0]
    return u


def _age_grid(population, mu):
    nrn = population.neuron
    hz = population.noise.hazard
    da = min(AGE_STEP_MS, nrn.tau_m / 500.0)
    a_max = nrn.refractory + 20.0 * nrn.tau_m
    while True:
        ages = np.arange(0.0, a_max + 0.5 * da, da)
        u0 = _free_trajectory(nrn, mu, ages)
        if nrn.has_cutoff and np.any(u0 >= nrn.boundary):
            raise ValueError(
                f"at `mu` = {mu!r} mV the free trajectory reaches the cut-off; the linear response of "
                "deterministic crossings is not supported by the escape-noise transfer function"
            )
        h0 = np.where(ages >= nrn.refractory - 1e-9 * da, hz.rate(u0, nrn.threshold), 0.0) * 1e-3  # 1/ms
        cum = np.concatenate([[0.0], np.cumsum(0.5 * (h0[1:] + h0[:-1]) * da)])
        surv = np.exp(-cum)
        if surv[-1] < SURVIVOR_FLOOR:
            return ages, da, u0, h0, surv
        if a_max > MAX_AGE_MS:
            raise ValueError(f"the stationary rate at `mu` = {mu!r} mV is too low for a transfer function")
        a_max *= 2.0


@numba.njit(cache=True, nogil=True)
def _linear_recurrence(gain, add):  # pragma: no cover - compiled
    """U[:, 0] = 0, U[:, k+1] = gain[:, k] U[:, k] + add[:, k] (one row per frequency)."""
    n_w, n = gain.shape
    out = np.zeros((n_w, n + 1), dtype=np.complex128)
    for i in range(n_w):
        for k in range(n):
            out[i, k + 1] = gain[i, k] * out[i, k] + add[i, k]
    return out


def _trapz_rows(y, dx):
    return dx * (y.sum(axis=-1) - 0.5 * (y[..., 0] + y[..., -1]))


def transfer(population, mu, freqs, modulate: str = "mean") -> np.ndarray:
    """Transfer function of the population rate at stationary drive ``mu``.

    Parameters
    ----------
    population : Population
        Escape-noise population (hazard depending on ``u`` only).
    mu : float
        Stationary drive (mV).
    freqs : array_like
        Frequencies (Hz), >= 0.
    modulate : {"mean"}
        Which input is modulated: the mean drive.

    Returns
    -------
    ndarray of complex, shape like ``freqs``
        Rate modulation per unit drive modulation (Hz/mV); the phase is the
        lead of the rate over the input.

    Notes
    -----
    Quadrature over age with the trapezoidal rule on a grid of step
    ``min(0.01 ms, tau_m/500)`` extending until the survivor function falls
    below 1e-13.

    Examples
    --------
    >>> import popdens
    >>> pop = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0),
    ...                          popdens.EscapeNoise(popdens.hazard.Exponential(20.0, 2.0)))
    >>> chi = transfer(pop, 18.0, [0.0, 10.0])
    >>> chi.dtype.kind
    'c'
    """
    if not isinstance(population, Population):
        raise ValueError(f"`population` must be a popdens.Population, got {population!r}")
    if not isinstance(population.noise, EscapeNoise):
        raise ValueError("`transfer` supports escape-noise populations so far")
    if population.noise.hazard.uses_slope:
        raise ValueError("`transfer` does not support escape functions that depend on du/dt yet")
    if modulate != "mean":
        raise ValueError(f"`modulate` must be 'mean' for escape noise, got {modulate!r}")
    mu = v.as_finite_float("mu", mu)
    f = np.asarray(freqs, dtype=float)
    if not np.all(np.isfinite(f)) or np.any(f < 0):
        raise ValueError("`freqs` must be finite and >= 0 (Hz)")
    nrn = population.neuron
    hz = population.noise.hazard
    ages, da, u0, h0, surv = _age_grid(population, mu)
    free = ages >= nrn.refractory - 1e-9 * da
    hu = np.where(free, hz.slope(u0, nrn.threshold), 0.0) * 1e-3  # 1/(ms mV)
    # rate as 1/(mean ISI) with the mean taken over the same discrete ISI density as P_hat,
    # so that numerator and denominator share their quadrature errors
    a0 = 1.0 / _trapz_rows(ages * h0 * surv, da)  # 1/ms
    g_real = nrn.drift_slope(0.5 * (u0[1:] + u0[:-1])) / nrn.tau_m  # 1/ms, midpoints
    free_step = free[:-1]  # a step is free when it starts after the refractory period
    w_all = 2.0 * math.pi * f.ravel() * 1e-3  # rad/ms
    out = np.empty(w_all.shape, dtype=complex)

    def q_and_p(w):
        g = g_real[None, :] - 1j * w  # per-step rate of the linear membrane response
        # exact step for piecewise-constant g: U' = g U + 1/tau_m
        eg = np.exp(g * da)
        with np.errstate(divide="ignore", invalid="ignore"):
            phi = np.where(np.abs(g * da) > 1e-8, (eg - 1.0) / g, da * (1.0 + 0.5 * g * da))
        step_gain = np.where(free_step[None, :], eg, 1.0)
        step_add = np.where(free_step[None, :], phi / nrn.tau_m, 0.0)
        U = _linear_recurrence(np.ascontiguousarray(step_gain), np.ascontiguousarray(step_add))
        phase = np.exp(1j * w * ages[None, :])
        integrand = hu[None, :] * U * phase
        inner = np.concatenate([np.zeros((w.shape[0], 1)),
                                np.cumsum(0.5 * (integrand[:, 1:] + integrand[:, :-1]) * da, axis=1)], axis=1)
        q = _trapz_rows(surv[None, :] * (hu[None, :] * U - h0[None, :] * inner / phase), da)
        p_hat = _trapz_rows(h0[None, :] * surv[None, :] / phase, da)
        return q, p_hat

    # Exactly, Q(0) = 0 and P_hat(0) = 1 (the ISI density stays normalised); subtracting the
    # discrete values at zero frequency keeps quadrature errors from being amplified by
    # 1/(1 - P_hat) at low frequencies.
    q0, p0 = q_and_p(np.zeros((1, 1)))
    for i0 in range(0, w_all.size, FREQ_BLOCK):
        q, p_hat = q_and_p(w_all[i0:i0 + FREQ_BLOCK, None])
        with np.errstate(divide="ignore", invalid="ignore"):
            out[i0:i0 + FREQ_BLOCK] = a0 * (q - q0[0]) / (p0[0] - p_hat) * 1000.0  # Hz/mV
    # the zero-frequency limit: 1 - P_hat -> 0 while Q -> 0; use the gain derivative there
    zero = w_all == 0.0
    if np.any(zero):
        out[zero] = _static_slope(population, mu)
    return out.reshape(f.shape)


def _static_slope(population, mu: float) -> float:
    """d(rate)/d(mu) (Hz/mV) by a central difference of the renewal rate."""
    eps = 1e-4 * max(1.0, abs(mu))

    def rate(m):
        _, da, _, _, surv = _age_grid(population, m)
        return 1000.0 / _trapz_rows(surv, da)

    return (rate(mu + eps) - rate(mu - eps)) / (2.0 * eps)
