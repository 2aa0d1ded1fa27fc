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

from ..model._kernels import NO_REFCOUNT
from ._scales import kernel_neuron, length_scale, scratch
from ._threshold import fill_grid, lower_end

__all__ = ["laplace_passage", "passage_time_density", "density_from_transform"]

#: Stop refining the frequency grid when |F| at the highest frequency is below this.
SPECTRUM_FLOOR = 1e-13
#: Fewest and most frequencies used.  Each frequency costs one complex sweep (~0.1 ms
#: for a few thousand cells); the cap bounds the work at very low rates, where the
#: density has a fast initial part and a tail thousands of times longer (the
#: residual |F| at the highest frequency is then reported).
MIN_FREQS, MAX_FREQS = 256, 2 ** 12
#: Cells per min(sigma, model scale) for the complex sweeps (second order is ample
#: for a density reported on a plot-resolution grid).
CELLS_PER_SCALE_LAPLACE = 50
#: Rescale the complex solutions when their modulus exceeds this.
RESCALE_ABOVE = 1e150


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def laplace_passage(g, widths, k_reset, d, s_values, out):  # pragma: no cover - compiled
    """Laplace transform of the passage-time density at each complex ``s`` (1/ms).

    Cell ``k`` (counted down from the boundary) has width ``widths[k]`` (mV) and
    ``g[k] = A/D`` (1/mV) at its midpoint; ``d`` is the diffusion constant
    (mV^2/ms) and the source sits at the lower face of cell ``k_reset - 1``.
    """
    n_cells = g.shape[0]
    for i in range(s_values.shape[0]):
        s = s_values[i]
        sd = s / d
        p1 = 0.0 + 0.0j
        j1 = 1.0 + 0.0j
        p2 = 0.0 + 0.0j
        j2 = 0.0 + 0.0j
        for k in range(n_cells):
            if k == k_reset:
                j2 -= 1.0  # the unit source at reset: J drops by 1 going down
            h = widths[k]
            gk = g[k]
            # exp(-h M), M = [[g, -1/d], [-s, 0]]: e^{-h g/2} [cosh(hq) I - sinh(hq)/q (M - g/2 I)]
            q = cmath.sqrt(0.25 * gk * gk + sd)
            if q.real < 0.0:
                q = -q
            hq = h * q
            if abs(hq.real) + abs(hq.imag) < 1e-4:
                damp = math.exp(-0.5 * h * gk)
                ch = (1.0 + 0.5 * hq * hq) * damp
                shq = h * (1.0 + hq * hq / 6.0) * damp  # sinh(hq)/q
            else:
                ep = cmath.exp(hq - 0.5 * h * gk)
                em = cmath.exp(-hq - 0.5 * h * gk)
                ch = 0.5 * (ep + em)
                shq = 0.5 * (ep - em) / q
            m11 = ch - shq * (0.5 * gk)
            m12 = shq / d
            m21 = shq * s
            m22 = ch + shq * (0.5 * gk)
            p1, j1 = m11 * p1 + m12 * j1, m21 * p1 + m22 * j1
            p2, j2 = m11 * p2 + m12 * j2, m21 * p2 + m22 * j2
            big = (abs(p1.real) + abs(p1.imag) + abs(j1.real) + abs(j1.imag)
                   + abs(p2.real) + abs(p2.imag) + abs(j2.real) + abs(j2.imag))
            if big > RESCALE_ABOVE:
                f = 1.0 / big
                p1 *= f
                j1 *= f
                p2 *= f
                j2 *= f
        out[i] = -j2 / j1
    return out


def _cells(population, mu, sigma):
    """Per-cell A/D (1/mV) and widths (mV), boundary first, and the reset index."""
    nrn = population.neuron

    kn = kernel_neuron(nrn)
    stack, xbuf = scratch(nrn.program)
    step = min(sigma, length_scale(nrn)) / CELLS_PER_SCALE_LAPLACE
    u_min = lower_end(*kn, float(nrn.tau_m), float(nrn.reset), mu, sigma, step, stack, xbuf)
    grid = np.empty(int((nrn.boundary - u_min) / step) + 16)
    n, k_r = fill_grid(float(nrn.boundary), float(nrn.reset), u_min, step, grid)
    grid = grid[:n]
    d = 0.5 * sigma * sigma / nrn.tau_m
    mid = 0.5 * (grid[1:] + grid[:-1])
    g = (np.asarray(nrn.drift(mid), dtype=float) + mu) / nrn.tau_m / d
    return np.ascontiguousarray(g), np.ascontiguousarray(grid[:-1] - grid[1:]), k_r, d


def passage_time_density(population, mu, sigma, t, mean_passage, std_passage):
    """Passage-time density (1/ms) and survivor function at times ``t`` (ms; < 0 gives 0 and 1).

    ``mean_passage`` and ``std_passage`` (ms) set the span of the Fourier grid.
    Returns ``(density, survivor, residual)`` with ``residual`` = |F| at the
    highest frequency used (below ``SPECTRUM_FLOOR`` unless the cap was hit).
    """
    g, widths, k_r, d = _cells(population, mu, sigma)

    def transform(s):
        out = np.empty(s.size, dtype=complex)
        laplace_passage(g, widths, k_r, d, s, out)
        return out

    return density_from_transform(transform, t, mean_passage, std_passage)


def density_from_transform(transform, t, mean_passage, std_passage):
    """Density (1/ms) and survivor function at times ``t`` (ms) of a passage time whose Laplace transform
    ``transform(s)`` (``s`` an array in 1/ms) is given; as :func:`passage_time_density`, which uses it."""
    t = np.asarray(t, dtype=float)
    span = max(float(np.max(t, initial=0.0)), mean_passage + 14.0 * std_passage)
    period = 2.0 * span
    # the frequency spacing is fixed by the period: doubling the count only adds new, higher ones
    n_f = MIN_FREQS
    f_hat = transform(1j * 2.0 * math.pi * np.arange(n_f + 1) / period)
    while abs(f_hat[-1]) >= SPECTRUM_FLOOR and n_f < MAX_FREQS:
        new = transform(1j * 2.0 * math.pi * np.arange(n_f + 1, 2 * n_f + 1) / period)
        f_hat = np.concatenate([f_hat, new])
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
    return np.maximum(dens, 0.0), np.clip(surv, 0.0, 1.0), float(abs(f_hat[-1]))
