"""Stationary rate of the diffusive LIF: the Siegert formula, evaluated stably.

With ``tau_m du = (-(u - rest) + mu) dt + sigma sqrt(tau_m) dW``, threshold
``theta``, reset ``u_r`` and absolute refractory period ``tau_ref`` the
stationary rate is (Siegert 1951; Brunel & Hakim 1999, Neural Comput. 11:1621)

.. math::
    \\frac{1}{\\nu} = \\tau_{ref} + \\tau_m\\sqrt{\\pi}\\int_{y_r}^{y_\\theta}
        e^{x^2}\\,(1 + \\mathrm{erf}\\,x)\\,dx,\\qquad
    y_\\theta = \\frac{\\theta - rest - \\mu}{\\sigma},\\quad
    y_r = \\frac{u_r - rest - \\mu}{\\sigma}.

The integrand is ``erfcx(-x)``.  The integral is split where its character
changes and each part is mapped so that a fixed Gauss--Legendre rule,
vectorised over the drives, keeps full relative accuracy:

* ``x <= -1``: ``x = -e^s``; the integrand becomes ``erfcx(e^s) e^s``, which
  tends smoothly to ``1/sqrt(pi)``, so very negative ``y_r`` (rates near the
  refractory ceiling) cost nothing extra;
* ``-1 <= x <= 1``: directly;
* ``x >= 1``: ``w = y_theta^2 - x^2`` with the factor ``exp(y_theta^2)`` kept
  apart, so the growth ``exp(x^2)`` of low-rate regimes never overflows and
  rates down to the float64 underflow keep their relative accuracy.

Everything is in ms and mV here; rates in 1/ms (the public layer converts).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import erfc, erfcx

__all__ = ["siegert_rate", "siegert_slopes", "siegert_integrand"]

_SQRT_PI = math.sqrt(math.pi)
#: Gauss--Legendre nodes per panel (exact for polynomials of degree 47).
NODES_PER_PANEL = 24
#: Panel width in s = log(-x) on the x <= -1 part: the integrand varies on a
#: scale of ~1 in s, so 24 nodes per 2 units give round-off accuracy.
S_PANEL = 2.0
#: Breakpoints in w = y_theta^2 - x^2 on the x >= 1 part; the weight e^{-w}
#: beyond w = 64 is below 1.6e-28, negligible at double precision.
W_BREAKS = np.array([0.0, 0.25, 1.0, 2.5, 5.0, 9.0, 15.0, 24.0, 36.0, 50.0, 64.0])

_GL_X, _GL_W = np.polynomial.legendre.leggauss(NODES_PER_PANEL)


def siegert_integrand(x):
    """``exp(x^2) (1 + erf x)`` = ``erfcx(-x)``, vectorised."""
    return erfcx(-np.asarray(x, dtype=float))


def _gl(a, b, f):
    """Gauss--Legendre integral of ``f`` over ``[a, b]`` (arrays of the same shape), one panel."""
    half = 0.5 * (b - a)
    mid = 0.5 * (b + a)
    x = mid[..., None] + half[..., None] * _GL_X
    return half * (f(x) @ _GL_W)


def _negative_part(a, b):
    """Integral of erfcx(-x) over [a, b] with a <= b <= -1 (zero where a == b)."""
    s_lo = np.log(-b)
    s_hi = np.log(-a)
    span = s_hi - s_lo
    n_panels = max(1, int(math.ceil(float(np.max(span, initial=0.0)) / S_PANEL)))
    total = np.zeros_like(a)
    f = lambda s: erfcx(np.exp(s)) * np.exp(s)  # noqa: E731
    for k in range(n_panels):
        lo = s_lo + span * (k / n_panels)
        hi = s_lo + span * ((k + 1) / n_panels)
        total += _gl(lo, hi, f)
    return total


def _central_part(a, b):
    """Integral of erfcx(-x) over [a, b] within [-1, 1]."""
    return _gl(a, b, lambda x: erfcx(-x))


def _f_w(w, y2):
    """Integrand in w = y_theta^2 - x^2 without the factor exp(y_theta^2)."""
    x = np.sqrt(np.maximum(y2[:, None] - w, 1.0))
    return np.exp(-w) * (2.0 - erfc(x)) / (2.0 * x)


def _positive_part_scaled(a, b, yth):
    """exp(-yth^2) times the integral of erfcx(-x) over [a, b] with 1 <= a <= b <= yth."""
    # x = sqrt(yth^2 - w): dx = -dw / (2x); integrand exp(x^2)(2 - erfc x)
    # -> exp(yth^2) * e^{-w} (2 - erfc x) / (2x) dw, w from yth^2 - b^2 to yth^2 - a^2
    y2 = yth * yth
    w_lo = (yth - b) * (yth + b)
    w_hi = (yth - a) * (yth + a)
    total = np.zeros_like(a)
    # the last panel runs from the last breakpoint to w_hi (e^{-w} < 1.6e-28 there)
    edges = list(W_BREAKS) + [np.inf]
    for k in range(len(edges) - 1):
        lo = np.clip(edges[k], w_lo, w_hi)
        hi = np.clip(edges[k + 1], w_lo, w_hi)
        used = hi > lo
        if np.all(used):
            total += _gl(lo, hi, lambda w: _f_w(w, y2))
        elif np.any(used):
            total[used] += _gl(lo[used], hi[used], lambda w, y=y2[used]: _f_w(w, y))
    return total


def _on_rows(mask, fn, *arrays):
    """Evaluate ``fn`` only on the rows where ``mask`` holds (zero elsewhere)."""
    out = np.zeros(mask.shape)
    if np.any(mask):
        out[mask] = fn(*(arr[mask] for arr in arrays))
    return out


def _integral_parts(yr, yth):
    """(I_low, J_high): integral = I_low + exp(yth^2) * J_high, with no overflow."""
    yr = np.asarray(yr, dtype=float)
    yth = np.asarray(yth, dtype=float)
    a1, b1 = np.minimum(yr, -1.0), np.minimum(yth, -1.0)
    i_low = _on_rows(a1 < b1, _negative_part, a1, b1)
    a2, b2 = np.clip(yr, -1.0, 1.0), np.clip(yth, -1.0, 1.0)
    i_low += _on_rows(a2 < b2, _central_part, a2, b2)
    a3, b3 = np.maximum(yr, 1.0), np.maximum(yth, 1.0)
    j_high = _on_rows(a3 < b3, _positive_part_scaled, a3, b3, b3)
    return i_low, j_high


def siegert_rate(mu, sigma, tau_m, threshold, reset, refractory, rest=0.0):
    """Stationary rate (1/ms) of the diffusive LIF, vectorised over ``mu`` and ``sigma``.

    Parameters are in mV and ms.  Accurate to ~1e-14 relative for rates from
    the refractory ceiling down to the float64 underflow (rates below
    ~1e-300/ms return 0).
    """
    mu, sigma = np.broadcast_arrays(np.asarray(mu, dtype=float), np.asarray(sigma, dtype=float))
    yth = (threshold - rest - mu) / sigma
    yr = (reset - rest - mu) / sigma
    with np.errstate(under="ignore"):  # e^{-w} underflows harmlessly in the far tail
        i_low, j_high = _integral_parts(yr.ravel(), yth.ravel())
    yth_f = yth.ravel()
    out = np.empty(yth_f.shape)
    hi = yth_f > 1.0
    lo = ~hi
    out[lo] = 1.0 / (refractory + tau_m * _SQRT_PI * i_low[lo])
    # divide numerator and denominator by exp(yth^2): no overflow, underflows cleanly to 0
    with np.errstate(under="ignore"):
        e = np.exp(-yth_f[hi] ** 2)
        out[hi] = e / ((refractory + tau_m * _SQRT_PI * i_low[hi]) * e + tau_m * _SQRT_PI * j_high[hi])
    return out.reshape(mu.shape)


def siegert_slopes(mu, sigma, tau_m, threshold, reset, refractory, rest=0.0):
    """Rate (1/ms) and its derivatives d(rate)/d(mu), d(rate)/d(sigma) (1/(ms mV)).

    Exact derivatives of the Siegert formula: only the limits of the integral
    depend on ``mu`` and ``sigma``, so
    ``d nu/d mu = nu^2 tau_m sqrt(pi) (f(y_theta) - f(y_r)) / sigma`` and
    ``d nu/d sigma = nu^2 tau_m sqrt(pi) (y_theta f(y_theta) - y_r f(y_r)) / sigma``
    with ``f = erfcx(-x)``; the products are formed as ``(nu f)`` to avoid overflow.
    """
    mu, sigma = np.broadcast_arrays(np.asarray(mu, dtype=float), np.asarray(sigma, dtype=float))
    nu = siegert_rate(mu, sigma, tau_m, threshold, reset, refractory, rest)
    yth = (threshold - rest - mu) / sigma
    yr = (reset - rest - mu) / sigma
    with np.errstate(over="ignore", invalid="ignore", under="ignore"):
        # nu * f(y) stays finite: f(yth) ~ 2 exp(yth^2) while nu ~ exp(-yth^2)
        log_f_th = np.where(yth > 0.0, yth * yth + np.log(2.0 - erfc(np.abs(yth))), np.log(erfcx(-yth)))
        nf_th = np.where(nu > 0.0, np.exp(np.log(np.maximum(nu, 1e-320)) + log_f_th), 0.0)
        nf_r = nu * erfcx(-yr)
        c = tau_m * _SQRT_PI / sigma
        d_mu = c * nu * (nf_th - nf_r)
        d_sigma = c * nu * (yth * nf_th - yr * nf_r)
    return nu, d_mu, d_sigma
