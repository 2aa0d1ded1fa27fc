"""Figures.  matplotlib is imported only here; every function takes results
(and optionally an Axes) and returns matplotlib objects."""

from __future__ import annotations

import numpy as np

__all__ = ["plot_rate", "plot_comparison", "plot_steady_state", "plot_sweep_curves", "plot_sweep_line",
           "plot_sweep_map"]


def _axes(ax):
    import matplotlib.pyplot as plt

    if ax is None:
        fig, ax = plt.subplots(figsize=(7.0, 3.5), constrained_layout=True)
    return ax


def plot_rate(result, ax=None, label=None, **kwargs):
    """Population rate (Hz) against time (ms); returns the Axes."""
    ax = _axes(ax)
    ax.plot(result.t[1:], result.rate[1:], label=label or result.method, **kwargs)
    ax.set_xlabel("time (ms)")
    ax.set_ylabel("population rate (Hz)")
    return ax


def plot_comparison(prediction, montecarlo, n_se: float = 2.0):
    """Density prediction against a Monte Carlo run with a +/- n_se standard-error band,
    and the drive underneath.  Returns the Figure."""
    import matplotlib.pyplot as plt

    fig, (ax, axd) = plt.subplots(2, 1, figsize=(7.0, 4.8), sharex=True, constrained_layout=True,
                                  gridspec_kw={"height_ratios": [3, 1]})
    se = montecarlo.rate_standard_error()
    t = montecarlo.t[1:]
    ax.fill_between(t, montecarlo.rate[1:] - n_se * se[1:], montecarlo.rate[1:] + n_se * se[1:],
                    color="0.8", step="pre", label=f"Monte Carlo ±{n_se:g} SE (N={montecarlo.n_neurons})")
    ax.step(t, montecarlo.rate[1:], color="0.45", lw=0.8, where="pre")
    ax.plot(prediction.t[1:], prediction.rate[1:], color="C0", lw=1.6, label=prediction.method)
    ax.set_ylabel("population rate (Hz)")
    ax.legend(frameon=False, loc="best")
    axd.plot(prediction.t, prediction.drive, color="C3")
    axd.set_ylabel("drive (mV)")
    axd.set_xlabel("time (ms)")
    ax.set_xlim(float(np.min(t)), float(np.max(t)))
    return fig


def plot_steady_state(state):
    """ISI density (1/ms) and the stationary potential (1/mV) or age (1/ms) density of a
    :class:`~popdens.steady_state.SteadyState`; returns the Figure."""
    import matplotlib.pyplot as plt

    fig, (ax1, ax2) = plt.subplots(1, 2, figsize=(9.0, 3.5), constrained_layout=True)
    ax1.plot(state.isi_t, state.isi_density)
    ax1.set_xlabel("interval (ms)")
    ax1.set_ylabel("ISI density (1/ms)")
    ax1.set_title(f"rate {state.rate:.4g} Hz, CV {state.cv:.3g}")
    if state.density is not None:
        ax2.plot(state.u, state.density)
        ax2.set_xlabel("membrane potential (mV)")
        ax2.set_ylabel("density (1/mV)")
    else:
        ax2.plot(state.age, state.age_density)
        ax2.set_xlabel("age (ms)")
        ax2.set_ylabel("age density (1/ms)")

# ---------------------------------------------------------------- sweeps
#: Families with more curves than this get a colour bar instead of a legend.
MAX_LEGEND_CURVES = 10


def plot_sweep_map(y_values, x_values, values, y_name, x_name, name):
    """Heat map of a scalar sweep output over a two-parameter grid (``values[i, j]`` at
    ``y_values[i]``, ``x_values[j]``); failed points show as blank.  Returns the Figure."""
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(6.0, 4.6), constrained_layout=True)
    x = np.asarray(x_values, dtype=float)
    y = np.asarray(y_values, dtype=float)
    z = np.ma.masked_invalid(np.asarray(values, dtype=float))
    shading = "nearest" if x.size > 1 and y.size > 1 else "auto"
    mesh = ax.pcolormesh(x, y, z, shading=shading, cmap="viridis")
    fig.colorbar(mesh, ax=ax, label=name)
    ax.set_xlabel(x_name)
    ax.set_ylabel(y_name)
    ax.set_title(name)
    return fig


def plot_sweep_line(x_values, values, x_name, name):
    """A scalar sweep output against one swept parameter (or the point index).  Returns the Figure."""
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(6.0, 3.6), constrained_layout=True)
    ax.plot(np.asarray(x_values, dtype=float), np.asarray(values, dtype=float), "o-", ms=3)
    ax.set_xlabel(x_name)
    ax.set_ylabel(name)
    return fig


def plot_sweep_curves(x, ys, x_name, name, labels):
    """A family of curves, one per sweep point (rows of ``ys``); log frequency axes for
    coordinates named ``frequency...``.  Returns the Figure."""
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(6.4, 4.0), constrained_layout=True)
    ys = np.atleast_2d(np.asarray(ys, dtype=float))
    n = ys.shape[0]
    cmap = plt.get_cmap("viridis")
    for i in range(n):
        ax.plot(x, ys[i], color=cmap(i / max(n - 1, 1)), lw=1.2,
                label=labels[i] if n <= MAX_LEGEND_CURVES else None)
    if n <= MAX_LEGEND_CURVES:
        ax.legend(frameon=False, fontsize="small")
    else:
        sm = plt.cm.ScalarMappable(cmap=cmap, norm=plt.Normalize(0, n - 1))
        fig.colorbar(sm, ax=ax, label="point index")
    xs = np.asarray(x, dtype=float)
    if x_name.startswith("frequency") and np.any(xs > 0):
        ax.set_xscale("symlog", linthresh=max(float(np.min(xs[xs > 0])), 1e-3))
    ax.set_xlabel(x_name)
    ax.set_ylabel(name)
    return fig
