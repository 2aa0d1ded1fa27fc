"""Threshold integration of the stationary Fokker--Planck equation (any drift).

With ``A(u) = (F(u) + mu)/tau_m`` (mV/ms) and ``D = sigma^2/(2 tau_m)``
(mV^2/ms) the stationary density ``P`` and flux ``J`` obey

.. math:: -\\frac{dP}{du} = \\frac{J - A P}{D},\\qquad
          \\frac{dJ}{du} = \\nu\\,[\\delta(u - u_r) - \\delta(u - u_b)],

with ``P(u_b) = 0`` at the absorbing boundary ``u_b`` (threshold or
cut-off) and a reflecting lower end.  Integrating *backward* from the
boundary with ``J = 1`` (flux 1/ms above reset, 0 below) gives ``P`` up to the
factor ``nu``; the rate follows from normalisation including the refractory
mass, ``1/nu = int P du + tau_ref`` (Richardson 2007, Phys. Rev. E 76:021919).

Each cell takes ``A`` at its midpoint and is integrated exactly for that
constant drift (an exponential integrator), so stiff cells (strong drift,
weak noise, the EIF near its cut-off) stay stable and positive; the error is
second order in the cell width (measured in the tests).

First-passage moments (reset to boundary, reflecting at the lower end) use
the same cells: the mean passage time from ``u`` is
``T1(u) = int_u^{u_b} I(y) dy`` with ``I' = 1/D - (A/D) I`` (integrated
upward, ``I = 0`` at the lower end), and the second moment from reset is
``T2 = 2 int P(u) T1(u) du`` with ``P`` the backward solution above: the
occupation density of one passage is the Green's function of the backward
equation ``A T_n' + D T_n'' = -n T_{n-1}`` (Gardiner, Handbook of Stochastic
Methods, section 5.2).

The sweeps work on an explicit grid (descending potentials, boundary first,
reset on a node) so that they can be reused, e.g. at complex frequency.
Units: mV, ms; rates in 1/ms here (the public layer converts to Hz).
"""

from __future__ import annotations

import math

import numba

from ..model._kernels import NO_REFCOUNT, drift_value

__all__ = ["stationary_sweep", "passage_moments", "lower_end", "fill_grid", "rates_for_drives"]

#: The lower end is placed where the density has fallen by this factor (natural
#: log) below its largest value at or below reset, in a region where the drift
#: points up (so it keeps falling): e^-40 = 4e-18, below double precision.
LOG_DECAY = 40.0
#: Rescale the unnormalised backward solution when it exceeds this (no overflow
#: at very low rates; the result is unchanged because the equations are linear).
RESCALE_ABOVE = 1e200
#: Give up placing the lower end this many grid steps below reset.
MAX_CELLS_BELOW = 50_000_000


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def _phi(z):  # pragma: no cover - compiled
    """(1 - e^{-z})/z, stable for all z (1 at z = 0)."""
    if abs(z) < 1e-8:
        return 1.0 - 0.5 * z
    return -math.expm1(-z) / z


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def _psi(z):  # pragma: no cover - compiled
    """(z - 1 + e^{-z})/z^2 = (1 - phi(z))/z, stable for all z (1/2 at z = 0)."""
    if abs(z) < 1e-4:
        return 0.5 - z / 6.0 + z * z / 24.0
    return (1.0 - _phi(z)) / z


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def lower_end(code, p, ops, args, tau_m, reset, mu, sigma, step, stack, xbuf):  # pragma: no cover
    """Potential (mV) below ``reset`` where the stationary density is negligible.

    Walks down from reset in steps of ``step`` mV accumulating the log of the
    density below reset (``d log P/du = A/D`` there); stops ``LOG_DECAY``
    below the running maximum where ``A > 0``.  Returns NaN if no such point
    exists within ``MAX_CELLS_BELOW`` steps (no stationary state).
    """
    inv_d = 2.0 * tau_m / (sigma * sigma)
    logp = 0.0
    best = 0.0
    u = reset
    for _ in range(MAX_CELLS_BELOW):
        a = (drift_value(code, p, ops, args, u - 0.5 * step, stack, xbuf) + mu) / tau_m
        logp -= a * inv_d * step
        u -= step
        if logp > best:
            best = logp
        if a > 0.0 and logp < best - LOG_DECAY:
            return u
    return math.nan


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def fill_grid(boundary, reset, u_min, step, out):  # pragma: no cover - compiled
    """Descending grid from ``boundary`` to at most ``u_min`` with reset on a node.

    Cells above reset have width ``(boundary - reset)/ceil((boundary - reset)/step)``,
    cells below the same width.  Returns the number of nodes written (0 if
    ``out`` is too short) and the index of the reset node.
    """
    n_up = int(math.ceil((boundary - reset) / step - 1e-9))
    if n_up < 1:
        n_up = 1
    h = (boundary - reset) / n_up
    n_down = int(math.ceil((reset - u_min) / h - 1e-9))
    if n_down < 1:
        n_down = 1
    n = n_up + n_down + 1
    if n > out.shape[0]:
        return 0, n_up
    for k in range(n_up):
        out[k] = boundary - k * h
    out[n_up] = reset
    for k in range(1, n_down + 1):
        out[n_up + k] = reset - k * h
    return n, n_up


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def stationary_sweep(code, p, ops, args, tau_m, refractory, mu, sigma, grid, n, k_reset,
                     dens, flux, store, stack, xbuf):  # pragma: no cover - compiled
    """Backward sweep on ``grid[:n]`` (descending, ``grid[k_reset]`` = reset).

    Returns ``(rate, int_p, int_up, jv)``: the rate (1/ms), and for the
    unnormalised solution with flux ``jv`` above reset (``jv`` = 1 unless
    rescaled) the integrals ``int P du`` (ms) and ``int u P du`` (ms mV).
    With ``store`` the unnormalised density (ms/mV) and flux (1/ms) at the
    nodes go to ``dens[:n]`` and ``flux[:n]``; normalise by the rate / jv.
    """
    inv_d = 2.0 * tau_m / (sigma * sigma)
    jv = 1.0
    pk = 0.0
    int_p = 0.0
    int_up = 0.0
    if store:
        dens[0] = 0.0
        flux[0] = jv
    for k in range(n - 1):
        hi = grid[k]
        lo = grid[k + 1]
        h = hi - lo
        a = (drift_value(code, p, ops, args, 0.5 * (hi + lo), stack, xbuf) + mu) / tau_m
        z = a * inv_d * h
        ph = _phi(z)
        j = jv if k < k_reset else 0.0
        cell = pk * h * ph + j * inv_d * h * h * _psi(z)
        int_p += cell
        int_up += cell * 0.5 * (hi + lo)
        pk = pk * math.exp(-z) + j * inv_d * h * ph
        if store:
            dens[k + 1] = pk
            flux[k + 1] = jv if k + 1 <= k_reset else 0.0
        if pk > RESCALE_ABOVE:
            s = 1.0 / RESCALE_ABOVE
            pk *= s
            jv *= s
            int_p *= s
            int_up *= s
            if store:
                for i in range(k + 2):
                    dens[i] *= s
                    flux[i] *= s
    rate = jv / (int_p + refractory * jv)
    return rate, int_p, int_up, jv


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def passage_moments(code, p, ops, args, tau_m, mu, sigma, grid, n, k_reset, dens, jv, t1, stack, xbuf):  # pragma: no cover
    """First two moments (ms, ms^2) of the passage time from reset to the boundary.

    ``dens[:n]`` is the stored backward solution with flux ``jv``; ``t1[:n]``
    receives the mean passage time T1(u) (ms) from every node.
    Returns ``(T1 from reset via int P, T2)``.
    """
    inv_d = 2.0 * tau_m / (sigma * sigma)
    # upward sweep: I (ms/mV) at nodes, from the lower end; T1 accumulated downward afterwards
    # first store cell integrals of I in t1 (shifted), then cumulate from the top
    ik = 0.0
    for k in range(n - 2, -1, -1):
        hi = grid[k]
        lo = grid[k + 1]
        h = hi - lo
        a = (drift_value(code, p, ops, args, 0.5 * (hi + lo), stack, xbuf) + mu) / tau_m
        z = a * inv_d * h
        ph = _phi(z)
        t1[k + 1] = ik * h * ph + inv_d * h * h * _psi(z)  # integral of I over cell k
        ik = ik * math.exp(-z) + inv_d * h * ph
    # T1(grid[0]) = 0; T1(grid[k+1]) = T1(grid[k]) + cell integral k
    acc = 0.0
    t1[0] = 0.0
    for k in range(n - 1):
        acc += t1[k + 1]
        t1[k + 1] = acc
    # T2 = 2 int P T1 du with P = dens / jv; per cell: the exact integral of the
    # exponential interpolant of P (as in the sweep) times the mean of T1 at the nodes
    t2 = 0.0
    m1 = 0.0
    for k in range(n - 1):
        hi = grid[k]
        lo = grid[k + 1]
        h = hi - lo
        a = (drift_value(code, p, ops, args, 0.5 * (hi + lo), stack, xbuf) + mu) / tau_m
        z = a * inv_d * h
        jc = jv if k < k_reset else 0.0
        cell_p = dens[k] * h * _phi(z) + jc * inv_d * h * h * _psi(z)
        m1 += cell_p
        t2 += cell_p * 0.5 * (t1[k] + t1[k + 1])
    return m1 / jv, 2.0 * t2 / jv


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def rates_for_drives(code, p, ops, args, tau_m, reset, boundary, refractory, mus, sigmas, step,
                     grid, out, stack, xbuf):  # pragma: no cover - compiled
    """Stationary rate (1/ms) for each (mu, sigma); NaN where no grid could be built."""
    for i in range(mus.shape[0]):
        mu = mus[i]
        sg = sigmas[i]
        u_min = lower_end(code, p, ops, args, tau_m, reset, mu, sg, step, stack, xbuf)
        if not (u_min == u_min):
            out[i] = math.nan
            continue
        n, k_r = fill_grid(boundary, reset, u_min, step, grid)
        if n == 0:
            out[i] = math.nan
            continue
        r, _, _, _ = stationary_sweep(code, p, ops, args, tau_m, refractory, mu, sg, grid, n, k_r,
                                      grid, grid, False, stack, xbuf)
        out[i] = r
    return out
