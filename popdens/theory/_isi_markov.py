"""Exact ISI statistics of an escape-noise neuron with one adaptation component, at constant drive.

After each spike the neuron is at reset with the adaptation ``z`` it carried
into the spike plus the kick, ``z = w(T-) + jump``; the next interval ``T``
depends only on ``z`` (escape noise: the hazard is a function of the
deterministic trajectory from ``(reset, z)``), and the next post-spike state
is ``z' = z exp(-T/tau) + jump``.  The post-spike states therefore form a
Markov chain and the ISIs a hidden-Markov sequence (Urdapilleta 2011, Phys.
Rev. E 84:041904, uses this structure for adapting neurons).  On a grid of
``z`` the chain's transition matrix ``K`` (hat functions for the stationary
distribution ``pi``, which stays non-negative; cubic interpolation of the
smooth conditional expectations of later intervals, whose serial correlations
hat functions would blur), the conditional moments ``m_1(z)``, ``m_2(z)`` and
``B_ij = E[T; z' ~ z_j | z_i]`` give

.. math:: E[T] = \\pi m_1,\\quad E[T^2] = \\pi m_2,\\quad
          E[T_0 T_n] = \\pi B K^{n-1} m_1,\\quad
          \\rho_n = \\frac{E[T_0 T_n] - E[T]^2}{E[T^2] - E[T]^2},

with no closure: exact up to the ``z`` and age grids.
One component (current without subthreshold coupling, or moving threshold)
only.  Units: ms, mV.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numba
import numpy as np

from ..model._kernels import MS_TO_S, NO_REFCOUNT, drift_value, hazard_value
from ._scales import kernel_neuron, scratch

__all__ = ["IsiChain", "isi_chain"]

#: Nodes of the post-spike adaptation grid.
Z_NODES = 121
#: Age step (ms), at most, and ages per membrane time constant, at least.
AGE_STEP_MS = 0.05
AGES_PER_TAU = 200
#: The age grid ends where the survivor of the slowest trajectory falls below this.
SURVIVOR_END = 1e-12
#: Probability allowed to leave the adaptation grid before it is widened.
MAX_LEAK = 1e-10
#: The grid is zoomed onto the stationary distribution's support (nodes above this fraction of its
#: peak) until the support spans at least this many nodes.
SUPPORT_LEVEL = 1e-12
MIN_SUPPORT_NODES = 60
#: The ISI standard deviation must span at least this many age steps (else the step is refined).
ISI_SPREAD_STEPS = 20.0


@dataclass(frozen=True)
class IsiChain:
    """Stationary ISI statistics of the hidden-Markov spike train (see module docstring)."""

    rate: float  # Hz
    mean_isi: float  # ms
    cv: float
    serial_correlation: np.ndarray  # rho_1, rho_2, ...
    z: np.ndarray  # post-spike adaptation grid (mV)
    distribution: np.ndarray  # stationary probabilities of the grid nodes


def _ages(neuron, a_max):
    da = min(AGE_STEP_MS, neuron.tau_m / AGES_PER_TAU)
    return neuron.refractory + np.arange(0.0, a_max - neuron.refractory + 0.5 * da, da), da


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def _density(code, p, ops, args, tau_m, reset, boundary, has_cutoff, tau_ref, mu, hcode, hp, hops, hargs,
             theta, uses_slope, current, tau, z, da, out_p, out_z, stack, xbuf):  # pragma: no cover - compiled
    """ISI density (1/ms) and adaptation reaching a spike (mV) at the ages ``tau_ref + k da``.

    The component decays as ``z exp(-age/tau)`` from the spike; the potential, held at reset while
    refractory, takes classical Runge--Kutta steps (fourth order) under the current; a spike cut-off
    ends the trajectory with the survivors firing there.  Returns the survivor at the last age.
    """
    n = out_p.shape[0]
    u = reset
    big_h = 0.0
    h_prev = 0.0
    for k in range(n):
        a = tau_ref + k * da
        if k > 0:
            a0 = a - da
            w0 = z * math.exp(-a0 / tau) if current else 0.0
            wm = z * math.exp(-(a0 + 0.5 * da) / tau) if current else 0.0
            w1 = z * math.exp(-a / tau) if current else 0.0
            k1 = (drift_value(code, p, ops, args, u, stack, xbuf) + mu - w0) / tau_m
            k2 = (drift_value(code, p, ops, args, u + 0.5 * da * k1, stack, xbuf) + mu - wm) / tau_m
            k3 = (drift_value(code, p, ops, args, u + 0.5 * da * k2, stack, xbuf) + mu - wm) / tau_m
            k4 = (drift_value(code, p, ops, args, u + da * k3, stack, xbuf) + mu - w1) / tau_m
            u = u + da * (k1 + 2.0 * k2 + 2.0 * k3 + k4) / 6.0
        zk = z * math.exp(-a / tau)
        shift = 0.0 if current else zk
        dudt = 0.0
        if uses_slope:
            dudt = (drift_value(code, p, ops, args, u, stack, xbuf) + mu - (zk if current else 0.0)) / tau_m
        h = hazard_value(hcode, hp, hops, hargs, u, theta + shift, dudt, stack, xbuf) * MS_TO_S
        if k > 0:
            big_h += 0.5 * (h + h_prev) * da
        h_prev = h
        s = math.exp(-big_h)
        out_z[k] = zk
        if has_cutoff and u >= boundary:
            out_p[k] = s / da  # the survivors fire in this age bin
            for j in range(k + 1, n):
                out_p[j] = 0.0
                out_z[j] = zk
            return 0.0
        out_p[k] = h * s
    return math.exp(-big_h)


def _isi_density(population, mu, z, ages, da):
    nrn, hz = population.neuron, population.noise.hazard
    comp = nrn.adaptation[0]
    stack, xbuf = scratch(nrn.program, hz.program)
    out_p, out_z = np.empty(ages.size), np.empty(ages.size)
    s_end = _density(*kernel_neuron(nrn), float(nrn.tau_m), float(nrn.reset), float(nrn.boundary),
                     bool(nrn.has_cutoff), float(nrn.refractory), float(mu), hz.code,
                     np.ascontiguousarray(hz.kernel_params, dtype=float), hz.program[0], hz.program[1],
                     float(nrn.threshold), bool(hz.uses_slope), comp.kind == 0, float(comp.tau), float(z), da,
                     out_p, out_z, stack, xbuf)
    return out_p, s_end, out_z


def _cubic(x, n):
    """First node and the four Lagrange weights of cubic interpolation at grid positions ``x`` (in nodes)."""
    c0 = np.clip(np.floor(x).astype(int) - 1, 0, n - 4)
    t = x - c0  # position within the stencil c0 .. c0 + 3
    w = np.array([-(t - 1) * (t - 2) * (t - 3) / 6.0, t * (t - 2) * (t - 3) / 2.0,
                  -t * (t - 1) * (t - 3) / 2.0, t * (t - 1) * (t - 2) / 6.0])
    return c0, w


def isi_chain(population, mu: float, n_lags: int = 5, z_start: float | None = None) -> IsiChain:
    """ISI statistics from the Markov chain of the post-spike adaptation at drive ``mu`` (mV).

    ``z_start`` (mV): a typical post-spike adaptation (e.g. the closure's), to place the grid.
    """
    nrn = population.neuron
    if len(nrn.adaptation) != 1 or nrn.adaptation[0].coupling_value != 0.0:
        raise ValueError("the ISI Markov chain needs exactly one adaptation component without `coupling`")
    comp = nrn.adaptation[0]
    b, tau = comp.jump, comp.tau
    z_hi = max(3.0 * (z_start if z_start else b), b + 1e-3)
    a_max = nrn.refractory + 20.0 * nrn.tau_m
    while True:
        ages, da = _ages(nrn, a_max)
        _, s_end, _ = _isi_density(population, mu, z_hi, ages, da)
        if s_end < SURVIVOR_END:
            break
        a_max *= 2.0
        if a_max > 1e6:
            raise ValueError(f"at `mu` = {mu!r} mV the neuron hardly fires: no ISI statistics")
    for _ in range(4):
        out = _chain(population, mu, n_lags, b, z_hi, ages, da)
        if out.cv * out.mean_isi >= ISI_SPREAD_STEPS * da:
            return out
        # the intervals are sharper than the age grid resolves: refine it
        da = out.cv * out.mean_isi / (2.0 * ISI_SPREAD_STEPS)
        ages = nrn.refractory + np.arange(0.0, ages[-1] - nrn.refractory + 0.5 * da, da)
    return out


def _chain(population, mu, n_lags, b, z_hi, ages, da) -> IsiChain:
    w = np.full(ages.size, da)
    w[0] = w[-1] = 0.5 * da
    z_lo = b
    for _ in range(12):
        z = np.linspace(z_lo, z_hi, Z_NODES)
        dz = z[1] - z[0]
        n = z.size
        k_hat = np.zeros((n, n))  # hat-function transitions: the stationary distribution (non-negative)
        k_cub = np.zeros((n, n))  # cubic interpolation: conditional expectations of later intervals
        b_cub = np.zeros((n, n))
        m1 = np.zeros(n)
        m2 = np.zeros(n)
        leak = np.zeros(n)
        for j, zj in enumerate(z):
            p, _, path = _isi_density(population, mu, zj, ages, da)
            wp = w * p
            wp /= wp.sum()
            m1[j] = np.dot(wp, ages)
            m2[j] = np.dot(wp, ages * ages)
            x = (path + b - z_lo) / dz  # adaptation reaching the next spike plus its kick, in grid units
            leak[j] = float(wp[(x > n - 1) | (x < 0)].sum())
            i0 = np.clip(np.floor(x).astype(int), 0, n - 2)
            frac = np.clip(x - i0, 0.0, 1.0)
            np.add.at(k_hat[j], i0, wp * (1.0 - frac))
            np.add.at(k_hat[j], i0 + 1, wp * frac)
            c0, cw = _cubic(np.clip(x, 0.0, n - 1.0), n)
            for q in range(4):
                np.add.at(k_cub[j], c0 + q, wp * cw[q])
                np.add.at(b_cub[j], c0 + q, wp * ages * cw[q])
        # stationary distribution: left eigenvector of K for eigenvalue 1
        vals, vecs = np.linalg.eig(k_hat.T)
        pi = np.real(vecs[:, np.argmin(np.abs(vals - 1.0))])
        pi = np.abs(pi) / np.abs(pi).sum()
        if float(pi @ leak) > MAX_LEAK:  # mass leaves the grid: widen it
            z_lo, z_hi = max(b, z_lo - 0.5 * (z_hi - z_lo)), z_hi + 0.5 * (z_hi - z_lo)
            continue
        held = np.nonzero(pi > SUPPORT_LEVEL * pi.max())[0]
        if held[-1] - held[0] >= MIN_SUPPORT_NODES:
            break
        # the distribution sits in a few cells: zoom the grid onto its support (with a margin)
        lo, hi = z[max(held[0] - 2, 0)], z[min(held[-1] + 2, n - 1)]
        z_lo, z_hi = max(b, lo - 0.5 * (hi - lo)), hi + 0.5 * (hi - lo)
    mean = float(pi @ m1)
    var = float(pi @ m2) - mean * mean
    rho = np.empty(n_lags)
    v = m1.copy()
    for lag in range(n_lags):
        rho[lag] = (float(pi @ b_cub @ v) - mean * mean) / var
        v = k_cub @ v
    return IsiChain(rate=1000.0 / mean, mean_isi=mean, cv=math.sqrt(max(var, 0.0)) / mean,
                    serial_correlation=rho, z=z, distribution=pi)
