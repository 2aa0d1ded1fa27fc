"""Figures.  matplotlib is imported only here; every function takes results
(and optionally an Axes) and returns matplotlib objects."""

from __future__ import annotations

import numpy as np

__all__ = ["axis_label", "save_figure", "plot_agreement", "plot_bifurcation_diagram", "plot_boundary_curves",
           "plot_calibration", "plot_circuit_comparison", "plot_circuit_rates", "plot_comparison",
           "plot_density_map", "plot_finite_circuit", "plot_fit", "plot_gain", "plot_isi", "plot_ks", "plot_rate",
           "plot_rate_spectrum", "plot_spectra", "plot_stability_map", "plot_steady_state", "plot_sweep_curves",
           "plot_sweep_line", "plot_sweep_map", "plot_transfer", "plot_trials"]


def save_figure(fig, folder, stem: str) -> list[str]:
    """Save ``fig`` as ``stem.png`` and ``stem.svg`` in ``folder`` and close it; returns the file names.

    No dates and fixed SVG element ids, so the same figure gives the same bytes.
    """
    from pathlib import Path

    import matplotlib.pyplot as plt

    from ._version import __version__

    folder = Path(folder)
    stamp = f"popdens {__version__}"
    with plt.rc_context({"svg.hashsalt": "popdens"}):
        fig.savefig(folder / f"{stem}.png", dpi=150, metadata={"Software": stamp})
        fig.savefig(folder / f"{stem}.svg", metadata={"Date": None, "Creator": stamp})
    plt.close(fig)
    return [f"{stem}.png", f"{stem}.svg"]


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


def plot_agreement(agreement):
    """Monte Carlo twin against the prediction (2-SE band from the predicted rate) and the standardised
    residuals per bin, with the verdict as the title.  Returns the Figure."""
    import matplotlib.pyplot as plt

    fig, (ax, axz) = plt.subplots(2, 1, figsize=(7.0, 4.8), sharex=True, constrained_layout=True,
                                  gridspec_kw={"height_ratios": [3, 2]})
    a = agreement
    ax.fill_between(a.t, a.prediction - 2 * a.se, a.prediction + 2 * a.se, color="C0", alpha=0.2, step="pre",
                    lw=0, label="prediction ±2 SE")
    ax.step(a.t, a.twin, color="0.3", lw=0.8, where="pre", label=f"Monte Carlo twin (N={a.n_neurons})")
    ax.step(a.t, a.prediction, color="C0", lw=1.4, where="pre", label="prediction")
    ax.set_ylabel("population rate (Hz)")
    ax.legend(frameon=False, loc="best", fontsize="small")
    axz.step(a.t, a.z, color="0.3", lw=0.8, where="pre")
    for level, style in ((2.0, ":"), (4.0, "--")):
        axz.axhline(level, color="C3", ls=style, lw=0.8)
        axz.axhline(-level, color="C3", ls=style, lw=0.8)
    axz.axhline(0.0, color="0.5", lw=0.6)
    axz.set_ylabel("residual (SE)")
    axz.set_xlabel("time (ms)")
    head = "agrees" if a.agrees else "DISAGREES"
    detail = f"chi-square p = {a.p_value:.3g}" if a.dof else "too few spikes for chi-square"
    if a.modulation is not None:
        m = a.modulation
        detail += (f"; modulation {m.amplitude_hz:.3g} Hz [{m.amplitude_ci_hz[0]:.3g}, {m.amplitude_ci_hz[1]:.3g}]"
                   f" vs {m.predicted_amplitude_hz:.3g} Hz predicted, p = {m.p_value:.3g}")
    ax.set_title(f"twin {head} with the prediction at level {a.alpha:g}\n{detail}", fontsize="small")
    if a.t.size:
        ax.set_xlim(float(a.t[0]), float(a.t[-1]))
    return fig


def plot_gain(mu, rates, labels=None, ax=None, title=None, dashed=None):
    """A family of gain curves: stationary rate (Hz) against mean drive (mV).

    Parameters
    ----------
    mu : array_like, shape (n,)
        Mean drives (mV).
    rates : array_like, shape (n,) or (n_curves, n)
        Stationary rates (Hz), one row per curve.
    labels : sequence of str, optional
        One legend entry per curve.
    dashed : sequence of bool, optional
        Curves drawn dashed and thinner (e.g. the same neuron without adaptation, for comparison);
        a dashed curve takes the colour of the solid one before it.

    Returns
    -------
    matplotlib.axes.Axes
        The Axes drawn on.
    """
    ax = _axes(ax)
    mu = np.asarray(mu, dtype=float)
    rates = np.atleast_2d(np.asarray(rates, dtype=float))
    dashed = [False] * len(rates) if dashed is None else list(dashed)
    colour = None
    for i, row in enumerate(rates):
        label = None if labels is None else labels[i]
        if dashed[i]:
            ax.plot(mu, row, lw=1.1, ls="--", color=colour, label=label)
        else:
            colour = ax.plot(mu, row, lw=1.6, label=label)[0].get_color()
    ax.set_xlabel("mean drive mu (mV)")
    ax.set_ylabel("stationary rate (Hz)")
    if labels is not None:
        ax.legend(frameon=False, loc="upper left")
    if title:
        ax.set_title(title)
    return ax


def plot_approximations(x, twin, twin_se, predictions, x_label, ax=None, title=None):
    """What each approximation buys: the Monte Carlo twin's rate (with 2 SE bars) and each theory's.

    Parameters
    ----------
    x : array_like, shape (n,)
        The varied quantity (e.g. ``tau_syn / tau_m``).
    twin, twin_se : array_like, shape (n,)
        Twin rates (Hz) and their standard errors (Hz).
    predictions : dict
        Label -> rates (Hz), shape (n,), one line each.
    x_label : str

    Returns
    -------
    matplotlib.figure.Figure
        Top: rates; bottom: each prediction's error relative to the twin (%), the twin's 2 SE band shaded.
    """
    import matplotlib.pyplot as plt

    x = np.asarray(x, dtype=float)
    twin = np.asarray(twin, dtype=float)
    se = np.asarray(twin_se, dtype=float)
    fig, (top, bot) = plt.subplots(2, 1, figsize=(6.4, 6.0), sharex=True, height_ratios=(3, 2))
    top.errorbar(x, twin, yerr=2 * se, fmt="o", color="black", ms=4, capsize=3, label="Monte Carlo twin (2 SE)")
    styles = ("-", "--", "-.", ":")
    for i, (label, rates) in enumerate(predictions.items()):
        rates = np.asarray(rates, dtype=float)
        top.plot(x, rates, styles[i % 4], lw=1.6, label=label)
        bot.plot(x, 100.0 * (rates / twin - 1.0), styles[i % 4], marker=".", lw=1.6, label=label)
    bot.fill_between(x, -200.0 * se / twin, 200.0 * se / twin, color="0.85", label="twin 2 SE")
    bot.axhline(0.0, color="black", lw=0.8)
    top.set_ylabel("stationary rate (Hz)")
    bot.set_ylabel("error vs twin (%)")
    bot.set_xlabel(x_label)
    top.legend(frameon=False, loc="best")
    if title:
        top.set_title(title)
    fig.tight_layout()
    return fig


def plot_transfer(freqs, chi, labels=None, unit="Hz/mV"):
    """Transfer-function magnitude and phase against frequency, on log axes.

    Parameters
    ----------
    freqs : array_like, shape (n,)
        Frequencies (Hz), > 0 for the log axis (zero is dropped).
    chi : array_like of complex, shape (n,) or (n_curves, n)
        Transfer function values (``unit``).
    labels : sequence of str, optional
        One legend label per curve.
    unit : str
        Unit of the magnitude axis.

    Returns
    -------
    matplotlib.figure.Figure
        With two Axes: magnitude (top) and phase in degrees (bottom).
    """
    import matplotlib.pyplot as plt

    f = np.asarray(freqs, dtype=float)
    chi = np.atleast_2d(np.asarray(chi, dtype=complex))
    keep = f > 0
    fig, (axm, axp) = plt.subplots(2, 1, figsize=(6.5, 5.0), sharex=True, constrained_layout=True)
    for i, row in enumerate(chi):
        lab = None if labels is None else labels[i]
        axm.loglog(f[keep], np.abs(row[keep]), lw=1.6, label=lab)
        axp.semilogx(f[keep], np.degrees(np.unwrap(np.angle(row[keep]))), lw=1.6, label=lab)
    axm.set_ylabel(f"|transfer| ({unit})")
    axp.set_ylabel("phase (degrees)")
    axp.set_xlabel("frequency (Hz)")
    axp.axhline(0.0, color="0.7", lw=0.8)
    if labels is not None:
        axm.legend(frameon=False, loc="best")
    return fig


def plot_isi(t, density, ax=None, label=None, **kwargs):
    """ISI density (1/ms) against interval (ms); returns the Axes."""
    ax = _axes(ax)
    ax.plot(np.asarray(t, dtype=float), np.asarray(density, dtype=float), lw=1.6, label=label, **kwargs)
    ax.set_xlabel("interspike interval (ms)")
    ax.set_ylabel("ISI density (1/ms)")
    # limits from every curve drawn so far (a fixed limit from the first would clip later, taller ones)
    top, right = 0.0, 0.0
    for line in ax.get_lines():
        x, y = np.asarray(line.get_xdata(), float), np.asarray(line.get_ydata(), float)
        ok = np.isfinite(y)
        if not np.any(ok):
            continue
        peak = float(np.max(y[ok]))
        top = max(top, peak)
        above = x[ok][y[ok] >= 1e-3 * peak] if peak > 0 else x[ok]
        right = max(right, float(above.max()) if above.size else 0.0)
    if top > 0:
        ax.set_ylim(0.0, 1.05 * top)
    if right > 0:
        ax.set_xlim(0.0, 1.05 * right)
    return ax


def plot_density_map(result, ax=None, cmap="magma"):
    """Heat map of the density snapshots of a time-domain result over time.

    The result must have been computed with ``snapshot_interval``.  The
    colour is the age density (1/ms) or membrane-potential density (1/mV).

    Returns
    -------
    matplotlib.axes.Axes
        The Axes drawn on.
    """
    if result.snapshots is None or result.snapshot_t is None or len(result.snapshot_t) < 2:
        raise ValueError("the result holds fewer than two density snapshots; pass `snapshot_interval` "
                         "to popdens.simulate")
    ax = _axes(ax)
    dens = np.asarray(result.snapshots, dtype=float)
    axis = np.asarray(result.axis, dtype=float)
    is_age = result.axis_name.startswith("age")
    if is_age:  # the last age bin collects every neuron older than the grid: not a density, not drawn
        dens, axis = dens[:, :-1], axis[:-1]
        ax.set_title(f"neurons older than {axis[-1]:.4g} ms not drawn", fontsize="small", loc="right")
    mesh = ax.pcolormesh(np.asarray(result.snapshot_t), axis, dens.T, shading="nearest",
                         cmap=cmap, rasterized=True)
    unit = "1/ms" if is_age else "1/mV"
    ax.figure.colorbar(mesh, ax=ax, label=f"density ({unit})")
    ax.set_xlabel("time (ms)")
    ax.set_ylabel(result.axis_name)
    return ax


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


# ---------------------------------------------------------------- sweeps
#: Families with more curves than this get a colour bar instead of a legend.
MAX_LEGEND_CURVES = 10


#: Units of scenario keys (the last part of a dotted key such as ``neuron.tau_m``), for axis labels.
KEY_UNITS = {
    "tau_m": "ms", "refractory": "ms", "threshold": "mV", "reset": "mV", "rest": "mV", "soft_threshold": "mV",
    "slope_factor": "mV", "cutoff": "mV", "critical": "mV", "sigma": "mV", "mu": "mV", "amplitude": "mV",
    "mean": "mV", "before": "mV", "after": "mV", "frequency": "Hz", "rate": "Hz", "max_rate": "Hz",
    "width": "mV", "t": "ms", "t_end": "ms", "dt": "ms", "duration": "ms", "record_interval": "ms",
    "phase": "rad", "tau": "ms", "jump": "mV", "coupling": "1", "drive": "mV", "weight": "mV", "delay": "ms",
    "tau_syn": "ms", "size": "neurons", "in_degree": "synapses", "base": "mV", "start": "ms", "stop": "ms",
    "exc_rate": "Hz", "exc_psp": "mV", "inh_rate": "Hz", "inh_psp": "mV", "psp": "mV",
    "exc_weight": "leak units", "inh_weight": "leak units", "exc_tau": "ms", "inh_tau": "ms",
    "exc_reversal": "mV", "inh_reversal": "mV",
}
#: Unit suffixes of column and output names (``rate_Hz``, ``transfer_amplitude_Hz_per_mV``), longest first.
SUFFIX_UNITS = (("_Hz_per_mV", "Hz/mV"), ("_per_s", "1/s"), ("_Hz", "Hz"), ("_hz", "Hz"), ("_mV", "mV"),
                ("_mv", "mV"), ("_ms", "ms"), ("_deg", "degrees"), ("_s", "s"))


def axis_label(name: str) -> str:
    """``quantity (unit)`` for a column, output or swept-key name: ``rate_Hz`` -> ``rate (Hz)``,
    ``input.mu`` -> ``input mu (mV)``, ``neuron.tau_m`` -> ``neuron tau m (ms)``."""
    if name == "point":
        return "point (index)"
    if "." in name:
        table, _, key = name.rpartition(".")
        unit = KEY_UNITS.get(key)
        text = f"{table.replace('.', ' ')} {key.replace('_', ' ')}"
        return f"{text} ({unit})" if unit and unit != "1" else text
    for suffix, unit in SUFFIX_UNITS:
        if name.endswith(suffix) and len(name) > len(suffix):
            return f"{name[: -len(suffix)].replace('_', ' ')} ({unit})"
    unit = KEY_UNITS.get(name)
    return f"{name.replace('_', ' ')} ({unit})" if unit and unit != "1" else name.replace("_", " ")


def _is_frequency(name: str) -> bool:
    return name.rpartition(".")[2].lower().startswith("frequency")


#: Below this many points per line, markers show where values were computed.
MARKERS_BELOW = 30


def plot_sweep_map(y_values, x_values, values, y_name, x_name, name):
    """Heat map of a scalar sweep output over a two-parameter grid (``values[i, j]`` at
    ``y_values[i]``, ``x_values[j]``); failed points show as blank.  Axes and colour bar are labelled
    with quantity and unit.  Returns the Figure."""
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(6.0, 4.6), constrained_layout=True)
    x = np.asarray(x_values, dtype=float)
    y = np.asarray(y_values, dtype=float)
    z = np.ma.masked_invalid(np.asarray(values, dtype=float))
    shading = "nearest" if x.size > 1 and y.size > 1 else "auto"
    mesh = ax.pcolormesh(x, y, z, shading=shading, cmap="viridis")
    fig.colorbar(mesh, ax=ax, label=axis_label(name))
    if _is_frequency(x_name) and np.all(x > 0):
        ax.set_xscale("log")
    if _is_frequency(y_name) and np.all(y > 0):
        ax.set_yscale("log")
    ax.set_xlabel(axis_label(x_name))
    ax.set_ylabel(axis_label(y_name))
    ax.set_title(axis_label(name))
    return fig


def plot_sweep_line(x_values, values, x_name, name):
    """A scalar sweep output against one swept parameter (or the point index), with markers at the
    computed points and a log axis for frequencies.  Returns the Figure."""
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(6.0, 3.6), constrained_layout=True)
    x = np.asarray(x_values, dtype=float)
    ax.plot(x, np.asarray(values, dtype=float), "o-", ms=4)
    if _is_frequency(x_name) and np.any(x > 0):
        ax.set_xscale("log")
    ax.set_xlabel(axis_label(x_name))
    ax.set_ylabel(axis_label(name))
    return fig


def plot_sweep_curves(x, ys, x_name, name, labels, colour_by=None, style_by=None):
    """A family of curves, one per sweep point (rows of ``ys``).

    Parameters
    ----------
    x, ys : array_like
        Common coordinate and one row per point.
    x_name, name : str
        Coordinate and output names (labels get quantity and unit); frequencies go on a log axis
        (0 Hz left out) with markers where points are sparse.
    labels : list of str
        One label per point (legend of small families without ``colour_by``).
    colour_by : (str, array_like), optional
        Swept parameter and its value at each point: curves coloured by it, with a colour bar.
    style_by : (str, array_like), optional
        A second swept parameter: one line style per value, in the legend.

    Returns
    -------
    matplotlib.figure.Figure
        The figure of the family.
    """
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(6.6, 4.0), constrained_layout=True)
    ys = np.atleast_2d(np.asarray(ys, dtype=float))
    xs = np.asarray(x, dtype=float)
    keep = xs > 0 if _is_frequency(x_name) and np.any(xs > 0) else np.ones(xs.size, bool)
    marker = "o" if keep.sum() < MARKERS_BELOW else None
    n = ys.shape[0]
    cmap = plt.get_cmap("viridis")
    styles = ("-", "--", ":", "-.")
    style_of = {}
    if style_by is not None:
        for v in style_by[1]:
            style_of.setdefault(v, styles[len(style_of) % len(styles)])
    if colour_by is not None:
        vals = np.asarray(colour_by[1], dtype=float)
        norm = plt.Normalize(float(np.nanmin(vals)), float(np.nanmax(vals)) if np.nanmax(vals) > np.nanmin(vals)
                             else float(np.nanmin(vals)) + 1.0)
        for i in range(n):
            ls = style_of[style_by[1][i]] if style_by is not None else "-"
            ax.plot(xs[keep], ys[i][keep], color=cmap(norm(vals[i])), ls=ls, lw=1.3, marker=marker, ms=3)
        sm = plt.cm.ScalarMappable(cmap=cmap, norm=norm)
        fig.colorbar(sm, ax=ax, label=axis_label(colour_by[0]))
        if style_by is not None:
            for v, ls in style_of.items():
                ax.plot([], [], color="0.3", ls=ls, label=f"{axis_label(style_by[0])} = {v:g}"
                        if isinstance(v, (int, float)) else f"{style_by[0]} = {v}")
            ax.legend(frameon=False, fontsize="small")
    else:
        for i in range(n):
            ax.plot(xs[keep], ys[i][keep], color=cmap(i / max(n - 1, 1)), lw=1.3, marker=marker, ms=3,
                    label=labels[i] if n <= MAX_LEGEND_CURVES else None)
        if n <= MAX_LEGEND_CURVES:
            ax.legend(frameon=False, fontsize="small")
        else:
            sm = plt.cm.ScalarMappable(cmap=cmap, norm=plt.Normalize(0, n - 1))
            fig.colorbar(sm, ax=ax, label="point (index; see results.csv)")
    if _is_frequency(x_name) and np.any(xs > 0):
        ax.set_xscale("log")
    ax.set_xlabel(axis_label(x_name))
    ax.set_ylabel(axis_label(name))
    return fig


def plot_circuit_rates(result, ax=None, **kwargs):
    """Rates (Hz) of every cohort of a circuit run against time (ms); returns the Axes."""
    ax = _axes(ax)
    for k, nm in enumerate(result.names):
        ax.plot(result.t[1:], result.rate[k, 1:], label=f"{nm} ({result.method})", **kwargs)
    ax.set_xlabel("time (ms)")
    ax.set_ylabel("population rate (Hz)")
    ax.legend(frameon=False)
    return ax


#: Line styles of cohorts in circuit figures (colour and dash differ, so cohorts stay apart in print).
_COHORT_STYLES = (("C0", "-"), ("C3", "--"), ("C2", "-."), ("C1", ":"), ("C4", "-"), ("C5", "--"))


def plot_circuit_comparison(mean_field, twin=None, ax=None):
    """Mean-field rates (thick) and, if given, the spiking twin's (thin, same colour and dash) of every cohort against time (ms); returns the Figure."""
    ax = _axes(ax)
    for k, nm in enumerate(mean_field.names):
        colour, dash = _COHORT_STYLES[k % len(_COHORT_STYLES)]
        if twin is not None:
            ax.plot(twin.t[1:], twin.rate[k, 1:], color=colour, ls=dash, lw=0.7, alpha=0.55,
                    label=f"{nm}: spiking twin (N = {twin.sizes[k]})")
        ax.plot(mean_field.t[1:], mean_field.rate[k, 1:], color=colour, ls=dash, lw=2.4, label=f"{nm}: mean field")
    ax.set_xlabel("time (ms)")
    ax.set_ylabel("population rate (Hz)")
    ax.legend(frameon=False, fontsize="small", ncol=2)
    return ax.figure


def plot_rate_spectrum(spectra, names, marks=(), floor=None, ax=None):
    """Power spectra of the cohorts' rates (``CircuitResult.rate_spectrum``) on log axes, with
    vertical lines at predicted frequencies (``marks``: (Hz, label) pairs) and, per cohort, the level
    of independent neurons (``floor``: name -> Hz^2/Hz).  Returns the Figure."""
    ax = _axes(ax)
    freqs, power = spectra
    sel = freqs > 0
    for k, nm in enumerate(names):
        colour, dash = _COHORT_STYLES[k % len(_COHORT_STYLES)]
        ax.plot(freqs[sel], power[k][sel], color=colour, ls=dash, lw=1.4, marker="o", ms=2.5,
                label=f"{nm}: spiking twin")
        if floor and nm in floor:
            ax.axhline(floor[nm], color=colour, ls=":", lw=0.8, label=f"{nm}: independent neurons")
    for i, (f, label) in enumerate(marks):
        ax.axvline(f, color="0.3", ls=(0, (4, 2)) if i == 0 else ":", lw=1.0, label=label)
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("rate power spectrum (Hz²/Hz)")
    ax.legend(frameon=False, fontsize="small")
    return ax.figure


def plot_stability_map(smap, ax=None, curves=None):
    """Growth rate of the leading root over a stability map, the boundary (growth rate 0) in black and
    the oscillation frequency written at each unstable point; ``curves`` (a ``BoundaryCurves`` in the
    same plane) drawn on top.  Returns ``(fig, ax)``."""
    import matplotlib.pyplot as plt

    if ax is None:
        fig, ax = plt.subplots(figsize=(5.5, 4.2), constrained_layout=True)
    else:
        fig = ax.figure
    g = np.asarray(smap.growth_rate, dtype=float)
    span = float(np.nanmax(np.abs(g))) if np.any(np.isfinite(g)) else 1.0
    mesh = ax.pcolormesh(smap.x, smap.y, g, shading="nearest", cmap="RdBu_r", vmin=-span, vmax=span)
    fig.colorbar(mesh, ax=ax, label="growth rate of the leading root (1/s; > 0: unstable)")
    if np.nanmin(g) < 0 < np.nanmax(g):
        ax.contour(smap.x, smap.y, g, levels=[0.0], colors="k", linewidths=1.5)
    for (iy, ix), f in np.ndenumerate(smap.frequency):
        if np.isfinite(f) and g[iy, ix] > 0:
            ax.annotate(f"{f:.0f} Hz", (smap.x[ix], smap.y[iy]), ha="center", va="center", fontsize=7)
    ax.set_xlabel(smap.x_label)
    ax.set_ylabel(smap.y_label)
    ax.set_title("linear stability (black: boundary)")
    if curves is not None:
        plot_boundary_curves(curves, ax, labels=False)
        ax.set_title("linear stability (black: grid boundary; green/purple: continued curves)")
    return fig, ax


#: Line colours of the continuation figures: folds, onsets.
_KIND_COLOURS = {"fold": "tab:green", "onset": "tab:purple"}


def _log_rates(values) -> bool:
    """Rates spanning more than two decades are drawn on a log axis."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v) & (v > 0)]
    return v.size > 1 and v.max() / v.min() > 100.0


def plot_bifurcation_diagram(diagram, ax=None):
    """Rates of each cohort against the continuation parameter: stable branches solid, unstable
    dashed, folds (circles) and oscillation onsets (squares, with their frequency) marked.

    One panel per cohort (stacked, sharing the parameter axis) unless ``ax`` is given, in which
    case every cohort goes on it.  Returns ``(fig, axes)`` (``axes``: a list).
    """
    import matplotlib.pyplot as plt

    names = list(diagram.names)
    if ax is None:
        fig, axes = plt.subplots(len(names), 1, figsize=(6.0, 2.4 + 1.6 * len(names)), sharex=True,
                                 constrained_layout=True, squeeze=False)
        axes = list(axes[:, 0])
        panels = [(a, [k]) for k, a in enumerate(axes)]
    else:
        fig, axes = ax.figure, [ax]
        panels = [(ax, list(range(len(names))))]
    for axk, cohorts in panels:
        for k in cohorts:
            colour = f"C{k}" if len(cohorts) > 1 else "k"
            for b in diagram.branches:
                x, r = b.parameter, b.rates[:, k]
                if not diagram.analysed:
                    axk.plot(x, r, "-", color="0.4", lw=1.2)
                    continue
                # solid where stable, dashed where not; segments split where the label changes
                st = b.stable
                start = 0
                for i in range(1, len(x) + 1):
                    if i == len(x) or st[i] != st[start]:
                        sl = slice(start, min(i + 1, len(x)))
                        axk.plot(x[sl], r[sl], "-" if st[start] else "--", color=colour, lw=1.6 if st[start] else 1.0)
                        start = i
            for i, sp in enumerate(diagram.points):
                mk = "o" if sp.kind == "fold" else "s"
                axk.plot(sp.parameter, sp.rates[k], mk, color=_KIND_COLOURS[sp.kind], ms=6, mec="k", mew=0.6,
                         zorder=5)
                text = (f"fold at {sp.parameter:.4g}" if sp.kind == "fold"
                        else f"onset {sp.frequency:.0f} Hz at {sp.parameter:.4g}")
                # alternate above / below so that neighbouring labels do not overprint
                axk.annotate(text, (sp.parameter, sp.rates[k]), xytext=(5, 5 if i % 2 == 0 else -11),
                             textcoords="offset points", fontsize=7)
        rates = np.concatenate([b.rates[:, cohorts].ravel() for b in diagram.branches] or [[1.0]])
        if _log_rates(rates):
            axk.set_yscale("log")
            top = float(np.nanmax(rates))
            # below 1e-4 of the highest rate a branch is as good as silent: do not spend the axis on it
            axk.set_ylim(max(float(np.nanmin(rates[rates > 0])), 1e-4 * top) / 2, top * 2)
        axk.set_ylabel("rate (Hz)" if len(cohorts) > 1 else f"rate of {names[cohorts[0]]} (Hz)")
        if len(cohorts) > 1:
            from matplotlib.lines import Line2D

            handles = [Line2D([], [], color=f"C{k}", label=names[k]) for k in cohorts]
            axk.legend(handles=handles, frameon=False, fontsize=8)
    axes[-1].set_xlabel(diagram.label)
    what = "solid stable, dashed unstable" if diagram.analysed else "stability not analysed"
    axes[0].set_title(f"fixed points ({what}); o fold, \u25a1 oscillation onset", fontsize=9)
    return fig, axes


def plot_boundary_curves(curves, ax=None, labels=True):
    """Fold (green) and oscillation-onset (purple) curves in the parameter plane: stability
    boundaries thick and solid, other crossings thin and dashed, onset frequencies written at a few
    points.  Returns ``(fig, ax)``."""
    import matplotlib.pyplot as plt

    if ax is None:
        fig, ax = plt.subplots(figsize=(5.5, 4.2), constrained_layout=True)
    else:
        fig = ax.figure
    for c in curves.curves:
        colour = _KIND_COLOURS[c.kind]
        b = c.boundary
        start = 0
        for i in range(1, len(c) + 1):
            if i == len(c) or b[i] != b[start]:
                sl = slice(start, min(i + 1, len(c)))
                ax.plot(c.x[sl], c.y[sl], "-" if b[start] else "--", color=colour, lw=2.2 if b[start] else 0.9)
                start = i
        if c.kind == "onset" and len(c):
            for i in np.unique(np.linspace(0, len(c) - 1, 3).astype(int)):
                ax.annotate(f"{c.frequency[i]:.0f} Hz", (c.x[i], c.y[i]), xytext=(3, 3), textcoords="offset points",
                            fontsize=7, color=colour)
    ax.set_xlim(*curves.x_span)
    ax.set_ylim(*curves.y_span)
    if labels:
        ax.set_xlabel(curves.x_label)
        ax.set_ylabel(curves.y_label)
        ax.set_title("green: folds, purple: oscillation onsets\n(thick: stability lost, thin dashed: other crossings)",
                     fontsize=9)
    return fig, ax


def plot_trials(finite, prediction=None, n_show: int = 2, max_bins: int = 1000):
    """Realisations of a finite population over their mean +/- one standard deviation.

    ``finite`` is a :class:`~popdens.Result` of ``simulate(..., n=N, trials=M)``;
    ``prediction`` (optional) the infinite-population result drawn on top.
    The drive is shown underneath; a record longer than ``max_bins`` bins is
    shown over its first ``max_bins`` (said in the title).  Returns the Figure.
    """
    import matplotlib.pyplot as plt

    fig, (ax, axd) = plt.subplots(2, 1, figsize=(7.0, 4.8), sharex=True, constrained_layout=True,
                                  gridspec_kw={"height_ratios": [3, 1]})
    stop = min(finite.t.size, max_bins + 1)
    t = finite.t[1:stop]
    trials = finite.trial_rates if finite.trial_rates is not None else finite.rate[None]
    for m in range(min(n_show, trials.shape[0])):
        ax.step(t, trials[m, 1:stop], where="pre", color=f"C{m + 1}", lw=0.5, alpha=0.55,
                label="single trials" if m == 0 else None)
    if trials.shape[0] >= 2:
        mean, sd = trials[:, 1:stop].mean(axis=0), trials[:, 1:stop].std(axis=0, ddof=1)
        ax.fill_between(t, mean - sd, mean + sd, color="C0", alpha=0.3, lw=0, step="pre",
                        label=f"mean ± SD over {trials.shape[0]} trials")
        for edge in (mean - sd, mean + sd):
            ax.step(t, edge, where="pre", color="C0", lw=0.6)
        ax.step(t, mean, where="pre", color="C0", lw=1.3, label="trial mean")
    if prediction is not None:
        keep = prediction.t[1:] <= t[-1] + 1e-9
        ax.plot(prediction.t[1:][keep], prediction.rate[1:][keep], color="k", lw=1.4, ls="--",
                label="infinite population")
    shown = "" if stop == finite.t.size else f" (first {t[-1]:g} ms of {finite.t[-1]:g} ms)"
    ax.set_ylabel("population rate (Hz)")
    ax.set_title(f"{finite.n_neurons} neurons{shown}", fontsize=10)
    ax.legend(frameon=False, loc="best", fontsize=8)
    axd.plot(finite.t[:stop], finite.drive[:stop], color="C3")
    axd.set_ylabel("drive (mV)")
    axd.set_xlabel("time (ms)")
    ax.set_xlim(float(t[0]), float(t[-1]))
    return fig


def plot_spectra(curves, ylabel: str = "power spectrum (Hz)", title: str | None = None, bands: int = 60):
    """Power spectra on log-log axes.

    ``curves``: ``(freqs, power, standard_error or None, label)`` tuples (Hz).  An estimate with
    standard errors is averaged over ``bands`` logarithmic frequency bands (the standard error of a
    band mean: root-mean-square SE / sqrt(points), the periodogram ordinates being nearly
    independent) and drawn with a +/- 2 SE band; one without is drawn as a line.  Returns the Figure.
    """
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(6.0, 4.0), constrained_layout=True)
    for k, (f, p, se, label) in enumerate(curves):
        f, p = np.asarray(f, float), np.asarray(p, float)
        if se is None:
            ax.plot(f, p, color="k" if k == 0 else f"C{k}", lw=1.6, ls="--", label=label)
            continue
        se = np.asarray(se, float)
        edges = np.geomspace(f[0], f[-1] * (1 + 1e-9), bands + 1)
        idx = np.digitize(f, edges) - 1
        used = np.unique(idx)
        fb = np.array([np.exp(np.mean(np.log(f[idx == i]))) for i in used])
        pb = np.array([p[idx == i].mean() for i in used])
        sb = np.array([np.sqrt(np.mean(se[idx == i] ** 2) / np.sum(idx == i)) for i in used])
        ax.fill_between(fb, np.maximum(pb - 2 * sb, pb * 0.05), pb + 2 * sb, color=f"C{k}", alpha=0.25, lw=0)
        ax.plot(fb, pb, color=f"C{k}", lw=1.0, marker=".", ms=3, label=label + " (±2 SE)")
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel(ylabel)
    if title:
        ax.set_title(title, fontsize=10)
    ax.legend(frameon=False, fontsize=8)
    return fig


def plot_finite_circuit(finite, mean_field=None, spiking=None):
    """Finite cohorts of a circuit run: one panel per cohort with the realisation of the mesoscopic
    integration, the spiking twin (grey) and the mean field (dashed).  Returns the Figure."""
    import matplotlib.pyplot as plt

    n = len(finite.names)
    fig, axes = plt.subplots(n, 1, figsize=(7.0, 1.2 + 2.2 * n), sharex=True, constrained_layout=True,
                             squeeze=False)
    for k, (ax, nm) in enumerate(zip(axes[:, 0], finite.names)):
        if spiking is not None:
            ax.plot(spiking.t[1:], spiking.rate[k, 1:], color="0.55", lw=0.7, label="spiking twin")
        size = f", {finite.sizes[k]} neurons" if finite.sizes else ""
        ax.plot(finite.t[1:], finite.rate[k, 1:], color=f"C{k}", lw=0.8, label=f"finite-size integration{size}")
        if mean_field is not None:
            ax.plot(mean_field.t[1:], mean_field.rate[k, 1:], color="k", lw=1.3, ls="--", label="mean field")
        ax.set_ylabel(f"{nm} rate (Hz)")
        ax.legend(frameon=False, fontsize=8, loc="upper right")
    axes[-1, 0].set_xlabel("time (ms)")
    return fig


# ---------------------------------------------------------------- fits
def plot_ks(z_sorted, band, ax=None, title=None):
    """Kolmogorov-Smirnov plot of time-rescaled intervals (Brown et al. 2002, Fig. 1).

    Sorted ``z = 1 - exp(-tau)`` against the uniform quantiles ``(k - 1/2)/n``,
    with the 95 % band ``+/- band`` around the diagonal.  Returns the Axes.
    """
    ax = _axes(ax)
    z = np.asarray(z_sorted, dtype=float)
    q = (np.arange(z.size) + 0.5) / z.size
    ax.plot([0, 1], [0, 1], color="0.3", lw=1.0)
    ax.fill_between([0, 1], [-band, 1 - band], [band, 1 + band], color="0.85", label="95 % band")
    ax.plot(q, z, lw=1.6, label="rescaled intervals")
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1)
    ax.set_xlabel("uniform quantile")
    ax.set_ylabel("empirical CDF of z")
    ax.set_title(title or "time-rescaling KS plot", fontsize="medium")
    ax.legend(frameon=False, loc="upper left")
    return ax


def plot_fit(fit):
    """The figure of a :class:`~popdens.fitting.estimate.FitResult`: data against the fitted model,
    and the KS plot where there is one; returns the Figure."""
    import matplotlib.pyplot as plt

    d = fit.plot_data
    has_ks = "z_sorted" in d
    fig, axes = plt.subplots(1, 2 if has_ks else 1, figsize=(10.0 if has_ks else 6.0, 3.8),
                             constrained_layout=True, squeeze=False)
    ax = axes[0, 0]
    params = ", ".join(f"{n} = {fit.estimates[n]:.4g} ± {fit.se[n]:.2g}" for n in fit.names)
    if fit.kind == "isi":
        isis = np.asarray(d["isis"])
        top = float(np.quantile(isis, 0.995))
        ax.hist(isis, bins=min(100, max(10, isis.size // 50)), range=(0, top), density=True, color="0.75",
                label=f"data ({isis.size} ISIs)")
        keep = np.asarray(d["model_t"]) <= top
        ax.plot(np.asarray(d["model_t"])[keep], np.asarray(d["model_density"])[keep], lw=1.8, label="fitted model")
        ax.set_xlabel("interspike interval (ms)")
        ax.set_ylabel("ISI density (1/ms)")
    elif fit.kind == "psth":
        ax.stairs(d["observed"], d["edges"], color="0.55", label=f"observed ({d['n_trials']} trials, {d['bin']:g} ms bins)")
        ax.plot(d["pred_t"][1:], d["pred_rate"][1:], lw=1.2, label="predicted (density solver)")
        ax.set_xlabel("time (ms)")
        ax.set_ylabel("rate (Hz)")
    elif fit.kind == "gain":
        ax.errorbar(d["drive"], d["rate"], yerr=d["se"], fmt="o", ms=4, color="0.3", label="measured ± SE")
        ax.plot(d["model_drive"], d["model_rate"], lw=1.8, label="fitted gain")
        ax.set_xlabel("drive (stimulus units)")
        ax.set_ylabel("rate (Hz)")
    ax.set_title(params, fontsize="small")
    ax.legend(frameon=False, loc="best", fontsize="small")
    if has_ks:
        g = fit.goodness
        plot_ks(d["z_sorted"], d["band_95"], ax=axes[0, 1],
                title=f"KS {g['ks_statistic']:.3g}, p = {g['p_value']:.3g} ({g['n_intervals']} intervals)")
    return fig


def plot_calibration(cal):
    """Stationary rate and CV of a white-noise population and its calibrated escape-noise stand-in
    against the drive (a :class:`~popdens.fitting.bridge.Calibration`); returns the Figure."""
    import matplotlib.pyplot as plt

    rows = cal.table
    mu = [r["mu"] for r in rows]
    fig, (ax1, ax2) = plt.subplots(1, 2, figsize=(9.0, 3.5), constrained_layout=True)
    ax1.plot(mu, [r["rate_white"] for r in rows], "o-", label="white noise")
    ax1.plot(mu, [r["rate_escape"] for r in rows], "s--", label="calibrated escape noise")
    ax1.set_xlabel("drive (mV)")
    ax1.set_ylabel("rate (Hz)")
    ax1.legend(frameon=False)
    ax2.plot(mu, [r["cv_white"] for r in rows], "o-")
    ax2.plot(mu, [r["cv_escape"] for r in rows], "s--")
    ax2.set_xlabel("drive (mV)")
    ax2.set_ylabel("ISI CV")
    fig.suptitle(", ".join(f"{n} = {cal.fit.estimates[n]:.4g}" for n in cal.fit.names), fontsize="medium")
    return fig
