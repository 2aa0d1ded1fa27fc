"""Linearised renewal equation for escape noise, compiled over frequencies.

For an input ``mu + eps exp(s t)`` (``s`` the Laplace variable, 1/ms; ``s =
2 pi i f / 1000`` for a frequency ``f`` in Hz) the rate modulation of an
escape-noise population is ``eps * A0 * Q(s) / (1 - P_hat(s))`` (Gerstner
2000, Neural Comput. 12:43) with

.. math::
    Q(s) = \\int_0^\\infty S_0(a)\\,[h'(a) U(a) - h_0(a) J(a)]\\,da, \\qquad
    J(a) = \\int_0^a h'(a') U(a') e^{-s (a - a')} da', \\qquad
    \\hat P(s) = \\int_0^\\infty h_0 S_0 e^{-s a} da,

where ``U`` solves ``dU/da = (F'(u_0) U + 1)/tau_m - s U`` after the
refractory period (0 before).  On a uniform age grid ``U`` takes exact steps
for piecewise-constant coefficients, ``J`` is carried as ``J_{k+1} =
exp(-s da) J_k + trapezoid`` (no growing phase factors, so complex ``s`` is
safe) and the integrals use the trapezoidal rule.  Past the age ``a_c`` where
the free trajectory has converged (hazard ``h_c``, slope ``h'_c`` and
``F'`` constant) every integral is continued in closed form:
``S_0 = S_c exp(-h_c x)``, ``U = U_inf + (U_c - U_inf) exp(g x)`` with ``g =
F'/tau_m - s``, ``U_inf = -1/(tau_m g)``, and ``J`` the matching solution of
``dJ/dx = h'_c U - s J``; so long, low-rate tails cost nothing.
"""

from __future__ import annotations

import cmath
import math

import numba
import numpy as np

from ..model._kernels import NO_REFCOUNT

#: Below |g da| < this the exact-step weight (exp(g da) - 1)/g uses its series.
SERIES_BELOW = 1e-6


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def _tail(s, sc, hc, huc, gslope, tau_m, u_c, j_c):  # pragma: no cover - compiled
    """Closed-form contributions (Q, P_hat without phase) of ages beyond the grid."""
    g = gslope - s
    u_inf = -1.0 / (tau_m * g)
    du = u_c - u_inf
    if s == 0.0:
        # J(x) = J_c + h' U_inf x + h' dU (exp(g x) - 1)/g
        q = huc * u_inf / hc + huc * du / (hc - g)
        q -= hc * (j_c / hc + huc * u_inf / (hc * hc) + huc * du / g * (1.0 / (hc - g) - 1.0 / hc))
        return sc * q, sc * hc / hc
    jp_inf = huc * u_inf / s
    jp_du = huc * du / (g + s)
    q = huc * u_inf / hc + huc * du / (hc - g)
    q -= hc * (jp_inf / hc + jp_du / (hc - g) + (j_c - jp_inf - jp_du) / (hc + s))
    return sc * q, sc * hc / (hc + s)


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def _renewal_sweep(s_arr, tref, da, tau_m, hu, h0, surv, gslope, e_slope, with_tail, tail_gslope,
                   out):  # pragma: no cover - compiled
    """out[i] = (Q, P_hat) for every Laplace variable s_arr[i] (1/ms).

    The grid starts at the end of the refractory period ``tref`` (ms), where U = J = 0;
    ``e_slope = exp(gslope * da)`` (the membrane factor of a step, frequency-independent).
    """
    n = hu.shape[0]
    for i in range(s_arr.shape[0]):
        s = s_arr[i]
        z = cmath.exp(-s * da)
        u = 0.0 + 0.0j
        j = 0.0 + 0.0j
        phase = cmath.exp(-s * tref)
        f_prev = 0.0 + 0.0j  # h' U at the previous node (U = 0 at the end of the refractory period)
        q = 0.0 + 0.0j
        p = 0.5 * da * h0[0] * surv[0] * phase
        for k in range(n - 1):
            g = gslope[k] - s
            x = g * da
            eg = e_slope[k] * z  # exp(g da) without a complex exponential
            g2 = g.real * g.real + g.imag * g.imag
            if g2 * da * da < SERIES_BELOW * SERIES_BELOW:
                phi = da * (1.0 + 0.5 * x)
            else:
                phi = (eg - 1.0) * (g.conjugate() * (1.0 / g2))  # (exp(g da) - 1)/g
            u = eg * u + phi / tau_m
            f_new = hu[k + 1] * u
            j = z * j + 0.5 * da * (f_new + z * f_prev)
            f_prev = f_new
            phase *= z
            w = da if k + 1 < n - 1 else 0.5 * da
            q += w * surv[k + 1] * (f_new - h0[k + 1] * j)
            p += w * h0[k + 1] * surv[k + 1] * phase
        if with_tail:
            tq, tp = _tail(s, surv[n - 1], h0[n - 1], hu[n - 1], tail_gslope, tau_m, u, j)
            q += tq
            p += tp * phase
        out[i, 0] = q
        out[i, 1] = p


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def _laplace_uniform(s_arr, a0, da, fs, out):  # pragma: no cover - compiled
    """out[i, m] = sum_k fs[m, k] exp(-s_i (a0 + k da)) (weights already in ``fs``); phases by recursion."""
    n = fs.shape[1]
    for i in range(s_arr.shape[0]):
        s = s_arr[i]
        z = cmath.exp(-s * da)
        for m in range(fs.shape[0]):
            phase = cmath.exp(-s * a0)
            acc = 0.0 + 0.0j
            for k in range(n):
                acc += fs[m, k] * phase
                phase *= z
            out[i, m] = acc


def free_trajectory(neuron, mu: float, ages: np.ndarray) -> np.ndarray:
    """Potential (mV) after reset at constant drive ``mu``, held at reset while refractory."""
    t_free = np.maximum(ages - neuron.refractory, 0.0)
    if neuron.code == 0:  # LIF: closed form
        target = neuron.rest + mu
        return target + (neuron.reset - target) * np.exp(-t_free / neuron.tau_m)
    if neuron.code == 3:  # PIF
        return neuron.reset + mu * t_free / neuron.tau_m
    from scipy.integrate import solve_ivp

    free_ages = t_free[t_free > 0]
    u = np.full(ages.shape, float(neuron.reset))
    if free_ages.size:
        sol = solve_ivp(lambda a, y: (neuron.drift(y[0]) + mu) / neuron.tau_m, (0.0, float(free_ages[-1])),
                        [float(neuron.reset)], t_eval=free_ages, rtol=1e-11, atol=1e-11, method="LSODA")
        if sol.status != 0 or sol.y.shape[1] != free_ages.size:
            raise ValueError(f"the free membrane trajectory at `mu` = {mu!r} mV could not be integrated")
        u[t_free > 0] = sol.y[0]
    return u


def adapted_trajectory(neuron, mu: float, ages: np.ndarray, z0) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Trajectory after a spike that left the adaptation ``z0`` (mV), at constant drive ``mu`` (mV).

    Components without subthreshold coupling decay as ``z0 exp(-age/tau)`` (also while refractory);
    the potential, held at reset while refractory, is integrated with scipy's LSODA (rtol 1e-11)
    under the summed currents.  Returns the potential (mV), the summed threshold shift (mV) and the
    components (mV, shape ``(K, n)``) at ``ages`` (ms).
    """
    from scipy.integrate import solve_ivp

    comps = neuron.adaptation
    if any(a.coupling_value != 0.0 for a in comps):
        raise ValueError("the escape-noise linear response supports adaptation without subthreshold "
                         "`coupling` only")
    taus = np.array([a.tau for a in comps])
    current = np.array([a.kind == 0 for a in comps])
    z0 = np.asarray(z0, dtype=float)
    z = z0[:, None] * np.exp(-ages[None, :] / taus[:, None])
    shift = z[~current].sum(axis=0)
    t_free = ages - neuron.refractory
    u = np.full(ages.shape, float(neuron.reset))
    free = t_free > 0
    if np.any(free):
        zc, tc = z0[current], taus[current]

        def rhs(t, y):
            w = float(np.sum(zc * np.exp(-(t + neuron.refractory) / tc)))
            return [(float(neuron.drift(y[0])) + mu - w) / neuron.tau_m]

        sol = solve_ivp(rhs, (0.0, float(t_free[free][-1])), [float(neuron.reset)], t_eval=t_free[free],
                        rtol=1e-11, atol=1e-11, method="LSODA")
        if sol.status != 0 or sol.y.shape[1] != int(free.sum()):
            raise ValueError(f"the adapted membrane trajectory at `mu` = {mu!r} mV could not be integrated")
        u[free] = sol.y[0]
    return u, shift, z
