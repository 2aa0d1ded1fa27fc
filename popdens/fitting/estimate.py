"""Maximum likelihood: the optimiser, the observed information, profile intervals and the result.

Standard errors come from the observed Fisher information, the negative
Hessian of the log-likelihood at its maximum, computed by central
differences in the model's own units with steps of about a third of a
standard error (found by a first pass), so the log-likelihood changes by
~0.05 there, far above its round-off.  Profile-likelihood intervals
(optional) are where the log-likelihood maximised over the other free
parameters falls by ``chi2_1(0.95)/2 = 1.92`` (Wilks' theorem; e.g.
Pawitan 2001, *In All Likelihood*, ch. 3).
"""

from __future__ import annotations

import math
import time
import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..exceptions import ConvergenceError
from .params import ParameterSet, is_positive, unit_of

__all__ = ["FitResult", "maximise"]

#: chi-square(1) quantile at 0.95 (scipy.stats.chi2.ppf(0.95, 1)), halved: the profile drop.
PROFILE_DROP = 0.5 * 3.841458820694124
#: 1.96: the normal 97.5 % quantile, for Wald intervals.
Z95 = 1.959963984540054
#: Steps (in the optimiser's coordinates, log for positive parameters) of the gradient.
GRADIENT_STEP = 1e-5
#: Hessian step as a fraction of the first-pass standard error.
HESSIAN_STEP_SE = 0.3
#: Gradient step of the Newton iterations as a fraction of the standard error.
GRADIENT_STEP_SE = 0.05
#: An information matrix whose smallest eigenvalue (in standard-error-scaled units) falls below this
#: relative to the largest is singular: the parameters are not separately identifiable.
IDENTIFIABLE_RTOL = 1e-8


@dataclass(frozen=True, eq=False)
class FitResult:
    """Outcome of a fit.

    Attributes
    ----------
    kind : str
        ``"isi"``, ``"psth"``, ``"gain"`` or ``"calibration"``.
    names : tuple of str
        Free parameters.
    estimates, se : dict
        Estimate and standard error of each free parameter (units in ``units``).
    covariance : ndarray
        Inverse observed information (estimates' covariance).
    loglik : float
        Maximised log-likelihood (definition per fit kind in ``diagnostics["loglik"]``).
    aic : float
        Akaike information criterion, ``2 k - 2 loglik``.
    n_observations : int
        ISIs, spikes or gain-curve points used.
    population : Population
        The fitted model.
    drive_values : dict
        Fitted or fixed drive parameters (``mu``, ``scale``, ``offset``).
    profile : dict or None
        95 % profile-likelihood interval per parameter, when asked for.
    goodness : dict
        Goodness of fit: time-rescaling KS test or chi-square per degree of freedom.
    diagnostics : dict
        Evaluations, wall time, convergence message, definitions.
    """

    kind: str
    names: tuple
    estimates: dict
    se: dict
    covariance: np.ndarray
    loglik: float
    aic: float
    n_observations: int
    population: Any
    drive_values: dict
    units: dict
    profile: dict | None = None
    goodness: dict = field(default_factory=dict)
    diagnostics: dict = field(default_factory=dict)
    plot_data: dict = field(default_factory=dict, repr=False)

    def interval(self, name: str, level: float = 0.95) -> tuple[float, float]:
        """Wald interval ``estimate -/+ z se`` (``level`` 0.95 gives 1.96 se)."""
        from scipy.stats import norm

        z = norm.ppf(0.5 + 0.5 * level)
        return self.estimates[name] - z * self.se[name], self.estimates[name] + z * self.se[name]

    def table(self) -> list[dict]:
        """One row per free parameter: name, unit, estimate, SE, 95 % intervals."""
        rows = []
        for n in self.names:
            lo, hi = self.interval(n)
            row = {"parameter": n, "unit": self.units[n], "estimate": self.estimates[n], "se": self.se[n],
                   "wald_low": lo, "wald_high": hi}
            if self.profile is not None:
                row["profile_low"], row["profile_high"] = self.profile[n]
            rows.append(row)
        return rows

    def __repr__(self) -> str:
        parts = ", ".join(f"{n} = {self.estimates[n]:.5g} ± {self.se[n]:.2g} {self.units[n]}" for n in self.names)
        return f"<FitResult {self.kind}: {parts}; loglik {self.loglik:.6g}, AIC {self.aic:.6g}>"

    def plot(self):
        """The fit's figure (data against the fitted model, and the goodness-of-fit plot); returns the Figure."""
        from ..plotting import plot_fit

        return plot_fit(self)


class _Objective:
    """Negative log-likelihood in the optimiser's coordinates, counting evaluations."""

    def __init__(self, loglik, params):
        self.loglik = loglik
        self.params = params
        self.calls = 0

    def at_x(self, x) -> float:
        self.calls += 1
        try:
            pop, drives = self.params.build(x)
            val = float(self.loglik(pop, drives))
        except (ValueError, ArithmeticError):
            return -math.inf
        return val if math.isfinite(val) else -math.inf

    def __call__(self, z) -> float:
        val = self.at_x(self.params.from_z(z))
        return -val if math.isfinite(val) else 1e300

    def value_and_gradient(self, z):
        """Value and forward-difference gradient (p + 1 evaluations)."""
        f0 = self(z)
        g = np.zeros(z.size)
        if f0 >= 1e299:
            return f0, g
        for i in range(z.size):
            e = np.zeros(z.size)
            e[i] = GRADIENT_STEP if is_positive(self.params.names[i]) else GRADIENT_STEP * max(1.0, abs(z[i]))
            fp = self(z + e)
            if fp >= 1e299:
                fp = 2.0 * f0 - self(z - e)
            g[i] = (fp - f0) / e[i]
        return f0, g


def _stencil(f, x, steps):
    """Value, central-difference gradient and Hessian of ``f`` at ``x``."""
    p = x.size
    f0 = f(x)
    hm = np.empty((p, p))
    g = np.empty(p)
    for i in range(p):
        e = np.zeros(p)
        e[i] = steps[i]
        fp, fm = f(x + e), f(x - e)
        g[i] = (fp - fm) / (2.0 * steps[i])
        hm[i, i] = (fp - 2.0 * f0 + fm) / steps[i] ** 2
    for i in range(p):
        for j in range(i + 1, p):
            ei = np.zeros(p)
            ej = np.zeros(p)
            ei[i], ej[j] = steps[i], steps[j]
            hm[i, j] = hm[j, i] = (f(x + ei + ej) - f(x + ei - ej) - f(x - ei + ej) + f(x - ei - ej)) / (
                4.0 * steps[i] * steps[j])
    return f0, g, hm


def _check_information(info, names, x):
    if not np.all(np.isfinite(info)):
        raise ConvergenceError("the log-likelihood is not finite around the estimate (a parameter at a "
                               "limit, e.g. `refractory` near the shortest interval?)")
    flat = [f"`{n}` ({xi:.4g})" for n, xi, d in zip(names, x, np.diag(info)) if d <= 0.0]
    if flat:
        raise ConvergenceError(f"the log-likelihood has no maximum in {', '.join(flat)}: the estimate runs "
                               "towards a limit; fix that parameter or check the model and the data")
    d = np.sqrt(np.diag(info))
    w, vecs = np.linalg.eigh(info / np.outer(d, d))
    if w[0] <= IDENTIFIABLE_RTOL * w[-1]:
        worst = vecs[:, 0]
        involved = [names[k] for k in np.argsort(-np.abs(worst)) if abs(worst[k]) > 0.2]
        raise ValueError(
            f"the free parameters {involved} are not separately identifiable from these data (the "
            "log-likelihood is flat along a combination of them): fix one of them")
    if w[0] <= 0.0:
        raise ConvergenceError("the log-likelihood is not at a maximum (the observed information is not "
                               "positive definite)")


class _Stalled(Exception):
    """A Newton step did not increase the log-likelihood."""


def _gradient(f, z, steps):
    """Central-difference gradient (2p evaluations)."""
    g = np.empty(z.size)
    for i in range(z.size):
        e = np.zeros(z.size)
        e[i] = steps[i]
        g[i] = (f(z + e) - f(z - e)) / (2.0 * steps[i])
    return g


def _newton_polish(obj, z, hess_hint=None, max_iter=12):
    """Newton steps in the optimiser's coordinates ``z`` (log scale for positive parameters).

    The gradient and Hessian come from a central-difference stencil with
    steps of a third of the standard errors.  While the stencil's steps fit
    the standard errors and a step moves less than five standard errors, the
    next step reuses the Hessian (or ``hess_hint``, e.g. from part of the
    data) with a fresh gradient (2p instead of 2p^2 evaluations).  Stops
    when a step computed from a fresh stencil is below 2 % of every
    standard error.  Returns ``(x, loglik, covariance in the
    model's units)``; at the maximum the change of coordinates is exact:
    ``cov_x = J cov_z J``, ``J = dx/dz``.
    """
    params = obj.params
    names = params.names

    def f(zz):
        val = obj.at_x(params.from_z(zz))
        return val if math.isfinite(val) else -1e300

    def stencil(zz, st):
        # the Hessian from steps of ~SE/3; the gradient again from steps of SE/20, since a wide
        # central difference carries a bias h^2 f'''/6 (third derivative) that would move the maximum
        f0_, g_, hm_ = _stencil(f, zz, st)
        if np.all(np.diag(hm_) < 0.0):
            small = GRADIENT_STEP_SE * np.sqrt(np.abs(np.diag(np.linalg.pinv(-hm_))))
            if np.all((small > 0.0) & (small < st)):
                g_ = _gradient(f, zz, small)
        return f0_, g_, hm_

    hint_ok = (hess_hint is not None and np.all(np.isfinite(hess_hint))
               and np.all(np.linalg.eigvalsh(0.5 * (hess_hint + hess_hint.T)) < 0.0))
    if hint_ok:
        hm = np.asarray(hess_hint, dtype=float)
        steps = HESSIAN_STEP_SE * np.sqrt(np.clip(np.diag(np.linalg.pinv(-hm)), 1e-300, None))
        f0 = f(z)
        g = _gradient(f, z, steps * (GRADIENT_STEP_SE / HESSIAN_STEP_SE))
        fresh = False
    else:
        steps = np.array([1e-3 if is_positive(n) else 1e-3 * max(abs(zi), 1e-2) for n, zi in zip(names, z)])
        f0, g, hm = stencil(z, steps)
        fresh = True
    for _ in range(max_iter):
        _check_information(-hm, names, params.from_z(z))
        cov = np.linalg.inv(-hm)
        se = np.sqrt(np.diag(cov))
        good_steps = np.allclose(HESSIAN_STEP_SE * se, steps, rtol=0.5)
        step = cov @ g
        if np.all(np.abs(step) <= 0.02 * se):
            if fresh and good_steps:
                x = params.from_z(z)
                jac = np.array([xi if is_positive(n) else 1.0 for n, xi in zip(names, x)])
                return x, f0, cov * np.outer(jac, jac)
            if not good_steps:
                steps = HESSIAN_STEP_SE * se
            f0, g, hm = stencil(z, steps)
            fresh = True
            continue
        for _ in range(10):
            f_new = f(z + step)
            if f_new >= f0 - 1e-9 * max(1.0, abs(f0)):
                break
            step = 0.5 * step
        else:
            raise _Stalled
        z = z + step
        f0 = f_new
        if good_steps and np.all(np.abs(step) <= 5.0 * se):
            g = _gradient(f, z, GRADIENT_STEP_SE * se)
            fresh = False
        else:
            steps = HESSIAN_STEP_SE * se
            f0, g, hm = stencil(z, steps)
            fresh = True
    raise ConvergenceError(f"Newton steps on the log-likelihood did not settle within {max_iter} iterations")


def _profile_interval(obj, x_hat, ll_hat, cov, i, limits):
    """95 % profile-likelihood interval of parameter ``i``.

    At each trial value the other parameters start from the quadratic
    prediction ``x_o + cov_oi / cov_ii (val - x_i)`` and take Newton steps
    with the information block of the fit and central-difference gradients;
    the end points (where the profile drops by 1.92) are bracketed outward
    from the Wald end points and refined with Brent's method to 1 % of a
    standard error.
    """
    from scipy.optimize import brentq

    p = x_hat.size
    others = np.array([k for k in range(p) if k != i], dtype=int)
    se_i = math.sqrt(cov[i, i])
    info = np.linalg.inv(cov)
    info_oo = info[np.ix_(others, others)] if others.size else None
    se_o = np.sqrt(np.diag(np.linalg.inv(info_oo))) if others.size else None
    positive = np.array([is_positive(n) for n in obj.params.names])

    def at(x):
        if np.any(positive & (x <= 0.0)):
            return -math.inf
        return obj.at_x(x)

    def drop(val):
        x = x_hat.copy()
        x[i] = val
        if others.size:
            x[others] += cov[others, i] / cov[i, i] * (val - x_hat[i])
        f0 = at(x)
        for _ in range(6):
            if not others.size or not math.isfinite(f0):
                break
            steps = 0.3 * se_o
            g = np.empty(others.size)
            for k, o in enumerate(others):
                e = np.zeros(p)
                e[o] = steps[k]
                g[k] = (at(x + e) - at(x - e)) / (2.0 * steps[k])
            if not np.all(np.isfinite(g)):
                break
            step = np.linalg.solve(info_oo, g)
            for _ in range(8):
                x_new = x.copy()
                x_new[others] += step
                f_new = at(x_new)
                if f_new >= f0:
                    break
                step *= 0.5
            else:
                break
            x, f0 = x_new, f_new
            if np.all(np.abs(step) <= 0.02 * se_o):
                break
        return (f0 if math.isfinite(f0) else -1e300) - ll_hat + PROFILE_DROP

    out = []
    for sign in (-1.0, 1.0):
        a, b = x_hat[i], x_hat[i] + sign * Z95 * se_i
        limit = limits[0] if sign < 0 else limits[1]
        found = False
        for _ in range(12):
            if limit is not None and sign * (b - limit) >= 0.0:
                b = limit
            if drop(b) < 0.0:
                found = True
                break
            if limit is not None and b == limit:
                break
            a, b = b, b + sign * se_i
        if found:
            out.append(brentq(drop, min(a, b), max(a, b), xtol=0.01 * se_i))
        else:
            out.append(-math.inf if sign < 0 else math.inf)
    return tuple(out)


def maximise(loglik, params: ParameterSet, *, kind: str, n_observations: int, profile: bool = False,
             options: dict | None = None, warm=None, warm_fraction: float = 1.0,
             good_start: bool = False) -> FitResult:
    """Maximise ``loglik(population, drive_values)`` over the free parameters of ``params``.

    The optimiser (L-BFGS-B with forward-difference gradients, on a log
    scale for positive parameters) runs on ``warm`` (the log-likelihood of
    part of the data) when given, else on ``loglik``; Newton steps on
    ``loglik`` with its central-difference Hessian then finish the
    estimate and give the observed information.  With ``good_start`` (the
    start values are already near the maximum, e.g. matched moments)
    Newton steps begin at once, and the optimiser runs only if they fail.

    Returns a :class:`FitResult` (without goodness of fit or plot data: the
    fit functions add them).
    """
    from scipy.optimize import minimize

    wall0 = time.perf_counter()
    cpu0 = time.process_time()
    obj = _Objective(loglik, params)
    z0 = params.to_z(params.start)
    if not math.isfinite(obj.at_x(params.start)):
        raise ValueError(f"the log-likelihood is not finite at the start values "
                         f"{dict(zip(params.names, params.start.tolist()))}: choose other start values")
    zb = params.z_bounds()
    opts = {"maxiter": 200, "ftol": 1e-12}
    opts.update(options or {})
    if good_start:
        try:
            x_hat, ll_hat, cov = _newton_polish(obj, z0)
        except (_Stalled, ConvergenceError, ValueError):
            good_start = False
    if good_start:
        res = None
    elif warm is not None:
        # cheap optimisation on part of the data, then Newton steps on all of it
        warm_obj = _Objective(warm, params)
        res = minimize(warm_obj.value_and_gradient, z0, jac=True, method="L-BFGS-B", bounds=zb, options=opts)
        # the information grows with the data: the part's Hessian, scaled, guides the first Newton steps

        def f_warm(zz):
            val = warm_obj.at_x(params.from_z(zz))
            return val if math.isfinite(val) else -1e300

        z_steps = np.array([1e-3 if is_positive(n) else 1e-3 * max(abs(zi), 1e-2) for n, zi in zip(params.names, res.x)])
        hint = _stencil(f_warm, res.x, z_steps)[2] / warm_fraction
        obj.calls += warm_obj.calls
    else:
        res = minimize(obj.value_and_gradient, z0, jac=True, method="L-BFGS-B", bounds=zb, options=opts)
        hint = None

    def finish(res, hess_hint):
        if not math.isfinite(obj.at_x(params.from_z(res.x))):
            raise ConvergenceError(f"the fit did not find a finite log-likelihood ({res.message})")
        at_bound = [n for n, zi, (lo, hi) in zip(params.names, res.x, zb)
                    if (lo is not None and zi - lo < 1e-6) or (hi is not None and hi - zi < 1e-6)]
        if at_bound:
            raise ConvergenceError(f"the estimate of {at_bound} lies at the edge of its range "
                                   f"({dict(zip(params.names, params.from_z(res.x).tolist()))}): widen the range")
        try:
            return _newton_polish(obj, res.x, hess_hint)
        except _Stalled:
            raise ConvergenceError("Newton steps did not increase the log-likelihood near the optimiser's "
                                   f"estimate ({res.message})") from None

    try:
        if res is not None:
            x_hat, ll_hat, cov = finish(res, hint)
    except (ConvergenceError, ValueError):
        if warm is None:
            raise
        # the part of the data misled the optimiser: optimise on all of it, then finish again
        res = minimize(obj.value_and_gradient, res.x, jac=True, method="L-BFGS-B", bounds=zb, options=opts)
        x_hat, ll_hat, cov = finish(res, None)
    se = np.sqrt(np.diag(cov))
    prof = None
    if profile:
        prof = {}
        for i, n in enumerate(params.names):
            lo, hi = params.bounds[i]
            if is_positive(n):
                lo = max(lo, 0.0)
            prof[n] = _profile_interval(obj, x_hat, ll_hat, cov, i,
                                        (lo if math.isfinite(lo) else None, hi if math.isfinite(hi) else None))
    pop, drives = params.build(x_hat)
    k = len(params.names)
    return FitResult(
        kind=kind, names=params.names, estimates=dict(zip(params.names, x_hat.tolist())),
        se=dict(zip(params.names, se.tolist())), covariance=cov, loglik=ll_hat, aic=2.0 * k - 2.0 * ll_hat,
        n_observations=int(n_observations), population=pop, drive_values=drives,
        units={n: unit_of(n) for n in params.names}, profile=prof,
        diagnostics={"evaluations": obj.calls,
                     "optimiser": "Newton steps from the start" if res is None else str(res.message),
                     "wall_time_s": time.perf_counter() - wall0,
                     "cpu_time_s": time.process_time() - cpu0,
                     "start": dict(zip(params.names, params.start.tolist()))},
    )
