"""Stationary state of a neuron driven by filtered (coloured) noise, solved on the (u, z) plane.

With :class:`~popdens.ColouredNoise` the pair (membrane potential ``u``,
synaptic current ``I_s``) is a Markov process; its stationary density
``P(u, z)`` obeys a two-dimensional Fokker--Planck equation without
diffusion in ``u``.  With ``z = I_s / s_I`` the current in units of its
stationary standard deviation ``s_I = sigma sqrt(tau_m / (2 tau_syn))`` (mV):

.. math::
    0 = -\\partial_u\\!\\left[\\frac{F(u) + \\mu + s_I z}{\\tau_m} P\\right]
        + \\frac{1}{\\tau_s}\\partial_z\\left[z P + \\partial_z P\\right],

with the outflux at the boundary (threshold or spike cut-off, where the
``u``-velocity is positive) re-injected at reset after the refractory
period, during which the current keeps evolving (its Ornstein--Uhlenbeck
transition over ``tau_ref``).  Nothing is approximated but the grid: this
is the exact stationary problem of the model the Monte Carlo twin
simulates (``twins/_coloured.py``), and the reference against which the
one-dimensional reductions (the effective boundary shift of Brunel & Sergi
1998 and Fourcaud & Brunel 2002) are measured.

Discretisation (conservative finite volumes; each cell holds a probability
mass, every column of the generator sums to zero, so mass is conserved to
rounding):

* ``z``: ``PLANE_Z_CELLS`` equal cells on ``[-PLANE_Z_RANGE, PLANE_Z_RANGE]``,
  the Ornstein--Uhlenbeck operator as a birth--death chain in detailed
  balance with the exact cell probabilities of the standard normal
  (positive, exact discrete equilibrium), the velocity taken at the cell's
  conditional mean of ``z``: second order in the cell width with a small
  constant (measured in the tests).
* ``u``: upwind fluxes (first order, positive), the reset on a cell face
  (re-injection split between its two cells), reflecting lower end;
  the rate is Richardson-extrapolated from two widths (``u`` cells of a
  fraction of the current's correlation length ``sigma sqrt(tau_s/(2
  tau_m))``; on its logarithm, which keeps it positive), which makes it
  second order (measured in the tests); for hard thresholds (LIF, PIF),
  whose threshold is a discontinuity in ``z`` (only positive velocities
  cross it), from three widths (``PLANE_LEVELS_HARD_THRESHOLD``: the
  two-width rate of a LIF at 0.7-1 Hz was 4-6 % above the twin, the
  three-width rate is within 2 %).  Far below threshold (rates of
  ~0.01 Hz and less) the upwind error sits in the exponent and the
  extrapolated rate converges slowly (measured +10 % at 0.008 Hz); below
  ``PLANE_MIN_RATE_HZ`` the plane is not solved.
* The linear system is solved once per grid: the generator without
  re-injection is banded (``u``-major order) and factorised once; the
  re-injection closes through the small matrix "exit row given entry row"
  times the refractory transition, whose Perron vector is the entry
  distribution at reset.

Cost grows like ``(tau_m / tau_syn)^(1/2)`` cells in ``u``;
:func:`filtered_rates` therefore solves the plane at ``tau_syn >=
PLANE_FLOOR_RATIO tau_m`` only and, below, adds to the one-dimensional
effective-boundary rate the plane's correction at the floor scaled by
``tau_syn / (PLANE_FLOOR_RATIO tau_m)`` (the correction's leading order for
models with a spike cut-off is ``tau_syn / tau_m``: Fourcaud-Trocme,
Hansel, van Vreeswijk & Brunel 2003, J. Neurosci. 23:11628).

Which result is the default (:func:`plane_weight`): the plane for models with a
spike cut-off; for hard thresholds the effective boundary shift up to ``tau_syn
= SHIFT_UNTIL_RATIO tau_m``, the plane from ``PLANE_FROM_RATIO tau_m``, blended
linearly in ``tau_syn`` between (measured switch point: contributor guide).

Units: mV, ms; rates in Hz.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as sla
from scipy.linalg import expm
from scipy.special import ndtr

from ..exceptions import ConvergenceError
from ._scales import length_scale

__all__ = ["PlaneState", "plane_state", "plane_pair", "plane_rate", "plane_transfer", "below_floor",
           "filtered_rates", "correlation_length", "extrapolated", "PLANE_FLOOR_RATIO", "PLANE_CELLS_PER_LENGTH",
           "PLANE_MIN_RATE_HZ", "SHIFT_UNTIL_RATIO", "plane_levels", "plane_states", "extrapolated_levels", "PLANE_FROM_RATIO", "plane_weight"]

#: Cells in z (current in units of its standard deviation): the rate is converged to ~0.05 % (EIF) with 40.
PLANE_Z_CELLS = 40
#: Half-width of the z range (standard deviations): the normal tail beyond holds 4e-8.
PLANE_Z_RANGE = 5.5
#: u cells per correlation length on the coarse grid (the fine grid has twice as many);
#: the extrapolated EIF rate moves by < 0.1 % from 2 to 8 (measured).
PLANE_CELLS_PER_LENGTH = 3
#: u grids (cell widths h, h/2, h/4, ...) of models without a spike cut-off: their threshold is a
#: discontinuity in z (only z with positive velocity cross it), where the two-grid extrapolation leaves
#: +1 % (11 Hz) to +5 % (1 Hz) against the twin; with three grids +0.5 % and +1.9 % (contributor guide).
PLANE_LEVELS_HARD_THRESHOLD = 3
#: Weights of the Richardson extrapolation over 2 and 3 grids (error a series in h): 2 r(h/2) - r(h) and
#: (8 r(h/4) - 6 r(h/2) + r(h)) / 3; applied to logarithms (:func:`extrapolated_levels`).
RICHARDSON_WEIGHTS = {2: (-1.0, 2.0), 3: (1.0 / 3.0, -2.0, 8.0 / 3.0)}
#: Below tau_syn = PLANE_FLOOR_RATIO tau_m the plane's correction is scaled down linearly (cost).
PLANE_FLOOR_RATIO = 0.05
#: The lower end of the u grid lies where the white-noise density below the mode has fallen by e^-30.
LOWER_END_LOG_DECAY = 30.0
#: Below this one-dimensional rate (Hz) the plane is not solved (its passage times overflow far below):
#: the effective-boundary rate is used as it is.
PLANE_MIN_RATE_HZ = 1e-9
#: Models without a spike cut-off (LIF, PIF): up to ``tau_syn = SHIFT_UNTIL_RATIO tau_m`` the default is the
#: effective boundary shift (within 2 % of the twin there, measured), from ``PLANE_FROM_RATIO tau_m`` the plane;
#: in between the two rates are blended linearly in ``tau_syn`` (no jump for sweeps; contributor guide).
SHIFT_UNTIL_RATIO = 0.1
PLANE_FROM_RATIO = 0.15
#: Plane weights within this of 0 or 1 are rounded to it (round-off in effective time constants).
WEIGHT_ROUNDING = 1e-6
#: Solved grids kept for repeated calls (each a few MB).
PLANE_CACHE_SIZE = 16
#: Largest number of u cells of one grid (memory: cells x z-cells x band).
PLANE_MAX_U_CELLS = 20_000


@dataclass(frozen=True)
class PlaneState:
    """Stationary state on the (u, z) plane.

    Attributes
    ----------
    faces : ndarray
        u cell faces (mV); the last one is the threshold or cut-off.
    z : ndarray
        Conditional mean of z in each z cell (current / its standard deviation).
    mass : ndarray
        Probability in each (u, z) cell, shape ``(len(faces) - 1, len(z))``; sums with the
        refractory fraction to 1.
    rate : float
        Stationary rate (Hz).
    current_sd : float
        Stationary standard deviation of the synaptic current, ``s_I`` (mV).
    isi_moments : tuple of float
        Mean (ms) and second moment (ms^2) of the ISI: refractory period plus the passage from the
        reset, entered with the stationary distribution of the current (exact for the stationary
        sequence of ISIs, which the current's memory makes correlated).
    """

    faces: np.ndarray
    z: np.ndarray
    mass: np.ndarray
    rate: float
    current_sd: float
    isi_moments: tuple = (math.nan, math.nan)

    @property
    def cv(self) -> float:
        """Coefficient of variation of the ISI (dimensionless)."""
        m1, m2 = self.isi_moments
        return math.sqrt(max(m2 - m1 * m1, 0.0)) / m1

    @property
    def u(self) -> np.ndarray:
        """Cell centres (mV)."""
        return 0.5 * (self.faces[1:] + self.faces[:-1])

    @property
    def density(self) -> np.ndarray:
        """Marginal density of non-refractory neurons over u (1/mV) at the cell centres."""
        return self.mass.sum(axis=1) / np.diff(self.faces)


def _z_chain(nz: int, zmax: float):
    """Cell probabilities ``phi``, conditional means ``zbar`` and the birth--death rates (per
    unit of 1/tau_syn) up (j -> j+1) and down (j+1 -> j) of the standard Ornstein--Uhlenbeck
    process ``dz = -z dt + sqrt(2) dW`` on equal cells, in detailed balance with ``phi``."""
    edges = np.linspace(-zmax, zmax, nz + 1)
    width = edges[1] - edges[0]
    cdf = ndtr(edges)
    cdf[0], cdf[-1] = 0.0, 1.0  # the outer cells hold the tails
    phi = np.diff(cdf)
    pdf = np.exp(-0.5 * edges * edges) / math.sqrt(2.0 * math.pi)
    pdf[0] = pdf[-1] = 0.0
    zbar = (pdf[:-1] - pdf[1:]) / phi
    up = np.sqrt(phi[1:] / phi[:-1]) / (width * width)
    down = np.sqrt(phi[:-1] / phi[1:]) / (width * width)
    return phi, zbar, up, down


def _lower_end(neuron, mu: float, sigma: float) -> float:
    """Potential (mV) below which the density is negligible: going down from the reset, the
    white-noise density without flux changes like exp(int 2 (F + mu) / sigma^2 du); stop where it
    has fallen by ``LOWER_END_LOG_DECAY`` below its largest value (coloured noise, with less
    variance in u, is narrower)."""
    step = 0.05 * min(sigma, length_scale(neuron))
    u, log_p, top = float(neuron.reset), 0.0, 0.0
    scale = 2.0 / (sigma * sigma)
    for _ in range(200_000):
        nxt = u - step
        slope = float(neuron.drift(0.5 * (u + nxt))) + mu
        log_p -= scale * slope * step
        u = nxt
        top = max(top, log_p)
        if log_p < top - LOWER_END_LOG_DECAY:
            return u
    raise ConvergenceError(f"no stationary state at `mu` = {mu!r} mV: the density does not decay below the reset "
                           "(the drive cannot hold the potential up against the noise)")


@dataclass(frozen=True)
class _Grid:
    """The discretised plane: the generator without re-injection (``absorbing``, probability masses
    in ``u``-major order), the entry columns at reset, the exit rates of the top cells (1/ms), the
    current's transition over the refractory period, and the upwind velocities (mV/ms) at the faces."""

    faces: np.ndarray
    zbar: np.ndarray
    current_sd: float
    absorbing: sp.csc_matrix
    entry: np.ndarray
    exit_rate: np.ndarray
    top_cells: np.ndarray
    carry: np.ndarray
    chain: np.ndarray
    velocity: np.ndarray
    width: float
    t_ref: float


def _grid(neuron, mu: float, sigma: float, tau_syn: float, width: float, z_cells: int) -> _Grid:
    tau_m = float(neuron.tau_m)
    s_i = sigma * math.sqrt(tau_m / (2.0 * tau_syn))
    top, reset, t_ref = float(neuron.boundary), float(neuron.reset), float(neuron.refractory)
    n_above = max(2, int(round((top - reset) / width)))
    h = (top - reset) / n_above
    n_below = max(2, int(math.ceil((reset - _lower_end(neuron, mu, sigma)) / h)))
    nu = n_above + n_below
    if nu > PLANE_MAX_U_CELLS:
        raise ConvergenceError(f"the (u, z) grid needs {nu} cells in u (more than {PLANE_MAX_U_CELLS}) at "
                               f"`mu` = {mu!r} mV, `tau_syn` = {tau_syn!r} ms")
    faces = reset + h * (np.arange(nu + 1) - n_below)
    nz = z_cells
    phi, zbar, up, down = _z_chain(nz, PLANE_Z_RANGE)
    cell = np.arange(nu * nz).reshape(nu, nz)
    rows, cols, vals = [], [], []

    def move(src, dst, rate):  # probability src -> dst at ``rate`` (1/ms)
        rate = np.broadcast_to(rate, src.shape).ravel()
        rows.extend((dst.ravel(), src.ravel()))
        cols.extend((src.ravel(), src.ravel()))
        vals.extend((rate, -rate))

    move(cell[:, :-1], cell[:, 1:], up / tau_syn)
    move(cell[:, 1:], cell[:, :-1], down / tau_syn)
    vel = ((np.asarray(neuron.drift(faces), dtype=float) + mu)[:, None] + s_i * zbar[None, :]) / tau_m
    inner = vel[1:nu]
    move(cell[:-1], cell[1:], np.maximum(inner, 0.0) / h)
    move(cell[1:], cell[:-1], np.maximum(-inner, 0.0) / h)
    exit_rate = np.maximum(vel[nu], 0.0) / h  # 1/ms, out of the top cells
    top_cells = cell[nu - 1]
    rows.append(top_cells)
    cols.append(top_cells)
    vals.append(-exit_rate)
    n = nu * nz
    absorbing = sp.csc_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(n, n))
    # entry at reset in z row k: half into each cell beside the reset face
    entry = np.zeros((n, nz))
    entry[cell[n_below - 1], np.arange(nz)] = 0.5
    entry[cell[n_below], np.arange(nz)] += 0.5
    chain = np.diag(up, -1) + np.diag(down, 1)
    chain -= np.diag(chain.sum(axis=0))
    carry = expm(chain * (t_ref / tau_syn)) if t_ref > 0.0 else np.eye(nz)
    return _Grid(faces=faces, zbar=zbar, current_sd=s_i, absorbing=absorbing, entry=entry, exit_rate=exit_rate,
                 top_cells=top_cells, carry=carry, chain=chain, velocity=vel, width=h, t_ref=t_ref)


def _stationary(grid: _Grid, mu: float):
    """Cell masses (normalised with the refractory mass), rate (1/ms), ISI moments (ms, ms^2), the LU."""
    nz = grid.zbar.size
    lu = sla.splu(grid.absorbing, permc_spec="NATURAL")
    occupancy = -lu.solve(grid.entry)  # ms: time spent per cell per unit entry rate in each row
    exits = grid.exit_rate[:, None] * occupancy[grid.top_cells]  # exit row j per entry row k (columns sum to 1)
    closure = grid.carry @ exits - np.eye(nz)
    closure[-1] = 1.0
    rhs = np.zeros(nz)
    rhs[-1] = 1.0
    inflow = np.linalg.solve(closure, rhs)  # entry distribution at reset (1/ms per unit total)
    mass = occupancy @ inflow
    total = mass.sum() + grid.t_ref * inflow.sum()
    if not (np.isfinite(total) and total > 0.0):
        raise ConvergenceError(f"the (u, z) density could not be normalised at `mu` = {mu!r} mV")
    rate = inflow.sum() / total
    # passage from reset: survival 1^T exp(B t) p0, so E T = -1^T B^-1 p0 and E T^2 = 2 1^T B^-2 p0
    dwell = occupancy @ (inflow / inflow.sum())  # ms per cell: -B^-1 p0
    t1 = float(dwell.sum())
    t2 = 2.0 * float(-lu.solve(dwell).sum())
    t_ref = grid.t_ref
    moments = (t_ref + t1, t2 + 2.0 * t_ref * t1 + t_ref * t_ref)
    return mass / total, float(rate), moments


def _solve(neuron, mu: float, sigma: float, tau_syn: float, width: float, z_cells: int):
    grid = _grid(neuron, mu, sigma, tau_syn, width, z_cells)
    return grid, _stationary(grid, mu)


_solve_cached = functools.lru_cache(maxsize=PLANE_CACHE_SIZE)(_solve)


def _solved(neuron, mu: float, sigma: float, tau_syn: float, width: float, z_cells: int):
    """The grid and its stationary solution (read-only), kept for repeated calls at the same point
    (network analyses ask for the rate and for the response at many frequencies of one stationary
    state); neurons with unhashable parameters are solved every time."""
    try:
        hash(neuron)
    except TypeError:
        return _solve(neuron, mu, sigma, tau_syn, width, z_cells)
    return _solve_cached(neuron, mu, sigma, tau_syn, width, z_cells)


def plane_state(neuron, mu: float, sigma: float, tau_syn: float, width: float,
                z_cells: int = PLANE_Z_CELLS) -> PlaneState:
    """Stationary state on one (u, z) grid of u-cell ``width`` (mV; adjusted so that the reset is a face).

    Parameters
    ----------
    neuron : NeuronBase
        Renewal neuron (no adaptation); its boundary is the threshold or the spike cut-off.
    mu : float
        Constant drive (mV).
    sigma : float
        Noise amplitude (mV), as in :class:`~popdens.ColouredNoise`.
    tau_syn : float
        Synaptic time constant (ms).
    width : float
        Target u-cell width (mV).
    z_cells : int
        Number of z cells.

    Returns
    -------
    PlaneState
        Cell masses and the rate (Hz).
    """
    grid, (mass, rate, moments) = _solved(neuron, float(mu), float(sigma), float(tau_syn), float(width),
                                          int(z_cells))
    return PlaneState(faces=grid.faces.copy(), z=grid.zbar.copy(), mass=mass.reshape(-1, z_cells).copy(),
                      rate=rate * 1000.0,
                      current_sd=grid.current_sd, isi_moments=moments)


def _response(grid: _Grid, p0: np.ndarray, lam: np.ndarray, tau_m: float) -> np.ndarray:
    """Rate response (Hz/mV) to a modulation of the mean drive at Laplace variables ``lam`` (1/ms).

    Linearising the fluxes: a drive ``mu + eps e^(lam t)`` adds ``eps/tau_m`` to every u-velocity, so the
    flux across a face grows by ``eps/tau_m`` times the upwind cell's density (``d``, including the extra
    exit at the top, ``e``).  With ``B`` the generator without re-injection and ``K`` the refractory
    transition delayed by ``e^(-lam t_ref)``: ``(B - lam) dp = -d - S K dx`` and the exit flux
    ``dx = diag(exit) dp_top + e``, closed on the 40 exit rows; at ``lam = 0`` the last row is replaced
    by the normalisation ``sum dp + t_ref sum dx = 0``.
    """
    nz = grid.zbar.size
    masses = p0.reshape(-1, nz)
    inner = grid.velocity[1:-1]
    upwind = np.where(inner > 0.0, masses[:-1], np.where(inner < 0.0, masses[1:], 0.0)) / (tau_m * grid.width)
    d = np.zeros_like(masses)
    d[1:] += upwind
    d[:-1] -= upwind
    extra = np.where(grid.velocity[-1] > 0.0, masses[-1], 0.0) / (tau_m * grid.width)
    d[-1] -= extra
    d = d.ravel()
    n = d.size
    eye_n = sp.identity(n, format="csc")
    out = np.empty(lam.shape, dtype=complex)
    for i, s in enumerate(lam.ravel()):
        lu = sla.splu((grid.absorbing - s * eye_n).tocsc(), permc_spec="NATURAL")
        y = lu.solve(d.astype(complex))
        w = lu.solve(grid.entry.astype(complex))
        k = np.exp(-s * grid.t_ref) * grid.carry
        system = np.eye(nz) + (grid.exit_rate[:, None] * w[grid.top_cells]) @ k
        rhs = extra - grid.exit_rate * y[grid.top_cells]
        if s == 0:  # the closure is singular: fix the multiple of the stationary entry by normalisation
            system[-1] = -(w.sum(axis=0) @ k) + grid.t_ref * k.sum(axis=0)
            rhs[-1] = y.sum()
        out.flat[i] = np.linalg.solve(system, rhs).sum() * 1000.0
    return out


def plane_transfer(neuron, mu: float, sigma: float, tau_syn: float, lam: np.ndarray,
                   cells_per_length: int = PLANE_CELLS_PER_LENGTH) -> tuple[np.ndarray, np.ndarray]:
    """Mean-drive transfer function (Hz/mV) at Laplace variables ``lam`` (1/ms) on the plane,
    Richardson-extrapolated over the u-cell widths of :func:`plane_levels`; returns it and the difference
    from the finest grid (the error estimate).  The extrapolation is the linearisation of the rate's
    (:func:`extrapolated_levels`, ``R = prod r_i^w_i``): ``R sum_i w_i chi_i / r_i``, so that at zero
    frequency it is the slope of the extrapolated rate."""
    h = correlation_length(neuron, sigma, tau_syn) / cells_per_length
    tau_m = float(neuron.tau_m)
    lam = np.asarray(lam, dtype=complex)
    levels = plane_levels(neuron)
    grids = [_solved(neuron, float(mu), float(sigma), float(tau_syn), float(h / 2 ** i), PLANE_Z_CELLS)
             for i in range(levels)]
    rates = [r for _, (_, r, _) in grids]
    chis = [_response(g, p, lam, tau_m) for g, (p, _, _) in grids]
    weights = RICHARDSON_WEIGHTS[levels]
    if all(r > 0.0 for r in rates):
        big_r = math.exp(sum(w * math.log(r) for w, r in zip(weights, rates)))
        out = big_r * sum(w * c / r for w, c, r in zip(weights, chis, rates))
    else:
        out = sum(w * c for w, c in zip(weights, chis))
    return out, np.abs(out - chis[-1])


def correlation_length(neuron, sigma: float, tau_syn: float) -> float:
    """Length (mV) the u cells resolve: the distance the current moves u in one correlation time,
    ``sigma sqrt(tau_syn / (2 tau_m))``, capped by the drift's own scale and by ``sigma``."""
    return min(sigma * math.sqrt(tau_syn / (2.0 * neuron.tau_m)), length_scale(neuron), sigma)


def plane_levels(neuron) -> int:
    """Number of u grids (widths h, h/2, ...) extrapolated over: 2 with a spike cut-off, else
    ``PLANE_LEVELS_HARD_THRESHOLD``."""
    return 2 if neuron.has_cutoff else PLANE_LEVELS_HARD_THRESHOLD


def plane_states(neuron, mu: float, sigma: float, tau_syn: float,
                 cells_per_length: int = PLANE_CELLS_PER_LENGTH) -> tuple[PlaneState, ...]:
    """The plane on :func:`plane_levels` grids, coarsest first: u cells of ``1/cells_per_length`` of
    :func:`correlation_length`, then half, (then a quarter)."""
    h = correlation_length(neuron, sigma, tau_syn) / cells_per_length
    return tuple(plane_state(neuron, mu, sigma, tau_syn, h / 2 ** i) for i in range(plane_levels(neuron)))


def plane_pair(neuron, mu: float, sigma: float, tau_syn: float,
               cells_per_length: int = PLANE_CELLS_PER_LENGTH) -> tuple[PlaneState, PlaneState]:
    """The plane on the coarse and the fine grid (u cells of ``1/cells_per_length`` and half that
    of :func:`correlation_length`)."""
    h = correlation_length(neuron, sigma, tau_syn) / cells_per_length
    return plane_state(neuron, mu, sigma, tau_syn, h), plane_state(neuron, mu, sigma, tau_syn, 0.5 * h)


def extrapolated(coarse: float, fine: float) -> float:
    """Richardson extrapolation of a positive quantity with a first-order grid error, done on its
    logarithm, ``fine^2 / coarse``: the same as ``2 fine - coarse`` to second order where the error is
    small, and positive where it is large (exponentially rare firing, whose upwind error sits in the
    exponent)."""
    return fine * fine / coarse if coarse > 0.0 and fine > 0.0 else 2.0 * fine - coarse


def extrapolated_levels(values) -> float:
    """Richardson extrapolation over 2 or 3 grids (widths h, h/2, h/4; error a series in h) on the
    logarithm of a positive quantity, ``prod v_i^w_i`` with ``RICHARDSON_WEIGHTS`` (two grids:
    :func:`extrapolated`); ``sum w_i v_i`` if a value is not positive."""
    weights = RICHARDSON_WEIGHTS[len(values)]
    if all(x > 0.0 for x in values):
        return math.exp(sum(w * math.log(x) for w, x in zip(weights, values)))
    return sum(w * x for w, x in zip(weights, values))


def plane_rate(neuron, mu: float, sigma: float, tau_syn: float,
               cells_per_length: int = PLANE_CELLS_PER_LENGTH) -> float:
    """Stationary rate (Hz) on the plane, Richardson-extrapolated over the u-cell widths of
    :func:`plane_levels` (:func:`extrapolated_levels`)."""
    return extrapolated_levels([st.rate for st in plane_states(neuron, mu, sigma, tau_syn, cells_per_length)])


def below_floor(neuron, tau_syn: float, plane_at_floor, effective) -> np.ndarray:
    """A plane quantity at ``tau_syn``: itself at or above the floor ``PLANE_FLOOR_RATIO tau_m``; below,
    the one-dimensional ``effective(tau)`` plus the plane's correction to it at the floor
    (``plane_at_floor``), scaled by ``tau_syn / tau_floor``."""
    floor = PLANE_FLOOR_RATIO * float(neuron.tau_m)
    if tau_syn >= floor:
        return np.asarray(plane_at_floor)
    return np.asarray(effective(tau_syn)) + (tau_syn / floor) * (np.asarray(plane_at_floor) - effective(floor))


def plane_weight(neuron, tau_syn: float) -> float:
    """Weight (0 to 1) of the plane in the default coloured-noise result of a renewal ``neuron`` at
    synaptic time constant ``tau_syn`` (ms); the rest is the effective boundary shift.

    1 for models with a spike cut-off (their first correction is of order ``tau_syn/tau_m``, which no
    boundary shift captures); for hard thresholds 0 up to ``SHIFT_UNTIL_RATIO tau_m``, 1 from
    ``PLANE_FROM_RATIO tau_m``, linear in ``tau_syn`` in between, so that a sweep over ``tau_syn`` is
    continuous (the shift's error grows like ``tau_syn/tau_m`` beyond its first order: measured -0.1 %,
    -5.7 %, -15.6 % against the twin at 0.1, 0.25, 0.5; contributor guide).
    """
    if neuron.has_cutoff:
        return 1.0
    x = float(tau_syn) / float(neuron.tau_m)
    w = (x - SHIFT_UNTIL_RATIO) / (PLANE_FROM_RATIO - SHIFT_UNTIL_RATIO)
    # within WEIGHT_ROUNDING of an end, the end: an effective time constant computed as 2.0000000000000004 ms
    # must not cost a plane solve (the rate moves by < 1e-6 of the shift's distance from the plane, ~4e-8)
    return 0.0 if w < WEIGHT_ROUNDING else 1.0 if w > 1.0 - WEIGHT_ROUNDING else w


def filtered_rates(neuron, mus: np.ndarray, sigma: float, tau_syn: float, effective_rates) -> np.ndarray:
    """Rates (Hz) at the drives ``mus`` (mV) of ``neuron`` with coloured noise ``(sigma, tau_syn)``.

    At ``tau_syn >= PLANE_FLOOR_RATIO tau_m`` the plane's extrapolated rate; below, the one-dimensional
    rate ``effective_rates(tau, mus)`` (the effective-boundary theory at synaptic time constant ``tau``)
    plus the plane's correction to it at the floor, scaled by ``tau_syn / tau_floor``
    (:func:`below_floor`).
    """
    flat = np.asarray(mus, dtype=float).ravel()
    tau = max(float(tau_syn), PLANE_FLOOR_RATIO * float(neuron.tau_m))
    near = np.asarray(effective_rates(float(tau_syn), flat), dtype=float)
    silent = near < PLANE_MIN_RATE_HZ  # firing too rare to matter: the one-dimensional rate as it is
    out = near.copy()
    if np.all(silent):
        return out.reshape(np.shape(mus))
    live = flat[~silent]
    plane = np.array([plane_rate(neuron, float(m), sigma, tau) for m in live])
    out[~silent] = below_floor(neuron, float(tau_syn), plane,
                               lambda t: near[~silent] if t == tau_syn else
                               np.asarray(effective_rates(t, live), dtype=float))
    return out.reshape(np.shape(mus))
