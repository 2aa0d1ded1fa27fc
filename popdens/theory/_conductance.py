"""Conductance back end of the steady state: stationary rates of populations with :class:`~popdens.ConductanceNoise`.

The conductances ``g_x = g_x0 + dg_x`` split into their means, which enter
the drift (the effective-time-constant approximation: a shorter time
constant and a moved resting potential; Richardson 2004, Phys. Rev. E
69:051918; Richardson & Gerstner 2005, Neural Comput. 17:923), and their
fluctuations, which enter multiplied by the driving force ``E_x - u``.
Taking the fluctuations in their white limit (the same integrated
intensity ``w^2 nu tau^2``) gives a Fokker--Planck equation with
voltage-dependent drift and diffusion, in the Stratonovich sense (the limit
of a coloured noise; Wong & Zakai 1965):

.. math::
    A(u) = \\frac{F(u) + \\mu + \\sum_x g_{x0}(E_x - u)}{\\tau_m},\\qquad
    D(u) = \\sum_x \\frac{w_x^2\\nu_x\\tau_x^2}{2\\tau_m^2}\\,(E_x - u)^2,\\qquad
    J = \\big(A - \\tfrac{1}{2}D'\\big)P - D\\,\\partial_u P .

Its stationary state is found by threshold integration (Richardson 2007,
Phys. Rev. E 76:021919) of ``Q = D P``: ``dQ/du = ((A + D'/2)/D) Q - J``,
each cell integrated exactly for its midpoint coefficients (second order in
the cell width), Richardson-extrapolated from two widths.

Methods (``method`` of :func:`popdens.gain` for conductance input):

* ``"filtered"`` (``"auto"``) -- the equation above with threshold and
  reset moved for the synaptic filtering (the boundary layer of coloured
  noise; Brunel & Sergi 1998, Fourcaud & Brunel 2002), with the local noise
  at threshold, see
  :meth:`~popdens.ConductanceNoise.boundary_shifts`; hard thresholds only
  (models with a spike cut-off are not shifted, as for coloured noise);
* ``"diffusion"`` -- the same without the shift (white conductance noise);
* ``"current-based"`` -- the naive current-based approximation, LIF only:
  white noise at the fixed ``tau_m``, the conductances replaced by currents
  at the effective rest ``E_0``: drive ``mu + sum_x g_x0 (E_x - E_0)`` and
  ``sigma^2 = sum_x w_x^2 nu_x tau_x^2 (E_x - E_0)^2 / tau_m`` (reported for
  comparison: it ignores the shorter time constant).

All are approximations; their errors against the Monte Carlo twin are
tabulated in the contributor guide.

Linear response (:func:`conductance_transfer`, used by :func:`popdens.transfer`): the
``"filtered"`` equation at complex frequency, by the threshold integration of
:mod:`popdens.theory._modulated_threshold` with ``H = 1/D(u)`` per step; mean-drive modulation only.
Units: mV, ms; rates in Hz.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from ..exceptions import ConvergenceError
from ..model._kernels import NO_REFCOUNT, drift_value
from ..model.effective import conductance_carrier
from ..model.neurons import CODE_LIF
from ..model.noise import Population, WhiteNoise
from ._modulated_threshold import DEPTH_SIGMAS, NODES_PER_SIGMA, Sweep
from ._scales import kernel_neuron, length_scale, scratch
from ._threshold import LOG_DECAY, MAX_CELLS_BELOW, RESCALE_ABOVE, _phi, _psi, fill_grid

__all__ = ["CONDUCTANCE_METHODS", "conductance_rates", "current_based_equivalent", "ConductanceSweep",
           "conductance_transfer", "conductance_stationary"]

CONDUCTANCE_METHODS = ("auto", "filtered", "diffusion", "current-based")
#: Cells per local voltage scale ``sqrt(D(threshold) tau_eff)`` (or per model length scale, if
#: shorter); second order in the width, Richardson-extrapolated from this and half as many.
CELLS_PER_SCALE = 100
#: Scratch length of the grid (nodes).
GRID_CAPACITY = 4_000_000
#: Smallest diffusion coefficient (mV^2/ms) used in a cell, where D(u) vanishes at a reversal
#: potential: the density there is negligible (the drift points away from it).
D_FLOOR = 1e-300


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def _coeffs(code, p, ops, args, tau_m, mu, gsum, grev, d0, d1, d2, u, stack, xbuf):  # pragma: no cover
    """``(A + D'/2, D)`` at ``u``: the Ito drift (mV/ms) and the diffusion coefficient (mV^2/ms)."""
    a = (drift_value(code, p, ops, args, u, stack, xbuf) + mu + grev - gsum * u) / tau_m
    d = d0 + u * (d1 + d2 * u)
    if d < D_FLOOR:
        d = D_FLOOR
    return a + 0.5 * (d1 + 2.0 * d2 * u), d


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def conductance_sweep_rates(code, p, ops, args, tau_m, reset, boundary, refractory, mus, gsum, grev,
                            d0, d1, d2, step, grid, out, stack, xbuf):  # pragma: no cover - compiled
    """Stationary rate (1/ms) at each drive in ``mus``; NaN where no grid could be built.

    ``gsum = sum g_x0``, ``grev = sum g_x0 E_x`` (mV); ``D(u) = d0 + d1 u + d2 u^2``.
    """
    for i in range(mus.shape[0]):
        mu = mus[i]
        # lower end: below reset d log Q/du = (A + D'/2)/D; stop LOG_DECAY below the running
        # maximum where the drift points up
        logq = 0.0
        best = 0.0
        u = reset
        u_min = math.nan
        for _ in range(MAX_CELLS_BELOW):
            ai, d = _coeffs(code, p, ops, args, tau_m, mu, gsum, grev, d0, d1, d2, u - 0.5 * step, stack, xbuf)
            logq -= ai / d * step
            u -= step
            if logq > best:
                best = logq
            if ai > 0.0 and logq < best - LOG_DECAY:
                u_min = u
                break
        if not (u_min == u_min):
            out[i] = math.nan
            continue
        n, k_r = fill_grid(boundary, reset, u_min, step, grid)
        if n == 0:
            out[i] = math.nan
            continue
        jv = 1.0
        qk = 0.0
        int_p = 0.0
        for k in range(n - 1):
            hi = grid[k]
            lo = grid[k + 1]
            h = hi - lo
            ai, d = _coeffs(code, p, ops, args, tau_m, mu, gsum, grev, d0, d1, d2, 0.5 * (hi + lo), stack, xbuf)
            z = ai / d * h
            ph = _phi(z)
            j = jv if k < k_r else 0.0
            int_p += (qk * h * ph + j * h * h * _psi(z)) / d
            qk = qk * math.exp(-z) + j * h * ph
            if qk > RESCALE_ABOVE:
                s = 1.0 / RESCALE_ABOVE
                qk *= s
                jv *= s
                int_p *= s
        out[i] = jv / (int_p + refractory * jv)
    return out


def _check(population) -> None:
    if population.neuron.adapting:
        raise ValueError("the steady state of conductance input does not support `adaptation` yet; remove it "
                         "from the neuron model or use popdens.montecarlo")


def _means(noise) -> tuple[float, float]:
    gsum = grev = 0.0
    for nu, w, tau, rev in noise.channels():
        g0 = w * nu * tau
        gsum += g0
        grev += g0 * rev
    return gsum, grev


def _shifted_bounds(population, shift: bool) -> tuple[float, float]:
    nrn, noise = population.neuron, population.noise
    if not shift or nrn.has_cutoff:
        return float(nrn.boundary), float(nrn.reset)
    d_th, d_re = noise.boundary_shifts(nrn.tau_m, nrn.boundary, nrn.reset)
    return float(nrn.boundary) + d_th, float(nrn.reset) + d_re


def _voltage_rates(population, mus: np.ndarray, shift: bool, cells: int) -> np.ndarray:
    nrn, noise = population.neuron, population.noise
    boundary, reset = _shifted_bounds(population, shift)
    gsum, grev = _means(noise)
    d0, d1, d2 = noise.diffusion_coefficients(nrn.tau_m)
    d_th = d0 + boundary * (d1 + d2 * boundary)
    scale = math.sqrt(max(d_th, 0.0) * noise.effective_time_constant(nrn.tau_m))
    if not scale > 0.0:
        raise ValueError("conductance input without fluctuations at threshold: `exc_rate` must be > 0 Hz and the "
                         "reversal potentials away from the threshold")
    step = min(scale, length_scale(nrn)) / cells
    flat = np.ascontiguousarray(mus.ravel(), dtype=float)
    out = np.empty(flat.size)
    stack, xbuf = scratch(nrn.program)
    grid = np.empty(GRID_CAPACITY)
    conductance_sweep_rates(*kernel_neuron(nrn), float(nrn.tau_m), reset, boundary, float(nrn.refractory), flat,
                            gsum, grev, d0, d1, d2, step, grid, out, stack, xbuf)
    if np.any(np.isnan(out)):
        bad = flat[np.isnan(out)][0]
        raise ConvergenceError(f"threshold integration found no stationary state at `mu` = {bad!r} mV with "
                               "conductance input (the density does not decay below reset within the grid capacity)")
    return out.reshape(mus.shape) * 1000.0


def current_based_equivalent(population, mu: float) -> tuple[Population, float]:
    """The naive current-based stand-in at drive ``mu`` (mV): a white-noise LIF population at the
    fixed ``tau_m`` and its drive (mV), with the conductances replaced by currents at ``E_0``."""
    nrn, noise = population.neuron, population.noise
    gsum, grev = _means(noise)
    e0 = (nrn.rest + mu + grev) / (1.0 + gsum)
    var = 0.0
    for nu, w, tau, rev in noise.channels():
        var += w * w * nu * tau * tau * (rev - e0) ** 2 / nrn.tau_m
    if not var > 0.0:
        raise ValueError("the current-based approximation needs fluctuations: `exc_rate` > 0 Hz and reversal "
                         "potentials away from the effective rest")
    return Population(nrn, WhiteNoise(math.sqrt(var))), mu + grev - gsum * e0


def conductance_rates(population, mus: np.ndarray, method: str, white_gain) -> np.ndarray:
    """Stationary rates (Hz) at drives ``mus`` (mV) by ``method`` (module docstring).

    ``white_gain(population, mu)`` computes white-noise rates (the current-based approximation's).
    """
    if method not in CONDUCTANCE_METHODS:
        raise ValueError(f"`method` must be one of {list(CONDUCTANCE_METHODS)} for conductance input, "
                         f"got {method!r}")
    _check(population)
    mus = np.asarray(mus, dtype=float)
    if method == "current-based":
        if population.neuron.code != CODE_LIF:
            raise ValueError("`method` 'current-based' is defined for the LIF only; use 'filtered' or 'diffusion'")
        flat = mus.ravel()
        out = np.empty(flat.size)
        for i, m in enumerate(flat):
            white, drive = current_based_equivalent(population, float(m))
            out[i] = float(white_gain(white, drive))
        return out.reshape(mus.shape)
    shift = method in ("auto", "filtered")
    fine = _voltage_rates(population, mus, shift, CELLS_PER_SCALE)
    coarse = _voltage_rates(population, mus, shift, CELLS_PER_SCALE // 2)
    return (4.0 * fine - coarse) / 3.0


# ---------------------------------------------------------------------------- linear response
class ConductanceSweep(Sweep):
    """Threshold-integration grid and stationary state of a conductance population, for its linear response.

    The equation of the module docstring in the form of :mod:`popdens.theory._modulated_threshold`
    (``dP/du = G P - H J + S``): ``G = (A - D'/2)/D`` and ``H = 1/D`` per step, threshold and reset
    moved as for ``"filtered"`` (:func:`popdens.model.effective.conductance_carrier`).  Only the mean
    drive is modulated: ``S = P0 / (tau_m D)``.

    Parameters
    ----------
    population : Population
        Neuron model with :class:`~popdens.ConductanceNoise`.
    mu : float
        Stationary drive (mV).
    nodes_per_scale : float
        Grid nodes per local voltage scale ``sqrt(2 tau_eff D(threshold))`` (mV).
    """

    def __init__(self, population, mu: float, nodes_per_scale: float = NODES_PER_SIGMA):
        carrier, sigma_ref = conductance_carrier(population)
        nrn, noise = carrier.neuron, population.noise
        self.neuron = nrn
        self.mu = float(mu)
        self.sigma = sigma_ref
        tau_m = float(nrn.tau_m)
        gsum, grev = _means(noise)
        d0, d1, d2 = noise.diffusion_coefficients(tau_m)
        self._dcoef = (d0, d1, d2)
        scale = math.sqrt(2.0 * noise.effective_time_constant(tau_m)) * sigma_ref / math.sqrt(2.0 * tau_m)

        def coefficients(mid, nodes):
            def g_and_d(u):
                a = (np.asarray(nrn.drift(u), dtype=float) + self.mu + grev - gsum * u) / tau_m
                d = np.maximum(d0 + u * (d1 + d2 * u), D_FLOOR)
                return (a - 0.5 * (d1 + 2.0 * d2 * u)) / d, d
            g_mid, d_mid = g_and_d(mid)
            return g_mid, g_and_d(nodes)[0], 1.0 / d_mid

        self.h = float("nan")  # H varies per step (``h_step``)
        self._label = f"`mu` = {self.mu!r} mV (conductance input)"
        anchor = min(float(nrn.reset), (float(nrn.rest) + self.mu + grev) / (1.0 + gsum))
        self._build(anchor, DEPTH_SIGMAS * scale, nodes_per_scale / scale, coefficients)

    def sources(self, modulate: str) -> np.ndarray:
        """Source of problem E (mean modulation) at the two ends of every step, per unit flux."""
        if modulate != "mean":
            raise ValueError(f"`modulate` must be 'mean' for conductance input, got {modulate!r}")
        d0, d1, d2 = self._dcoef
        u = self.u
        node = self.p0_unit / (float(self.neuron.tau_m) * np.maximum(d0 + u * (d1 + d2 * u), D_FLOOR))
        src = np.empty((node.size - 1, 2))
        src[:, 0] = node[:-1]
        src[:, 1] = node[1:]
        return src


def conductance_transfer(population, mu: float, s) -> tuple[np.ndarray, np.ndarray]:
    """Rate response (Hz/mV) to the mean drive at Laplace variables ``s`` (1/ms), and its error estimate.

    Threshold integration at complex frequency (Richardson 2007) of the ``"filtered"`` equation,
    Richardson-extrapolated from two grids (second order); the estimate is the difference between
    the extrapolated and the finer values.  Like the effective-boundary result for coloured noise it
    holds for ``2 pi f tau_syn`` well below 1.
    """
    _check(population)
    s = np.asarray(s, dtype=complex)
    coarse = ConductanceSweep(population, mu).solve(s)[0]
    fine = ConductanceSweep(population, mu, 2 * NODES_PER_SIGMA).solve(s)[0]
    out = (4.0 * fine - coarse) / 3.0
    return out, np.abs(out - fine)


# ---------------------------------------------------------------------------- stationary state
#: Small frequency (in units of the rate) at which the ISI transform gives the second moment of the
#: ISI: 2 (1 - Re E[exp(-i eps T)]) / eps^2 = <T^2> - eps^2 <T^4>/12 + ..., Richardson-extrapolated
#: over eps and eps/2 (truncation ~1e-9 relative; cancellation ~1e-11).
MOMENT_EPS = 0.01


def _second_moment(sweep, m1: float) -> float:
    eps = MOMENT_EPS / m1
    p = sweep.solve(np.array([1j * eps, 0.5j * eps]))[1]
    m2_e = 2.0 * (1.0 - p[0].real) / eps ** 2
    m2_h = 2.0 * (1.0 - p[1].real) / (0.5 * eps) ** 2
    return (4.0 * m2_h - m2_e) / 3.0


def conductance_stationary(population, mu: float) -> dict:
    """Stationary rate (Hz), ISI mean (ms) and second moment (ms^2), the potential density and the ISI
    transform of the ``"filtered"`` equation (see :func:`popdens.stationary`).

    Rate and moments from the complex-frequency sweeps of :class:`ConductanceSweep` on two grids,
    Richardson-extrapolated; the density (1/mV, non-refractory neurons, ascending potentials) on the
    finer grid, on the moved threshold and reset; ``transform(s)`` is the Laplace transform of the
    passage time from reset (the ISI less the refractory period) on the coarser grid.
    """
    _check(population)
    coarse = ConductanceSweep(population, mu)
    fine = ConductanceSweep(population, mu, 2 * NODES_PER_SIGMA)
    tref = float(population.neuron.refractory)
    rate = (4.0 * fine.rate - coarse.rate) / 3.0
    m1 = 1000.0 / rate
    m2 = (4.0 * _second_moment(fine, 1000.0 / fine.rate) - _second_moment(coarse, 1000.0 / coarse.rate)) / 3.0
    u = fine.u[::-1].copy()
    density = fine.density[::-1].copy()
    flux = np.where(u > float(fine.neuron.reset) - 0.5 * fine.du, rate, 0.0)

    def transform(s):
        return coarse.solve(s)[1] * np.exp(s * tref)

    return {"rate": rate, "m1": m1, "m2": m2, "u": u, "density": density, "flux": flux, "transform": transform,
            "rate_error_hz": abs(rate - fine.rate), "nodes": int(fine.u.size)}
