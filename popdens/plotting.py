"""Figures.  matplotlib is imported only here; every function takes results
(and optionally an Axes) and returns matplotlib objects."""

from __future__ import annotations

import numpy as np

__all__ = ["plot_rate", "plot_comparison", "plot_steady_state"]


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
    return fig
