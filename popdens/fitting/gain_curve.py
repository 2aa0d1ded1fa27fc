"""Fitting a measured gain (f-I) curve by weighted least squares with the exact gain function.

The measured rates ``r_i`` (Hz) at drives ``I_i`` carry standard errors
``s_i``; with Gaussian errors the log-likelihood is

.. math:: \\ell = -\\tfrac12 \\sum_i \\Big(\\frac{r_i - g(\\mathrm{scale}\\,I_i + \\mathrm{offset})}{s_i}\\Big)^2
          - \\sum_i \\log(s_i \\sqrt{2\\pi}),

with ``g`` the model's stationary rate (:func:`popdens.gain`: the Siegert
formula, threshold integration or renewal theory), so maximising it is
weighted least squares and ``chi^2 = sum((r - g)/s)^2`` has ``n - k``
degrees of freedom at the estimate when the model is right (e.g. Press et
al., *Numerical Recipes*, 3rd ed., section 15.1).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from .. import _validation as v
from .data import GainCurve
from .estimate import FitResult, maximise
from .params import ParameterSet

__all__ = ["fit_gain"]


def fit_gain(population, curve: GainCurve, free, *, scale=1.0, offset=0.0, profile=False) -> FitResult:
    """Fit model parameters to a measured gain curve.

    Parameters
    ----------
    population : Population
        The model (escape, white, coloured or shot noise, with the gain
        function :func:`popdens.gain` computes for it: coloured noise by the
        boundary shift, an approximation); fixed values and start values.
        Noise parameters can be free (``sigma``, ``tau_syn``, ``exc_rate``...).
    curve : GainCurve
        Drive (mV, or any stimulus unit mapped by ``scale``), rate (Hz), SE (Hz).
    free : sequence of str or mapping
        Parameters to fit, e.g. ``["sigma", "threshold"]`` or ``["rate", "width", "offset"]``.
    scale, offset : float
        The drive is ``scale * curve.drive + offset`` (mV): fixed or start values.
    profile : bool
        Also compute 95 % profile-likelihood intervals.

    Returns
    -------
    FitResult
        ``goodness`` holds ``chi2``, ``dof``, ``chi2_per_dof`` and the p-value
        of the chi-square test.
    """
    if not isinstance(curve, GainCurve):
        raise ValueError(f"`curve` must be a GainCurve, got {type(curve).__name__}")
    from ..theory.steady_state import gain

    params = ParameterSet.make(population, free, {"scale": v.as_finite_float("scale", scale),
                                                  "offset": v.as_finite_float("offset", offset)})
    k = len(params.names)
    if curve.rate.size <= k:
        raise ValueError(f"`curve` has {curve.rate.size} points for {k} free parameters: it needs more points")
    norm = float(np.sum(np.log(curve.se * math.sqrt(2.0 * math.pi))))

    def model(pop, drives):
        return np.asarray(gain(pop, drives["scale"] * curve.drive + drives["offset"]), dtype=float)

    def loglik(pop, drives):
        resid = (curve.rate - model(pop, drives)) / curve.se
        return -0.5 * float(resid @ resid) - norm

    fit = maximise(loglik, params, kind="gain", n_observations=curve.rate.size, profile=profile)
    from scipy.stats import chi2 as chi2_dist

    chi2 = -2.0 * (fit.loglik + norm)
    dof = curve.rate.size - k
    goodness = {"chi2": chi2, "dof": dof, "chi2_per_dof": chi2 / dof, "p_value": float(chi2_dist.sf(chi2, dof))}
    lo, hi = float(curve.drive.min()), float(curve.drive.max())
    fine = np.linspace(lo, hi, 200)
    d = fit.drive_values
    plot_data = {"drive": curve.drive, "rate": curve.rate, "se": curve.se, "model_drive": fine,
                 "model_rate": np.asarray(gain(fit.population, d["scale"] * fine + d["offset"]))}
    diag = dict(fit.diagnostics)
    diag["loglik"] = "Gaussian log-likelihood of the rates with their standard errors"
    return replace(fit, goodness=goodness, plot_data=plot_data, diagnostics=diag)
