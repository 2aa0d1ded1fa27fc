"""Renewal theory of escape-noise neurons at constant drive (compiled).

After a spike a neuron is held at reset for ``tau_ref`` and then follows the
free (deterministic) trajectory ``u0(a)`` at constant drive ``mu``; it fires
with hazard ``h(a) = rho(u0(a), du0/da)``.  The survivor function is
``S(a) = exp(-int_0^a h)``, the ISI density ``P = h S``, and (renewal theory,
e.g. Cox 1962, Renewal Theory, ch. 1; Gerstner & Kistler 2002, Spiking Neuron
Models, ch. 5)

.. math:: \\nu = 1/\\int_0^\\infty S\\,da,\\qquad
          E[T^2] = 2\\int_0^\\infty a\\,S\\,da,\\qquad
          \\bar u = \\nu\\int_0^\\infty u_0(a)\\,S(a)\\,da.

The integrals are carried as extra components of one ODE integrated with an
adaptive embedded Runge--Kutta 5(4) pair (Dormand & Prince 1980, J. Comput.
Appl. Math. 6:19), so long tails cost few steps.  Two modes:

* **age mode**: independent variable the age.  LIF and PIF trajectories use
  their closed forms; other drifts integrate ``u`` as a component.  The free
  trajectory of a one-dimensional autonomous ODE is monotone; once it has
  converged to its fixed point (``|du/da| tau_m`` below ``U_CONVERGED``) the
  hazard is the constant ``h_inf`` and the tails are added analytically:
  ``int_a^inf S = S(a)/h_inf``, ``int_a^inf t S = S(a)(a/h_inf + 1/h_inf^2)``.
* **potential mode**, for models with a spike cut-off whose trajectory reaches
  it (``F(u) + mu > 0`` on ``[reset, cutoff]``): independent variable ``u``,
  with ``da/du = tau_m/(F(u) + mu)``, which stays smooth as the potential
  diverges.  At the cut-off the survivors fire deterministically: the ISI
  distribution has an atom of mass ``S(a*)`` at the arrival age ``a*``.

Units: ms, mV; hazards from ``hazard_value`` are in Hz and converted here.
"""

from __future__ import annotations

import math

import numba

from ..model._kernels import MS_TO_S, NO_REFCOUNT, drift_value, hazard_value
from ..model.neurons import CODE_LIF, CODE_PIF

__all__ = ["renewal_moments", "reaches_cutoff", "RENEWAL_TOL"]

#: Relative local tolerance of the integrals (and absolute, for the integrated hazard
#: weighted by the survivor function).
RENEWAL_TOL = 1e-11
#: The trajectory counts as converged when |du/da| * tau_m (mV) falls below this.
U_CONVERGED = 1e-10
#: Survivor level below which the remaining tail is negligible.
S_FLOOR = 1e-18
#: Ages beyond this (ms) are treated as the converged tail.
MAX_AGE = 1e13
#: Age steps of integrated (non-closed-form) trajectories stay below this many local
#: relaxation times tau_m/|F'(u)|, inside the real stability interval of the
#: Dormand--Prince pair (about 3.3), so deviations from the fixed point decay.
STABLE_STEPS = 2.0
#: Step limit per trajectory.
MAX_STEPS = 200_000
N_COMP = 5

STATUS_OK, STATUS_STEPS, STATUS_NONFINITE = 0, 1, 2

# Dormand--Prince 5(4) tableau
_C2, _C3, _C4, _C5 = 1.0 / 5.0, 3.0 / 10.0, 4.0 / 5.0, 8.0 / 9.0
_A21 = 1.0 / 5.0
_A31, _A32 = 3.0 / 40.0, 9.0 / 40.0
_A41, _A42, _A43 = 44.0 / 45.0, -56.0 / 15.0, 32.0 / 9.0
_A51, _A52, _A53, _A54 = 19372.0 / 6561.0, -25360.0 / 2187.0, 64448.0 / 6561.0, -212.0 / 729.0
_A61, _A62, _A63, _A64, _A65 = 9017.0 / 3168.0, -355.0 / 33.0, 46732.0 / 5247.0, 49.0 / 176.0, -5103.0 / 18656.0
_B1, _B3, _B4, _B5, _B6 = 35.0 / 384.0, 500.0 / 1113.0, 125.0 / 192.0, -2187.0 / 6784.0, 11.0 / 84.0
# error coefficients: 5th-order minus 4th-order weights
_E1 = _B1 - 5179.0 / 57600.0
_E3 = _B3 - 7571.0 / 16695.0
_E4 = _B4 - 393.0 / 640.0
_E5 = _B5 + 92097.0 / 339200.0
_E6 = _B6 - 187.0 / 2100.0
_E7 = -1.0 / 40.0


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def _trajectory(code, p, ops, args, tau_m, reset, tau_ref, mu, a, y0, stack, xbuf):  # pragma: no cover
    """(u, du/da) at age ``a`` in age mode (closed form for LIF/PIF, else the state ``y0``)."""
    if code == CODE_LIF:
        target = p[0] + mu
        u = target + (reset - target) * math.exp(-(a - tau_ref) / tau_m)
        return u, (target - u) / tau_m
    if code == CODE_PIF:
        return reset + mu * (a - tau_ref) / tau_m, mu / tau_m
    return y0, (drift_value(code, p, ops, args, y0, stack, xbuf) + mu) / tau_m


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def _rhs(mode, code, p, ops, args, tau_m, reset, tau_ref, mu, hcode, hp, hops, hargs, theta,
         x, y, out, stack, xbuf):  # pragma: no cover - compiled
    if mode == 0:
        u, du = _trajectory(code, p, ops, args, tau_m, reset, tau_ref, mu, x, y[0], stack, xbuf)
        h = hazard_value(hcode, hp, hops, hargs, u, theta, du, stack, xbuf) * MS_TO_S
        s = math.exp(-y[1])
        out[0] = du
        out[1] = h
        out[2] = s
        out[3] = x * s
        out[4] = u * s
    else:
        v = (drift_value(code, p, ops, args, x, stack, xbuf) + mu) / tau_m
        dadu = 1.0 / v
        h = hazard_value(hcode, hp, hops, hargs, x, theta, v, stack, xbuf) * MS_TO_S
        s = math.exp(-y[1])
        out[0] = dadu
        out[1] = h * dadu
        out[2] = s * dadu
        out[3] = y[0] * s * dadu
        out[4] = x * s * dadu


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def renewal_moments(code, p, ops, args, tau_m, reset, boundary, tau_ref, mu,
                    hcode, hp, hops, hargs, theta, mode,
                    work, rec, record, stack, xbuf):  # pragma: no cover - compiled
    """Integrate one free trajectory; returns the renewal integrals.

    Parameters are in ms and mV.  ``mode`` is 0 (age) or 1 (potential, the
    trajectory reaches ``boundary``).  ``work`` is scratch of shape (10, 5);
    with ``record`` each accepted point is written to ``rec`` (shape (m, 5):
    age, u, integrated hazard, du/da, hazard in 1/ms), up to its length.

    Returns ``(m0, m1, mu_int, a_end, s_end, atom, n_rec, status)``:
    ``m0 = int S`` (ms), ``m1 = int a S`` (ms^2), ``mu_int = int u S`` (ms mV),
    including the refractory part and the analytic tail; ``a_end`` and
    ``s_end`` the age and survivor where integration stopped; ``atom`` True
    when the survivors fire deterministically at the cut-off at ``a_end``.
    """
    y = work[0]
    k1 = work[1]
    k2 = work[2]
    k3 = work[3]
    k4 = work[4]
    k5 = work[5]
    k6 = work[6]
    k7 = work[7]
    yt = work[8]
    yn = work[9]
    cap = rec.shape[0]
    n_rec = 0
    u_scale = abs(reset) + abs(theta) + abs(boundary - reset)
    # start: end of the refractory period, at reset
    if mode == 0:
        x = tau_ref
        x_end = MAX_AGE
        y[0] = reset
        hstep = 0.01 * tau_m
    else:
        x = reset
        x_end = boundary
        y[0] = tau_ref
        hstep = 1e-3 * (boundary - reset)
    y[1] = 0.0
    y[2] = tau_ref
    y[3] = 0.5 * tau_ref * tau_ref
    y[4] = tau_ref * reset
    atom = False
    status = STATUS_OK
    if record and cap > 0:
        u0, du0 = reset, 0.0
        if mode == 0:
            u0, du0 = _trajectory(code, p, ops, args, tau_m, reset, tau_ref, mu, x, y[0], stack, xbuf)
        else:
            du0 = (drift_value(code, p, ops, args, x, stack, xbuf) + mu) / tau_m
        rec[0, 0] = tau_ref
        rec[0, 1] = u0
        rec[0, 2] = 0.0
        rec[0, 3] = du0
        rec[0, 4] = hazard_value(hcode, hp, hops, hargs, u0, theta, du0, stack, xbuf) * MS_TO_S
        n_rec = 1
    _rhs(mode, code, p, ops, args, tau_m, reset, tau_ref, mu, hcode, hp, hops, hargs, theta, x, y, k1, stack, xbuf)
    done = False
    for _ in range(MAX_STEPS):
        if x + hstep >= x_end:
            hstep = x_end - x
        # stages
        for i in range(N_COMP):
            yt[i] = y[i] + hstep * _A21 * k1[i]
        _rhs(mode, code, p, ops, args, tau_m, reset, tau_ref, mu, hcode, hp, hops, hargs, theta, x + _C2 * hstep, yt, k2, stack, xbuf)
        for i in range(N_COMP):
            yt[i] = y[i] + hstep * (_A31 * k1[i] + _A32 * k2[i])
        _rhs(mode, code, p, ops, args, tau_m, reset, tau_ref, mu, hcode, hp, hops, hargs, theta, x + _C3 * hstep, yt, k3, stack, xbuf)
        for i in range(N_COMP):
            yt[i] = y[i] + hstep * (_A41 * k1[i] + _A42 * k2[i] + _A43 * k3[i])
        _rhs(mode, code, p, ops, args, tau_m, reset, tau_ref, mu, hcode, hp, hops, hargs, theta, x + _C4 * hstep, yt, k4, stack, xbuf)
        for i in range(N_COMP):
            yt[i] = y[i] + hstep * (_A51 * k1[i] + _A52 * k2[i] + _A53 * k3[i] + _A54 * k4[i])
        _rhs(mode, code, p, ops, args, tau_m, reset, tau_ref, mu, hcode, hp, hops, hargs, theta, x + _C5 * hstep, yt, k5, stack, xbuf)
        for i in range(N_COMP):
            yt[i] = y[i] + hstep * (_A61 * k1[i] + _A62 * k2[i] + _A63 * k3[i] + _A64 * k4[i] + _A65 * k5[i])
        _rhs(mode, code, p, ops, args, tau_m, reset, tau_ref, mu, hcode, hp, hops, hargs, theta, x + hstep, yt, k6, stack, xbuf)
        for i in range(N_COMP):
            yn[i] = y[i] + hstep * (_B1 * k1[i] + _B3 * k3[i] + _B4 * k4[i] + _B5 * k5[i] + _B6 * k6[i])
        _rhs(mode, code, p, ops, args, tau_m, reset, tau_ref, mu, hcode, hp, hops, hargs, theta, x + hstep, yn, k7, stack, xbuf)
        # error norm: the integrated hazard matters through S; the integrals relatively
        s_now = math.exp(-y[1])
        err = 0.0
        for i in range(N_COMP):
            e = hstep * (_E1 * k1[i] + _E3 * k3[i] + _E4 * k4[i] + _E5 * k5[i] + _E6 * k6[i] + _E7 * k7[i])
            if i == 0:
                if mode == 0:
                    sc = U_CONVERGED * 10.0 + RENEWAL_TOL * abs(yn[0])
                else:
                    sc = RENEWAL_TOL * (abs(yn[0]) + tau_m)
            elif i == 1:
                sc = RENEWAL_TOL / max(s_now, 1e-300)
            elif i == 4:
                # the potential integral may pass through zero: scale by |u| ~ u_scale times int S
                sc = RENEWAL_TOL * (abs(yn[4]) + yn[2] * u_scale) + 1e-300
            else:
                sc = RENEWAL_TOL * abs(yn[i]) + 1e-300
            r = abs(e) / sc
            if not (r <= 1e300):  # NaN or inf: reject
                r = 1e300
            if r > err:
                err = r
        if err <= 1.0:
            x = x + hstep
            for i in range(N_COMP):
                y[i] = yn[i]
                k1[i] = k7[i]
            if record and n_rec < cap:
                if mode == 0:
                    uu, dd = _trajectory(code, p, ops, args, tau_m, reset, tau_ref, mu, x, y[0], stack, xbuf)
                    rec[n_rec, 0] = x
                else:
                    uu = x
                    dd = (drift_value(code, p, ops, args, x, stack, xbuf) + mu) / tau_m
                    rec[n_rec, 0] = y[0]
                rec[n_rec, 1] = uu
                rec[n_rec, 2] = y[1]
                rec[n_rec, 3] = dd
                rec[n_rec, 4] = hazard_value(hcode, hp, hops, hargs, uu, theta, dd, stack, xbuf) * MS_TO_S
                n_rec += 1
            s = math.exp(-y[1])
            if mode == 1:
                if x >= x_end:
                    atom = s > 0.0
                    done = True
                    break
                if s < S_FLOOR:
                    done = True
                    break
            else:
                uu, dd = _trajectory(code, p, ops, args, tau_m, reset, tau_ref, mu, x, y[0], stack, xbuf)
                if s < S_FLOOR or abs(dd) * tau_m < U_CONVERGED or x >= x_end:
                    hinf = hazard_value(hcode, hp, hops, hargs, uu, theta, dd, stack, xbuf) * MS_TO_S
                    if s > 0.0:
                        if hinf > 0.0:
                            y[2] += s / hinf
                            y[3] += s * (x / hinf + 1.0 / (hinf * hinf))
                            y[4] += s * uu / hinf
                        else:
                            y[2] = math.inf
                            y[3] = math.inf
                            y[4] = math.inf
                    done = True
                    break
            fac = 0.9 * err ** -0.2 if err > 0.0 else 5.0
            hstep *= min(5.0, max(0.2, fac))
            if mode == 0 and code != CODE_LIF and code != CODE_PIF:
                eps = 1e-4 * (1.0 + abs(y[0]))
                slope = (drift_value(code, p, ops, args, y[0] + eps, stack, xbuf)
                         - drift_value(code, p, ops, args, y[0] - eps, stack, xbuf)) / (2.0 * eps)
                if abs(slope) > 0.0 and hstep * abs(slope) > STABLE_STEPS * tau_m:
                    hstep = STABLE_STEPS * tau_m / abs(slope)
        else:
            hstep *= max(0.1, 0.9 * err ** -0.25)
            if not (hstep > 0.0):
                status = STATUS_NONFINITE
                break
    if not done and status == STATUS_OK:
        status = STATUS_STEPS
    return y[2], y[3], y[4], (y[0] if mode == 1 else x), math.exp(-y[1]), atom, n_rec, status


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def reaches_cutoff(code, p, ops, args, reset, boundary, mu, n_probe, stack, xbuf):  # pragma: no cover
    """True if ``F(u) + mu > 0`` at ``n_probe`` points spanning ``[reset, boundary]``."""
    for i in range(n_probe + 1):
        u = reset + (boundary - reset) * i / n_probe
        if not (drift_value(code, p, ops, args, u, stack, xbuf) + mu > 0.0):
            return False
    return True


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def renewal_rates(code, p, ops, args, tau_m, reset, boundary, has_cutoff, tau_ref, mus,
                  hcode, hp, hops, hargs, theta, n_probe, out_m0, out_m1, out_mu, out_status,
                  work, rec, stack, xbuf):  # pragma: no cover - compiled
    """Renewal integrals for each drive in ``mus`` (no recording)."""
    for i in range(mus.shape[0]):
        mode = 0
        if has_cutoff and reaches_cutoff(code, p, ops, args, reset, boundary, mus[i], n_probe, stack, xbuf):
            mode = 1
        m0, m1, mi, _, _, _, _, st = renewal_moments(code, p, ops, args, tau_m, reset, boundary, tau_ref, mus[i],
                                                     hcode, hp, hops, hargs, theta, mode, work, rec, False,
                                                     stack, xbuf)
        out_m0[i] = m0
        out_m1[i] = m1
        out_mu[i] = mi
        out_status[i] = st
