"""Passage-time density of white-noise neurons, reset to boundary, any drift.

The Laplace transform ``F(s)`` of the passage-time density follows from the
Laplace-transformed Fokker--Planck equation with a unit source at reset and
no reinjection,

.. math:: \\frac{dJ}{du} = -s\\,p + \\delta(u - u_r),\\qquad
          \\frac{dp}{du} = \\frac{A p - J}{D},

integrated backward from the boundary (``p = 0`` there) as in threshold
integration (Richardson 2007, Phys. Rev. E 76:021919): the solution is
``F (p1, J1) + (p2, J2)``, with ``J1 = 1`` at the boundary and no source, and
``(p2, J2)`` zero at the boundary and the unit source; the reflecting lower
end ``J = 0`` gives ``F = -J2(u_min)/J1(u_min)``.  Each cell is advanced by the
exact exponential of its constant 2x2 matrix (drift at the cell midpoint).

The density is recovered on ``[0, T/2]`` from ``F(i omega_k)``,
``omega_k = 2 pi k / T``, by a discrete Fourier series (the periodised density,
with ``T`` twice the requested span so the wrap-around is below the
survivor level there), and
the survivor function by integrating the density on the fine time grid.  The number of
frequencies doubles until ``|F|`` at the highest one is below ``SPECTRUM_FLOOR``.

Units: mV, ms, s in 1/ms.
"""

from __future__ import annotations

import cmath
import math

import numba
import numpy as np

from ._kernels import NO_REFCOUNT, drift_value
from ._threshold import fill_grid, lower_end

__all__ = ["laplace_passage", "passage_time_density"]

#: Stop refining the frequency grid when |F| at the highest frequency is below this.
SPECTRUM_FLOOR = 1e-13
#: Fewest and most frequencies used.
MIN_FREQS, MAX_FREQS = 256, 2 ** 17
#: Cells per min(sigma, model scale) for the complex sweeps (second order is ample
#: for a density reported on a plot-resolution grid).
CELLS_PER_SCALE_LAPLACE = 50
#: Rescale the complex solutions when their modulus exceeds this.
RESCALE_ABOVE = 1e150


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def laplace_passage(code, p, ops, args, tau_m, mu, sigma, grid, n, k_reset, s_values, out, stack, xbuf):  # pragma: no cover
    """Laplace transform of the passage-time density at each complex ``s`` (1/ms).

    ``grid[:n]`` descends from the boundary to the lower end with reset at
    node ``k_reset``.
    """
    d = 0.5 * sigma * sigma / tau_m
    for i in range(s_values.shape[0]):
        s = s_values[i]
        p1 = 0.0 + 0.0j
        j1 = 1.0 + 0.0j
        p2 = 0.0 + 0.0j
        j2 = 0.0 + 0.0j
        for k in range(n - 1):
            if k == k_reset:
                j2 -= 1.0  # the unit source at reset: J drops by 1 going down
            hi = grid[k]
            lo = grid[k + 1]
            h = hi - lo
            g = (drift_value(code, p, ops, args, 0.5 * (hi + lo), stack, xbuf) + mu) / tau_m / d
            # exp(-h M), M = [[g, -1/d], [-s, 0]]: e^{-h g/2} [cosh(hq) I - sinh(hq)/q (M - g/2 I)]
            q = cmath.sqrt(0.25 * g * g + s / d)
            if q.real < 0.0:
                q = -q
            hq = h * q
            if abs(hq) < 1e-4:
                ch = 1.0 + 0.5 * hq * hq
                shq = h * (1.0 + hq * hq / 6.0)  # sinh(hq)/q
                ch = ch * math.exp(-0.5 * h * g)
                shq = shq * math.exp(-0.5 * h * g)
            else:
                ep = cmath.exp(-0.5 * h * g + hq)
                em = cmath.exp(-0.5 * h * g - hq)
                ch = 0.5 * (ep + em)
                shq = 0.5 * (ep - em) / q
            m11 = ch - shq * (0.5 * g)
            m12 = shq / d
            m21 = shq * s
            m22 = ch + shq * (0.5 * g)
            p1, j1 = m11 * p1 + m12 * j1, m21 * p1 + m22 * j1
            p2, j2 = m11 * p2 + m12 * j2, m21 * p2 + m22 * j2
            big = max(abs(p1), abs(j1), abs(p2), abs(j2))
            if big > RESCALE_ABOVE:
                f = 1.0 / big
                p1 *= f
                j1 *= f
                p2 *= f
                j2 *= f
        out[i] = -j2 / j1
    return out


def _grid(population, mu, sigma):
    nrn = population.neuron
    from .steady_state import _kernel_neuron, _length_scale, _scratch  # noqa: PLC0415

    kn = _kernel_neuron(nrn)
    stack, xbuf = _scratch(nrn.program)
    step = min(sigma, _length_scale(nrn)) / CELLS_PER_SCALE_LAPLACE
    u_min = lower_end(*kn, float(nrn.tau_m), float(nrn.reset), mu, sigma, step, stack, xbuf)
    n_est = int((nrn.boundary - u_min) / step) + 8
    grid = np.empty(n_est + 8)
    n, k_r = fill_grid(float(nrn.boundary), float(nrn.reset), u_min, step, grid)
    return kn, stack, xbuf, grid[:n].copy(), n, k_r


def passage_time_density(population, mu, sigma, t, mean_passage, std_passage):
    """Passage-time density (1/ms) and survivor function at times ``t`` (ms; < 0 gives 0 and 1).

    ``mean_passage`` and ``std_passage`` (ms) set the span of the Fourier grid.
    """
    t = np.asarray(t, dtype=float)
    nrn = population.neuron
    kn, stack, xbuf, grid, n, k_r = _grid(population, mu, sigma)
    span = max(float(np.max(t, initial=0.0)), mean_passage + 14.0 * std_passage)
    period = 2.0 * span
    n_f = MIN_FREQS
    while True:
        omega = 2.0 * math.pi * np.arange(n_f + 1) / period
        s = (1j * omega).astype(complex)
        f_hat = np.empty(n_f + 1, dtype=complex)
        laplace_passage(*kn, float(nrn.tau_m), mu, sigma, grid, n, k_r, s, f_hat, stack, xbuf)
        if abs(f_hat[-1]) < SPECTRUM_FLOOR or n_f >= MAX_FREQS:
            break
        n_f *= 2
    n_t = 2 * n_f
    dens_grid = np.fft.irfft(f_hat, n=n_t) * (n_t / period)
    t_grid = np.arange(n_t) * (period / n_t)
    # survivor by the trapezoid rule on the fine grid (its own Fourier series would ring:
    # the periodised survivor jumps from ~0 back to 1 at the period)
    cum = np.concatenate([[0.0], np.cumsum(0.5 * (dens_grid[1:] + dens_grid[:-1]) * (period / n_t))])
    surv_grid = 1.0 - cum
    inside = (t >= 0.0) & (t <= span)
    dens = np.zeros(t.shape)
    surv = np.ones(t.shape)
    dens[inside] = np.interp(t[inside], t_grid, dens_grid)
    surv[inside] = np.interp(t[inside], t_grid, surv_grid)
    beyond = t > span
    dens[beyond] = 0.0
    surv[beyond] = 0.0
    return np.maximum(dens, 0.0), np.clip(surv, 0.0, 1.0)
