"""The finite-volume jump-density operator of a shot-noise population, and its stationary state.

The density ``p(u)`` of a population with :class:`~popdens.ShotNoise` obeys
the master equation

.. math::
    \\partial_t p = -\\partial_u (A p) + \\nu_e\\,[(p * \\rho_e)(u) - p(u)]
                    + \\nu_i\\,[(p * \\rho_i^-)(u) - p(u)] + \\text{reinjection},

``A = (F(u) + mu)/tau_m``; the jumps of density ``rho_e`` (up) and ``rho_i``
(down) are the PSP amplitude laws.  Mass that a jump or the drift carries to
the neuron's ``boundary`` or beyond is the population rate; it re-enters at
``reset`` after the refractory period.

Discretisation (cell masses ``m_j`` on a uniform grid of width ``h`` whose
top edge is the boundary):

* drift: first-order upwind face fluxes ``A+ m_j/h - A- m_{j+1}/h``;
* jumps: the exact translation of each cell's piecewise-constant content
  (shift operator): the fraction of cell ``j`` that lands in cell ``j + d`` is
  ``I(d h) - I((d + 1) h)`` with ``I(y) = (1/h) int_0^h P(jump > y - x) dx``,
  in closed form for fixed and exponential amplitudes; the part beyond the
  boundary is output, the part of a downward jump below the lowest cell
  stays in the lowest cell;
* reinjection at ``reset``: into the cell above it when it lies on a cell
  edge, else split between the two cells whose centres bracket it.

Every column of the generator sums to zero (conservative: output plus
reinjection balance) and every off-diagonal entry is >= 0, so backward
Euler (an M-matrix solve) and explicit jump steps with ``(nu_e + nu_i) dt
<= 1`` keep the density positive.  For fixed amplitudes the grid width
divides the amplitudes when they are commensurate, so the jumps are exact
shifts.  The stationary rate is the null vector of the generator
(normalised with the refractory mass); the scheme is first order in ``h``
(upwind drift), and :func:`jump_density_rates` extrapolates from ``h`` and
``h/2`` (Richardson).  Measured order and error: contributor guide.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import linalg, sparse
from scipy.sparse import linalg as sparse_linalg

__all__ = ["ShotGrid", "shot_grid", "jump_fractions", "generator", "drift_part", "jump_parts", "dense_jumps", "stationary_masses", "jump_density_rates",
           "lu_ordering"]

#: Default target cell width (mV) of the coarsest grid before alignment with fixed PSP amplitudes
#: (exponential amplitudes: dense jump matrices, so a coarser start); with the Richardson steps over
#: h, h/2, h/4 the measured rate error is below 1e-4 relative (contributor guide).
TARGET_CELL_MV = 0.04
TARGET_CELL_EXPONENTIAL_MV = 0.1
#: Fewest and most cells on the coarse grid.
MIN_CELLS, MAX_CELLS = 200, 6000
#: Lower edge: this many diffusion-approximation standard deviations below the lowest of reset,
#: the leak equilibrium and the mean potential (Gaussian tail exp(-32) ~ 1e-14), plus two
#: inhibitory amplitudes.
LOWER_STDS = 8.0
#: Jump fractions below this are dropped (their sum goes to the last kept offset, so mass is kept).
FRACTION_FLOOR = 1e-16
#: Above this band width (cells) the stationary solve is dense.
DENSE_BAND = 400


def lu_ordering(noise) -> str:
    """Column ordering for the sparse LU of the operator's matrices (the generator, the resolvent,
    backward Euler).  Fixed amplitudes give a few bands: minimum degree on the symmetric structure
    keeps them, where SuperLU's default column ordering fills them in (3848 cells: 0.013 s and 9.4e4
    factor entries against 0.35 s and 2.4e5; ``transfer`` 100x, the solver step 3x faster).
    Exponential amplitudes fill a whole lower band, which the default ordering handles better (minimum
    degree made ``transfer`` 7x slower)."""
    return "COLAMD" if noise.exponential else "MMD_AT_PLUS_A"


@dataclass(frozen=True)
class ShotGrid:
    """Uniform cells of width ``h`` (mV) from ``lower`` to ``upper`` (the neuron's boundary)."""

    lower: float
    upper: float
    n: int

    @property
    def h(self) -> float:
        return (self.upper - self.lower) / self.n

    @property
    def centres(self) -> np.ndarray:
        return self.lower + (np.arange(self.n) + 0.5) * self.h

    @property
    def edges(self) -> np.ndarray:
        return self.lower + np.arange(self.n + 1) * self.h

    def reset_vector(self, reset: float) -> np.ndarray:
        """Unit reinjection at ``reset`` on the cells (:meth:`reset_weights`): the reset vector ``b``."""
        k, w = self.reset_weights(reset)
        b = np.zeros(self.n)
        b[k] += 1.0 - w
        b[min(k + 1, self.n - 1)] += w
        return b

    def halved(self) -> "ShotGrid":
        return ShotGrid(self.lower, self.upper, 2 * self.n)

    def reset_weights(self, reset: float) -> tuple[int, float]:
        """(cell k, weight w): reinjection puts 1 - w into cell k and w into k + 1.

        A reset on a cell edge goes into the cell above it (cells are ``[e_j, e_{j+1})``, as a jump to
        the threshold fires: then ``k`` jumps of ``a`` from reset fire exactly when ``reset + k a`` is the
        threshold); otherwise it is split between the two cells whose centres bracket it (its mean
        potential kept exactly)."""
        y = (reset - self.lower) / self.h
        j = round(y)
        if abs(y - j) < 1e-9 and 0 <= j < self.n:
            return int(j), 0.0
        x = y - 0.5
        k = int(math.floor(x))
        if k < 0:
            return 0, 0.0
        if k >= self.n - 1:
            return self.n - 1, 0.0
        return k, x - k


def _amplitudes(noise):
    return [a for a in (noise.exc_psp, noise.inh_psp if noise.inhibited else None) if a]


def shot_grid(neuron, noise, mus, n_cells: int | None = None, cell: float | None = None) -> ShotGrid:
    """The coarse grid for drives ``mus`` (mV): lower edge from the diffusion estimate of the spread,
    width aligned with the fixed amplitudes (their common divisor when they are commensurate), at most
    ``cell`` mV (default :data:`TARGET_CELL_MV`, :data:`TARGET_CELL_EXPONENTIAL_MV` for exponential
    amplitudes)."""
    tau = float(neuron.tau_m)
    mus = np.atleast_1d(np.asarray(mus, dtype=float))
    rest = float(neuron.rest)
    mean_shift = noise.mean_input(tau)
    sd = noise.diffusion_sigma(tau) / math.sqrt(2.0)
    low = min(float(neuron.reset), rest + float(mus.min()), rest + float(mus.min()) + mean_shift)
    lower = low - LOWER_STDS * sd - 2.0 * (noise.inh_psp if noise.inhibited else 0.0) - 1.0
    upper = float(neuron.boundary)
    span = upper - lower
    if n_cells is not None:
        return ShotGrid(lower, upper, int(n_cells))
    target = cell if cell is not None else TARGET_CELL_EXPONENTIAL_MV if noise.exponential else TARGET_CELL_MV
    h = target
    if not noise.exponential:
        amps = _amplitudes(noise)
        base = amps[0]
        if len(amps) == 2:
            # a common divisor of the two amplitudes, if one exists on a 1e-3 mV lattice
            q = [round(a * 1000.0) for a in amps]
            if all(abs(a * 1000.0 - qi) < 1e-6 for a, qi in zip(amps, q)):
                base = math.gcd(*q) / 1000.0
        h = base / max(1, math.ceil(base / target - 1e-9))
    n = int(math.ceil(span / h - 1e-9))
    n = min(MAX_CELLS, max(MIN_CELLS, n))
    # lower edge moved down so that the width is exactly h (alignment kept)
    if n * h >= span:
        lower = upper - n * h
    return ShotGrid(lower, upper, n)


def _mean_tail(law: str, amp: float, h: float, y: np.ndarray) -> np.ndarray:
    """I(y) = (1/h) int_0^h P(jump > y - x) dx for offsets ``y`` >= 0 (mV)."""
    y = np.asarray(y, dtype=float)
    if law == "fixed":
        return np.clip((amp - y + h) / h, 0.0, 1.0)
    out = np.empty_like(y)
    big = y >= h
    out[big] = (amp / h) * np.exp(-(y[big] - h) / amp) * (-np.expm1(-h / amp))
    small = ~big
    # 0 <= y < h: the part x > y has y - x < 0 (probability 1)
    ys = y[small]
    out[small] = (h - ys) / h + (amp / h) * (-np.expm1(-ys / amp))
    return out


def jump_fractions(law: str, amp: float, h: float) -> tuple[np.ndarray, float]:
    """Fractions ``f[d]`` of a cell's content landing ``d`` cells away (d = 0, 1, ...) and the offset
    tail function's scale; ``sum(f) = 1`` (the last kept offset takes the dropped tail)."""
    if law == "fixed":
        d_max = int(math.ceil(amp / h - 1e-9)) + 1
    else:
        d_max = int(math.ceil(amp / h * -math.log(FRACTION_FLOOR))) + 1
    d = np.arange(d_max + 1, dtype=float)
    tail = _mean_tail(law, amp, h, d * h)
    f = tail[:-1] - _mean_tail(law, amp, h, (d[:-1] + 1.0) * h)
    f = np.maximum(f, 0.0)
    f[-1] += 1.0 - f.sum()
    return f, d_max


def generator(neuron, noise, mu: float, grid: ShotGrid):
    """The generator ``L`` (n x n, sparse CSC, 1/ms) on cell masses without the reinjection at reset,
    and the output rate per unit mass of each cell (1/ms): ``L + b out^T`` conserves mass, ``b`` the
    reset weights (:meth:`ShotGrid.reset_weights`)."""
    L, out = drift_part(neuron, mu, grid)
    for rate_hz, (jumps, jump_out) in zip((noise.exc_rate, noise.inh_rate), jump_parts(noise, grid)):
        if rate_hz > 0.0:
            L = L + (rate_hz * 1e-3) * jumps
            out = out + (rate_hz * 1e-3) * jump_out
    return L.tocsc(), out


def drift_part(neuron, mu: float, grid: ShotGrid):
    """The drift's part of the generator (sparse CSC, 1/ms) and its output per unit mass (1/ms): upwind
    face fluxes at drive ``mu`` (mV); the generator is this plus the input rates times :func:`jump_parts`."""
    n, h = grid.n, grid.h
    tau = float(neuron.tau_m)
    edges = grid.edges
    out = np.zeros(n)
    # drift: upwind at the interior faces and the top face
    a = (np.asarray(neuron.drift(edges[1:]), dtype=float) + float(mu)) / tau  # faces 1..n (mV/ms)
    if not np.all(np.isfinite(a[:-1])):
        raise ValueError("the neuron's drift is not finite on the potential grid")
    a[-1] = a[-1] if math.isfinite(a[-1]) else 1e300
    j = np.arange(n - 1)
    up = np.maximum(a[:-1], 0.0) / h
    down = np.maximum(-a[:-1], 0.0) / h
    out[-1] += max(a[-1], 0.0) / h
    diag_top = np.zeros(n)
    diag_top[-1] = -max(a[-1], 0.0) / h
    rows = [j + 1, j, j, j + 1, np.arange(n)]
    cols = [j, j, j + 1, j + 1, np.arange(n)]
    vals = [up, -up, down, -down, diag_top]
    return sparse.csc_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(n, n)), out


def jump_parts(noise, grid: ShotGrid):
    """The jump operators per unit input rate: ``[(E, out_e), (I, out_i)]``, each a sparse CSC matrix
    (per 1/ms of input rate, loss on the diagonal) and its output per unit mass; the inhibitory pair is
    zero without an inhibitory amplitude.  Every off-diagonal entry is >= 0 and every column of
    ``E`` (``I``) plus ``out_e`` (``out_i``) sums to zero."""
    n, h = grid.n, grid.h
    src = np.arange(n)
    parts = []
    for amp, sign in ((noise.exc_psp, 1), (noise.inh_psp, -1)):
        out = np.zeros(n)
        if not amp > 0.0:
            parts.append((sparse.csc_matrix((n, n)), out))
            continue
        f, d_max = jump_fractions(noise.amplitudes, amp, h)
        stay = f[0]
        rows, cols, vals = [src], [src], [np.full(n, -(1.0 - stay))]
        for d in range(1, f.size):
            if f[d] == 0.0:
                continue
            tgt = src + sign * d
            if sign > 0:
                inside = tgt < n
                rows.append(tgt[inside])
                cols.append(src[inside])
                vals.append(np.full(int(inside.sum()), f[d]))
                out[~inside] += f[d]
            else:
                rows.append(np.maximum(tgt, 0))
                cols.append(src)
                vals.append(np.where(src == 0, 0.0, np.full(n, f[d])))
        if sign < 0:  # the lowest cell's content stays where it is (reflecting lower edge)
            rows.append(np.array([0]))
            cols.append(np.array([0]))
            vals.append(np.array([1.0 - stay]))
        m = sparse.csc_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(n, n))
        parts.append((m, out))
    return parts


def dense_jumps(noise, h: float) -> bool:
    """True when the jump matrix on cells of width ``h`` is better solved dense: exponential amplitudes
    (every cell feeds every cell above it) wider than :data:`DENSE_BAND` cells.  Fixed amplitudes move
    each cell's content to two cells only, so their matrix stays sparse at any width (a dense solve of
    20 000 cells needed 3 GB)."""
    if not noise.exponential:
        return False
    return max(jump_fractions(noise.amplitudes, a, h)[1] for a in _amplitudes(noise)) > DENSE_BAND


def stationary_masses(neuron, noise, mu: float, grid: ShotGrid) -> tuple[np.ndarray, float]:
    """Stationary cell masses of the non-refractory neurons and the rate (Hz), normalised with the
    refractory mass ``rate * refractory``.

    With a unit reinjection rate at reset the masses solve ``L m = -b`` (``L`` without reinjection is
    nonsingular: every neuron eventually leaves); the output ``out . m`` is then 1 by conservation.
    """
    L, out = generator(neuron, noise, mu, grid)
    b = grid.reset_vector(float(neuron.reset))
    if dense_jumps(noise, grid.h):
        m = linalg.solve(L.toarray(), -b)
    else:
        m = sparse_linalg.splu(L.tocsc(), permc_spec=lu_ordering(noise)).solve(-b)
    m = np.maximum(m, 0.0)  # round-off only: -L is an M-matrix, its inverse is >= 0
    total = float(m.sum()) + float(neuron.refractory) * float(out @ m)
    return m / total, float(out @ m) / total * 1e3


def jump_density_rates(population, mus, n_cells: int | None = None, levels: int = 3) -> np.ndarray:
    """Stationary rates (Hz) of the discrete jump-density operator at each drive in ``mus`` (mV), on
    grids of width h, h/2, ... (``levels`` of them), Richardson-extrapolated (the error is a series in h,
    starting at first order: upwind drift)."""
    neuron, noise = population.neuron, population.noise
    mus = np.asarray(mus, dtype=float)
    grid = shot_grid(neuron, noise, mus, n_cells)
    out = np.empty(mus.size)
    for i, mu in enumerate(mus.ravel()):
        rs, g = [], grid
        for _ in range(levels):
            rs.append(stationary_masses(neuron, noise, float(mu), g)[1])
            g = g.halved()
        out[i] = max(0.0, richardson(rs))
    return out.reshape(mus.shape)


def richardson(values):
    """Extrapolation to h -> 0 of values (real or complex) on grids h, h/2, h/4, ... with errors
    c1 h + c2 h^2 + ..."""
    t = [complex(x) if isinstance(x, complex) or np.iscomplexobj(x) else float(x) for x in values]
    for order in range(1, len(t)):
        f = 2.0 ** order
        t = [(f * t[j + 1] - t[j]) / (f - 1.0) for j in range(len(t) - 1)]
    return t[0]
