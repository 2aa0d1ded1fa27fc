"""Stability of the fixed points of a circuit over a grid of two parameters."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from .._display import Displayable, dataframe
from ..exceptions import ConvergenceError
from ..progress import Progress
from .states import DEFAULT_RATE_RANGE, fixed_points
from .linear_stability import stability

__all__ = ["StabilityMap", "stability_map"]


@dataclass(frozen=True, eq=False)
class StabilityMap(Displayable):
    """Leading growth rate and frequency over a grid of two parameters.

    Attributes
    ----------
    x, y : ndarray
        Parameter values (axes of the map).
    x_label, y_label : str
    growth_rate : ndarray, shape (len(y), len(x))
        Largest leading growth rate (1/s) over the fixed points found (NaN:
        no fixed point in range, or only stable ones whose leading root could
        not be located, see ``Stability.bounded``); an escape-noise state
        without roots contributes its growth-rate bound.
    frequency : ndarray, shape (len(y), len(x))
        Frequency (Hz) of that root.
    rates : ndarray, shape (len(y), len(x), n)
        Rates (Hz) of the fixed point it belongs to.
    complete : bool
        False when the computation was interrupted (missing points are NaN).
    """

    x: np.ndarray
    y: np.ndarray
    x_label: str
    y_label: str
    growth_rate: np.ndarray
    frequency: np.ndarray
    rates: np.ndarray
    complete: bool = True

    def _card(self):
        g = self.growth_rate
        rows = [(self.x_label, f"{self.x.min():.4g} to {self.x.max():.4g} ({self.x.size} values)"),
                (self.y_label, f"{self.y.min():.4g} to {self.y.max():.4g} ({self.y.size} values)"),
                ("unstable points", f"{int(np.sum(g > 0))} of {g.size}"),
                ("points without a fixed point", f"{int(np.sum(~np.isfinite(g)))}")]
        return "StabilityMap", rows, None if self.complete else "incomplete (interrupted)"

    def to_dataframe(self):
        """One row per grid point: both parameters, growth rate (1/s), frequency (Hz) and the rates (Hz)."""
        xx, yy = np.meshgrid(self.x, self.y)
        cols = {"x": xx.ravel(), "y": yy.ravel(), "growth_rate_per_s": self.growth_rate.ravel(),
                "frequency_Hz": self.frequency.ravel()}
        for k in range(self.rates.shape[-1]):
            cols[f"rate_Hz_{k}"] = self.rates[..., k].ravel()
        return dataframe(cols)

    def plot(self, ax=None, curves=None):
        """Growth rate of the leading root, the stability boundary (growth rate 0) drawn in black and
        the oscillation frequency written at each unstable point; ``curves`` (from
        :func:`boundary_curves` over the same two parameters) drawn on top.

        Returns ``(fig, ax)``.
        """
        from ..plotting import plot_stability_map

        return plot_stability_map(self, ax, curves)


def stability_map(build: Callable, x, y, *, x_label: str = "x", y_label: str = "y",
                  rate_range=DEFAULT_RATE_RANGE, gain: Callable | None = None,
                  transfer: Callable | None = None, progress: bool | None = None,
                  **stability_options) -> StabilityMap:
    """Stability of the fixed points of ``build(x, y)`` over a parameter grid.

    Parameters
    ----------
    build : callable
        ``build(x, y) -> Circuit``.
    x, y : array_like
        Parameter values.
    x_label, y_label : str
        Axis labels (with units).
    rate_range : (float, float), optional
        Rate box (Hz) searched for fixed points, as in :func:`fixed_points`.
    gain : callable, optional
        As in :func:`fixed_points`.
    transfer : callable, optional
        As in :func:`characteristic_matrix`.
    progress : bool, optional
        Progress line on stderr.
    **stability_options
        Passed to :func:`stability`.

    Returns
    -------
    StabilityMap
        At each point the least stable fixed point.
    """
    xs = np.asarray(x, dtype=float)
    ys = np.asarray(y, dtype=float)
    gr = np.full((ys.size, xs.size), np.nan)
    fr = np.full((ys.size, xs.size), np.nan)
    rates = None
    bar = Progress(xs.size * ys.size, "stability map", progress)
    done = 0
    complete = True
    try:
        for i, yv in enumerate(ys):
            for j, xv in enumerate(xs):
                circ = build(float(xv), float(yv))
                if rates is None:
                    rates = np.full((ys.size, xs.size, circ.n), np.nan)
                for fp in fixed_points(circ, rate_range, gain=gain):
                    try:
                        st = stability(circ, fp, transfer=transfer, **stability_options)
                    except ConvergenceError:
                        continue
                    if np.isnan(st.growth_rate):  # stable, leading root not located (Stability.bounded)
                        continue
                    if not st.growth_rate <= gr[i, j]:
                        gr[i, j], fr[i, j] = st.growth_rate, st.frequency
                        rates[i, j] = fp.rates
                done += 1
                bar.update(done)
    except KeyboardInterrupt:
        # keep what was computed: the remaining points stay NaN
        complete = False
    finally:
        bar.close()
    if rates is None:
        rates = np.full((ys.size, xs.size, 0), np.nan)
    return StabilityMap(xs, ys, x_label, y_label, gr, fr, rates, complete)
