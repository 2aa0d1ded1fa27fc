"""Stationary white-noise populations by threshold integration (Richardson 2007, Phys. Rev. E 76:021919).

Rates over many drives, and for one drive the density, flux and the first two
moments of the passage time from reset to the boundary, each Richardson-
extrapolated from two cell widths.  Units: mV, ms; rates returned in Hz.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..exceptions import ConvergenceError
from ..model.neurons import CODE_PIF
from ._scales import kernel_neuron, length_scale, scratch
from ._threshold import fill_grid, lower_end, passage_moments, rates_for_drives, stationary_sweep


#: Threshold-integration cell width: this many cells per min(sigma, model length
#: scale).  The scheme is second order in the width (fourth for the LIF's linear
#: drift); results are Richardson-extrapolated from this and half as many cells
#: (measured for the EIF: ~1e-9 relative instead of ~1e-5 before extrapolation).
CELLS_PER_SCALE = 100


#: Scratch length of the threshold-integration grid (nodes).
GRID_CAPACITY = 4_000_000


# ---------------------------------------------------------------- diffusive
def _cell_width(population, sigma: float, cells_per_scale: int) -> float:
    return min(sigma, length_scale(population.neuron)) / cells_per_scale


def threshold_rates(population, mus, sigma, cells_per_scale=CELLS_PER_SCALE, extrapolate=True) -> np.ndarray:
    """Rates (Hz) by threshold integration; with ``extrapolate`` the second-order error is
    removed by Richardson extrapolation from ``cells_per_scale`` and half of it."""
    fine = _threshold_rates_at(population, mus, sigma, cells_per_scale)
    if not extrapolate:
        return fine
    coarse = _threshold_rates_at(population, mus, sigma, max(1, cells_per_scale // 2))
    ratio = cells_per_scale / max(1, cells_per_scale // 2)
    w = ratio * ratio
    return (w * fine - coarse) / (w - 1.0)


def _threshold_rates_at(population, mus, sigma, cells_per_scale) -> np.ndarray:
    nrn = population.neuron
    flat = np.ascontiguousarray(mus.ravel())
    out = np.empty(flat.size)
    stack, xbuf = scratch(nrn.program)
    grid = np.empty(GRID_CAPACITY)
    step = _cell_width(population, sigma, cells_per_scale)
    rates_for_drives(*kernel_neuron(nrn), float(nrn.tau_m), float(nrn.reset), float(nrn.boundary),
                     float(nrn.refractory), flat, np.full(flat.size, sigma), step, grid, out, stack, xbuf)
    if nrn.code == CODE_PIF:
        # no stationary state without a positive drift (the lower end recedes forever): rate 0
        out[flat <= 0.0] = 0.0
    if np.any(np.isnan(out)):
        bad = flat[np.isnan(out)][0]
        raise ConvergenceError(
            f"threshold integration found no stationary state at `mu` = {bad!r} mV, `sigma` = {sigma!r} mV "
            "(the density does not decay below reset within the grid capacity)"
        )
    return out.reshape(mus.shape) * 1000.0


@dataclass(frozen=True)
class _Sweep:
    u: np.ndarray
    density: np.ndarray  # 1/mV, non-refractory neurons
    flux: np.ndarray  # Hz
    rate: float  # Hz
    mean_u: float
    t1: float  # ms, mean passage time reset -> boundary
    t2: float  # ms^2
    rate_error: float = float("nan")  # Hz, estimated error of the extrapolated rate


def diffusive_sweep(population, mu: float, sigma: float, cells_per_scale=CELLS_PER_SCALE,
                     extrapolate=True) -> _Sweep:
    """Density, flux and passage-time moments on the fine grid; the scalars (rate, mean
    potential, moments) Richardson-extrapolated from half the cells (see ``CELLS_PER_SCALE``)."""
    fine = _diffusive_sweep_at(population, mu, sigma, cells_per_scale)
    if not extrapolate:
        return fine
    coarse_cells = max(1, cells_per_scale // 2)
    coarse = _diffusive_sweep_at(population, mu, sigma, coarse_cells)
    w = (cells_per_scale / coarse_cells) ** 2

    def ex(name):
        return (w * getattr(fine, name) - getattr(coarse, name)) / (w - 1.0)

    # error estimate: the same extrapolation one level coarser differs from this one by (a bound of)
    # its own error, which exceeds that of the finer extrapolation returned
    quarter_cells = max(1, coarse_cells // 2)
    quarter = _diffusive_sweep_at(population, mu, sigma, quarter_cells)
    wq = (coarse_cells / quarter_cells) ** 2
    rate_coarse = (wq * coarse.rate - quarter.rate) / (wq - 1.0)
    rate = ex("rate")
    return _Sweep(u=fine.u, density=fine.density, flux=fine.flux, rate=rate, mean_u=ex("mean_u"),
                  t1=ex("t1"), t2=ex("t2"), rate_error=abs(rate - rate_coarse))


def _diffusive_sweep_at(population, mu: float, sigma: float, cells_per_scale) -> _Sweep:
    nrn = population.neuron
    kn = kernel_neuron(nrn)
    stack, xbuf = scratch(nrn.program)
    step = _cell_width(population, sigma, cells_per_scale)
    if nrn.code == CODE_PIF and mu <= 0.0:
        raise ValueError(f"a perfect integrator with white noise has no stationary state at `mu` = {mu!r} mV <= 0")
    u_min = lower_end(*kn, float(nrn.tau_m), float(nrn.reset), mu, sigma, step, stack, xbuf)
    if not math.isfinite(u_min):
        raise ConvergenceError(f"no stationary state found at `mu` = {mu!r} mV, `sigma` = {sigma!r} mV")
    grid = np.empty(GRID_CAPACITY)
    n, k_r = fill_grid(float(nrn.boundary), float(nrn.reset), u_min, step, grid)
    if n == 0:
        raise ConvergenceError(f"the threshold-integration grid at `mu` = {mu!r} mV exceeds {GRID_CAPACITY} nodes")
    grid = grid[:n].copy()
    dens = np.empty(n)
    flux = np.empty(n)
    rate, int_p, int_up, jv = stationary_sweep(*kn, float(nrn.tau_m), float(nrn.refractory), mu, sigma, grid, n, k_r,
                                               dens, flux, True, stack, xbuf)
    t1_nodes = np.empty(n)
    t1, t2 = passage_moments(*kn, float(nrn.tau_m), mu, sigma, grid, n, k_r, dens, jv, t1_nodes, stack, xbuf)
    scale = rate / jv
    mean_u = rate * (int_up / jv + nrn.refractory * nrn.reset)
    return _Sweep(u=grid[::-1].copy(), density=(dens * scale)[::-1].copy(), flux=(flux * scale * 1000.0)[::-1].copy(),
                  rate=rate * 1000.0, mean_u=float(mean_u), t1=float(t1), t2=float(t2))


def pif_rate_slope(nrn, mus):
    """White-noise PIF: the passage time is inverse Gaussian with mean d tau_m/mu for mu > 0,
    whatever sigma (Gerstein & Mandelbrot 1964); no stationary firing for mu <= 0.
    Returns rate (Hz) and d(rate)/d(mu) (Hz/mV)."""
    d = nrn.boundary - nrn.reset
    pos = mus > 0.0
    with np.errstate(divide="ignore"):
        mean = nrn.refractory + d * nrn.tau_m / np.where(pos, mus, 1.0)
        rate = np.where(pos, 1000.0 / mean, 0.0)
        slope = np.where(pos, 1000.0 * d * nrn.tau_m / (np.where(pos, mus, 1.0) ** 2 * mean ** 2), 0.0)
    return rate, slope


def cv_diffusive(population, mu: float, sigma: float) -> float:
    sw = diffusive_sweep(population, mu, sigma)
    var = sw.t2 - sw.t1 * sw.t1
    return math.sqrt(max(var, 0.0)) / (sw.t1 + population.neuron.refractory)
