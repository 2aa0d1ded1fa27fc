"""The noise-model bridge: an escape-noise population calibrated to stand in for a white-noise one.

The white-noise population's stationary ISI densities at several constant
drives are the data: the escape function is chosen to maximise the expected
log-likelihood of those densities,

.. math:: \\ell(\\theta) = N \\sum_j \\int p_{\\rm white}(t; \\mu_j)\\, \\log p_{\\rm escape}(t; \\mu_j, \\theta)\\, dt ,

i.e. to minimise the summed Kullback--Leibler divergence, with ``N`` a
nominal number of intervals per drive (the reported standard errors are
those of a fit to ``N`` intervals per drive; there is no sampling noise
here).  Two forms are offered: the exponential escape rate (free ``rate``
and ``width``) and the Arrhenius-and-current rate of Plesser & Gerstner
(2000, Neural Comput. 12:367), whose ``sigma`` is the white-noise amplitude
and ``tau`` the membrane time constant (with the noise convention of
:class:`popdens.WhiteNoise` a free membrane has variance ``sigma^2/2``, so
the Gaussian factor ``exp(-(theta - u)^2/sigma^2)`` is the stationary
potential distribution) and whose weights ``c1``, ``c2`` are fitted.

The calibrated population is then compared with the white-noise one on what
neither was fitted to directly: the stationary rate and CV at each drive,
and the rate response to a step of the drive (refractory-density solver
against the Fokker--Planck solver), reported separately for subthreshold
and suprathreshold drives.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from .. import _validation as v
from ..model.hazard import ArrheniusCurrent, Exponential
from ..model.noise import EscapeNoise, Population, WhiteNoise
from .estimate import FitResult, maximise
from .params import ParameterSet

__all__ = ["calibrate_escape", "Calibration"]

#: Nominal intervals per drive that set the scale of the reported standard errors.
NOMINAL_INTERVALS = 10_000
#: ISI grid points per drive for the divergence integral.
GRID_POINTS = 1500
#: Escape forms and their free parameters.
FORMS = {"exponential": ("rate", "width"), "arrhenius": ("c1", "c2")}


@dataclass(frozen=True, eq=False)
class Calibration:
    """An escape-noise stand-in for a white-noise population and how well it stands in.

    Attributes
    ----------
    fit : FitResult
        The calibrated escape function (``fit.population`` is the escape-noise population).
    table : list of dict
        Per drive: ``mu`` (mV), ``regime`` (``"subthreshold"`` when ``mu`` < threshold),
        white and escape ``rate`` (Hz) and ``cv``, their relative errors, and the RMS error of the
        rate response to a step of ``step_size`` starting there, relative to the white-noise
        population's mean rate after the step.
    summary : dict
        Largest relative errors per regime.
    """

    fit: FitResult
    table: list
    summary: dict

    def plot(self):
        """Rate and CV of both populations against the drive; returns the Figure."""
        from ..plotting import plot_calibration

        return plot_calibration(self)


def _escape_start(white_pop, form):
    nrn = white_pop.neuron
    sigma = float(white_pop.noise.sigma)
    if form == "exponential":
        # a soft threshold of the size of the potential fluctuations, ~1/tau_m at threshold
        hz = Exponential(rate=1000.0 / nrn.tau_m, width=sigma / math.sqrt(2.0))
    else:
        hz = ArrheniusCurrent(sigma=sigma, tau=float(nrn.tau_m), c1=0.5, c2=0.5)
    return Population(nrn, EscapeNoise(hz))


def calibrate_escape(population, drives, *, form="exponential", step_size=2.0, step_duration=150.0,
                     dt=0.1) -> Calibration:
    """Calibrate an escape-noise population to a white-noise population's ISI densities.

    Parameters
    ----------
    population : Population
        The white-noise population (LIF, EIF, QIF or PIF with constant ``sigma``).
    drives : array_like
        Constant drives (mV) whose ISI densities are fitted; at least two.
        Include sub- and suprathreshold drives to calibrate both regimes.
    form : {"exponential", "arrhenius"}
        Escape function fitted: exponential (``rate``, ``width``) or the
        Arrhenius-and-current form (``c1``, ``c2``; Plesser & Gerstner 2000).
    step_size : float
        Size (mV) of the step of the drive for the step-response check.
    step_duration : float
        Time (ms) after the step over which responses are compared.
    dt : float
        Time step (ms) of both solvers in the step-response check.

    Returns
    -------
    Calibration
        The calibrated escape function (``.fit``, whose ``population`` is the stand-in), its
        errors per drive (``.table``) and per regime (``.summary``), and ``.plot()``.
    """
    if not isinstance(population, Population) or not isinstance(population.noise, WhiteNoise):
        raise ValueError("`population` must be a white-noise popdens.Population")
    if form not in FORMS:
        raise ValueError(f"`form` must be one of {sorted(FORMS)}, got {form!r}")
    mus = np.sort(v.finite_array("drives", drives).ravel())
    if mus.size < 2:
        raise ValueError("`drives` needs at least two drives (mV)")
    step_size = v.positive("step_size", step_size)
    step_duration = v.positive("step_duration", step_duration)
    from ..theory.steady_state import stationary

    white = [stationary(population, float(m)) for m in mus]
    grids = []
    for st in white:
        t = np.linspace(0.0, float(st.isi_t[-1]), GRID_POINTS)
        p = np.interp(t, st.isi_t, st.isi_density)
        w = np.full(t.size, t[1] - t[0])
        w[0] = w[-1] = 0.5 * (t[1] - t[0])
        mass = p * w
        grids.append((t, mass / mass.sum()))

    def loglik(pop, drives_):
        total = 0.0
        for m, (t, weight) in zip(mus, grids):
            dens = stationary(pop, float(m), isi_t=t).isi_density
            keep = weight > 0.0
            total += float(np.sum(weight[keep] * np.log(np.maximum(dens[keep], 1e-300))))
        return NOMINAL_INTERVALS * total

    start = _escape_start(population, form)
    params = ParameterSet.make(start, list(FORMS[form]), {})
    fit = maximise(loglik, params, kind="calibration", n_observations=NOMINAL_INTERVALS * mus.size)
    diag = dict(fit.diagnostics)
    diag["loglik"] = (f"{NOMINAL_INTERVALS} x sum over drives of the expected log ISI density of the escape "
                      "model under the white-noise ISI density (1/ms)")
    fit = replace(fit, diagnostics=diag)
    esc = fit.population

    from ..model.drive import Step
    from ..solvers.frontend import simulate

    theta = float(population.neuron.threshold)
    rows = []
    for m, st in zip(mus, white):
        e = stationary(esc, float(m))
        before, after = float(m), float(m) + step_size
        drive = Step(t=50.0, before=before, after=after)
        t_end = 50.0 + step_duration
        r_w = simulate(population, drive, t_end=t_end, dt=dt, record_interval=1.0, progress=False)
        r_e = simulate(esc, drive, t_end=t_end, dt=dt, record_interval=1.0, progress=False)
        after_step = r_w.t > 50.0
        scale = max(float(np.mean(r_w.rate[after_step])), 1e-12)
        rms = float(np.sqrt(np.mean((r_e.rate[after_step] - r_w.rate[after_step]) ** 2)))
        rows.append({"mu": float(m), "regime": "subthreshold" if m < theta else "suprathreshold",
                     "rate_white": st.rate, "rate_escape": e.rate, "rate_error": e.rate / st.rate - 1.0,
                     "cv_white": st.cv, "cv_escape": e.cv, "cv_error": e.cv / st.cv - 1.0,
                     "step_rms_error": rms / scale})
    summary = {}
    for regime in ("subthreshold", "suprathreshold"):
        sel = [r for r in rows if r["regime"] == regime]
        if sel:
            summary[regime] = {k: max(abs(r[k]) for r in sel) for k in ("rate_error", "cv_error", "step_rms_error")}
    return Calibration(fit=fit, table=rows, summary=summary)
