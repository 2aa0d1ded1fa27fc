"""Immutable non-uniform potential grids for finite-volume density solvers.

A :class:`Grid` holds the cell edges (mV) of a partition of
``[lower, upper]``.  :func:`refined_grid` builds one whose cells are finer
near the upper (absorbing) boundary and near the reset potential, where the
density has a kink, and which places the reset potential at the centre of
a cell so that reinjected mass enters exactly there.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .. import _validation as v

__all__ = ["Grid", "refined_grid"]


def _frozen(a) -> np.ndarray:
    a = np.array(a, dtype=float)
    a.setflags(write=False)
    return a


@dataclass(frozen=True, eq=False)
class Grid:
    """A partition of a potential interval into cells.

    Parameters
    ----------
    edges : array_like
        Strictly increasing cell edges (mV), at least 3.
    reset_cell : int
        Index of the cell receiving reinjected mass.
    """

    edges: np.ndarray
    reset_cell: int

    def __post_init__(self):
        e = _frozen(self.edges)
        if e.ndim != 1 or e.size < 3 or not np.all(np.isfinite(e)) or np.any(np.diff(e) <= 0):
            raise ValueError("`edges` must be a finite, strictly increasing 1-D array of >= 3 values (mV)")
        object.__setattr__(self, "edges", e)
        if not 0 <= int(self.reset_cell) < e.size - 1:
            raise ValueError(f"`reset_cell` must index a cell (0..{e.size - 2}), got {self.reset_cell!r}")
        object.__setattr__(self, "reset_cell", int(self.reset_cell))

    @property
    def n_cells(self) -> int:
        return self.edges.size - 1

    @property
    def centres(self) -> np.ndarray:
        """Cell centres (mV)."""
        c = 0.5 * (self.edges[1:] + self.edges[:-1])
        c.setflags(write=False)
        return c

    @property
    def widths(self) -> np.ndarray:
        """Cell widths (mV)."""
        w = np.diff(self.edges)
        w.setflags(write=False)
        return w

    @property
    def lower(self) -> float:
        return float(self.edges[0])

    @property
    def upper(self) -> float:
        return float(self.edges[-1])


def _place(lo: float, hi: float, density, n_min: int = 1) -> np.ndarray:
    """Edges from ``lo`` to ``hi`` with about ``density(u)`` cells per mV."""
    s = np.linspace(lo, hi, 4001)
    g = density(s)
    cum = np.concatenate([[0.0], np.cumsum(0.5 * (g[1:] + g[:-1]) * np.diff(s))])
    n = max(n_min, int(math.ceil(cum[-1])))
    levels = np.linspace(0.0, cum[-1], n + 1)
    e = np.interp(levels, cum, s)
    e[0], e[-1] = lo, hi
    return e


def refined_grid(lower, upper, reset, n_cells=400, refinement=10.0, width=None) -> Grid:
    """Grid on ``[lower, upper]`` refined near ``upper`` and ``reset``.

    The local cell width is ``h_max / (1 + (refinement - 1) * (k(upper) + k(reset)))``
    with ``k(x) = exp(-|u - x| / width)``, scaled so that there are about
    ``n_cells`` cells; the reset potential is the centre of a cell.

    Parameters
    ----------
    lower, upper : float
        Interval (mV); ``lower < reset < upper``.
    reset : float
        Reset potential (mV).
    n_cells : int
        Approximate number of cells.
    refinement : float
        Ratio of the coarsest to the finest cell width (>= 1).
    width : float, optional
        Decay length of the refinement (mV); default ``(upper - lower) / 20``.
    """
    lower, upper, reset = float(lower), float(upper), float(reset)
    if not lower < reset < upper:
        raise ValueError(f"need lower < reset < upper, got {lower!r}, {reset!r}, {upper!r} (mV)")
    n_cells = v.positive_int("n_cells", n_cells)
    if n_cells < 10:
        raise ValueError(f"`n_cells` must be >= 10, got {n_cells!r}")
    refinement = float(refinement)
    if not refinement >= 1.0:
        raise ValueError(f"`refinement` must be >= 1, got {refinement!r}")
    span = upper - lower
    width = span / 20.0 if width is None else v.positive("width", width)

    def shape(u):
        k = np.exp(-np.abs(u - upper) / width) + np.exp(-np.abs(u - reset) / width)
        return 1.0 + (refinement - 1.0) * np.minimum(k, 1.0)

    s = np.linspace(lower, upper, 8001)
    total = float(np.sum(0.5 * (shape(s[1:]) + shape(s[:-1])) * np.diff(s)))
    scale = n_cells / total  # cells per mV where shape == 1

    def density(u):
        return scale * shape(u)

    h0 = 1.0 / density(np.array([reset]))[0]
    h0 = min(h0, 0.5 * (reset - lower), 0.5 * (upper - reset))
    left = _place(lower, reset - 0.5 * h0, density)
    right = _place(reset + 0.5 * h0, upper, density)
    edges = np.concatenate([left, right])
    return Grid(edges=edges, reset_cell=left.size - 1)
