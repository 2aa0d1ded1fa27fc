"""Renewal integrals of an escape-noise neuron whose adaptation starts from a given post-spike state (compiled).

After a spike the neuron is held at reset for ``tau_ref`` while its adaptation
components relax; then potential and adaptation follow the deterministic
trajectory at constant drive ``mu`` (mV):

.. math:: \\tau_m \\dot u = F(u) + \\mu - \\sum_{\\rm currents} w_k,\\qquad
          \\tau_k \\dot w_k = a_k (u - u_{\\rm rest}) - w_k,\\qquad
          \\tau_k \\dot\\theta_k = -\\theta_k,

starting from ``u = reset`` and the post-spike state ``z_k`` (mV), with the
hazard ``h(u, threshold + sum theta_k, du/da)``.  Along it the survivor
``S = exp(-H)``, the ISI moments and the adaptation carried into the next
spike are integrated as components of one ODE by an adaptive Dormand--Prince
5(4) pair (Dormand & Prince 1980), as in :mod:`popdens.theory._renewal`:

.. math:: m_0 = \\int_0^\\infty S\\,da,\\quad m_1 = \\int_0^\\infty a S\\,da,\\quad
          m_u = \\int_0^\\infty u S\\,da,\\quad
          J_k = \\int_0^\\infty h S\\, z_k(a)\\,da ,

so ``1/m0`` is the rate of the renewal process, ``2 m_1`` its second moment
and ``J_k`` the mean adaptation with which the neuron reaches its next spike.
Once potential and adaptation have converged (derivatives below
``SETTLED`` tolerances) the hazard is constant and the tails are added in closed form;
when the potential reaches a spike cut-off the survivors fire there.
Units: ms, mV; hazards in Hz converted to 1/ms.
"""

from __future__ import annotations

import math

import numba

from ..model._kernels import MS_TO_S, NO_REFCOUNT, drift_value, hazard_value
from ..model.adaptation import KIND_CURRENT
from ._renewal import (MAX_STEPS, S_FLOOR, STATUS_NONFINITE, STATUS_OK, STATUS_STEPS, _A21, _A31, _A32, _A41, _A42,
                       _A43, _A51, _A52, _A53, _A54, _A61, _A62, _A63, _A64, _A65, _B1, _B3, _B4, _B5, _B6, _C2,
                       _C3, _C4, _C5, _E1, _E3, _E4, _E5, _E6, _E7)

__all__ = ["adapted_renewal", "n_components", "TOL"]

#: Relative local tolerance of the integrals (the integrated hazard weighted by the survivor).
TOL = 1e-10
#: Potential and adaptation count as converged when every |derivative| x time constant (mV) is below
#: this many local error tolerances (the step control lets the potential jitter at ~1 tolerance).
SETTLED = 10.0


def n_components(k: int) -> int:
    """Length of the ODE state for ``k`` adaptation components: u, z_k, H, m0, m1, mu, J_k."""
    return 2 * k + 5


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def _rhs(code, p, ops, args, tau_m, mu, hcode, hp, hops, hargs, theta, kinds, taus, coup, rest,
         a, y, out, stack, xbuf):  # pragma: no cover - compiled
    k = kinds.shape[0]
    u = y[0]
    w = 0.0
    th = 0.0
    for c in range(k):
        if kinds[c] == KIND_CURRENT:
            w += y[1 + c]
            out[1 + c] = (coup[c] * (u - rest) - y[1 + c]) / taus[c]
        else:
            th += y[1 + c]
            out[1 + c] = -y[1 + c] / taus[c]
    du = (drift_value(code, p, ops, args, u, stack, xbuf) + mu - w) / tau_m
    h = hazard_value(hcode, hp, hops, hargs, u, theta + th, du, stack, xbuf) * MS_TO_S
    s = math.exp(-y[k + 1])
    out[0] = du
    out[k + 1] = h
    out[k + 2] = s
    out[k + 3] = a * s
    out[k + 4] = u * s
    for c in range(k):
        out[k + 5 + c] = h * s * y[1 + c]
    return h


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def adapted_renewal(code, p, ops, args, tau_m, reset, boundary, has_cutoff, tau_ref, mu,
                    hcode, hp, hops, hargs, theta, kinds, taus, coup, rest, z0,
                    work, out, stack, xbuf):  # pragma: no cover - compiled
    """Integrate one trajectory from the post-spike adaptation state ``z0`` (mV, shape ``(K,)``).

    ``work`` is scratch of shape ``(10, 2K + 5)``.  Fills ``out`` (shape
    ``(2K + 5,)``) with the final state: ``out[K+2]`` = m0 (ms), ``out[K+3]`` =
    m1 (ms^2), ``out[K+4]`` = m_u (ms mV), ``out[K+5:]`` = J (mV); returns
    the status (``STATUS_OK`` on success).
    """
    k = kinds.shape[0]
    nc = 2 * k + 5
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
    # refractory period: u held at reset, adaptation relaxes in closed form
    y[0] = reset
    for c in range(k):
        target = coup[c] * (reset - rest) if kinds[c] == KIND_CURRENT else 0.0
        y[1 + c] = target + (z0[c] - target) * math.exp(-tau_ref / taus[c])
        y[k + 5 + c] = 0.0
    y[k + 1] = 0.0
    y[k + 2] = tau_ref
    y[k + 3] = 0.5 * tau_ref * tau_ref
    y[k + 4] = tau_ref * reset
    x = tau_ref
    u_scale = abs(reset) + abs(theta) + abs(boundary - reset)
    hstep = 0.01 * tau_m
    _rhs(code, p, ops, args, tau_m, mu, hcode, hp, hops, hargs, theta, kinds, taus, coup, rest, x, y, k1,
         stack, xbuf)
    status = STATUS_STEPS
    for _ in range(MAX_STEPS):
        for i in range(nc):
            yt[i] = y[i] + hstep * _A21 * k1[i]
        _rhs(code, p, ops, args, tau_m, mu, hcode, hp, hops, hargs, theta, kinds, taus, coup, rest,
             x + _C2 * hstep, yt, k2, stack, xbuf)
        for i in range(nc):
            yt[i] = y[i] + hstep * (_A31 * k1[i] + _A32 * k2[i])
        _rhs(code, p, ops, args, tau_m, mu, hcode, hp, hops, hargs, theta, kinds, taus, coup, rest,
             x + _C3 * hstep, yt, k3, stack, xbuf)
        for i in range(nc):
            yt[i] = y[i] + hstep * (_A41 * k1[i] + _A42 * k2[i] + _A43 * k3[i])
        _rhs(code, p, ops, args, tau_m, mu, hcode, hp, hops, hargs, theta, kinds, taus, coup, rest,
             x + _C4 * hstep, yt, k4, stack, xbuf)
        for i in range(nc):
            yt[i] = y[i] + hstep * (_A51 * k1[i] + _A52 * k2[i] + _A53 * k3[i] + _A54 * k4[i])
        _rhs(code, p, ops, args, tau_m, mu, hcode, hp, hops, hargs, theta, kinds, taus, coup, rest,
             x + _C5 * hstep, yt, k5, stack, xbuf)
        for i in range(nc):
            yt[i] = y[i] + hstep * (_A61 * k1[i] + _A62 * k2[i] + _A63 * k3[i] + _A64 * k4[i] + _A65 * k5[i])
        _rhs(code, p, ops, args, tau_m, mu, hcode, hp, hops, hargs, theta, kinds, taus, coup, rest,
             x + hstep, yt, k6, stack, xbuf)
        for i in range(nc):
            yn[i] = y[i] + hstep * (_B1 * k1[i] + _B3 * k3[i] + _B4 * k4[i] + _B5 * k5[i] + _B6 * k6[i])
        h_new = _rhs(code, p, ops, args, tau_m, mu, hcode, hp, hops, hargs, theta, kinds, taus, coup, rest,
                     x + hstep, yn, k7, stack, xbuf)
        s_now = math.exp(-y[k + 1])
        err = 0.0
        for i in range(nc):
            e = hstep * (_E1 * k1[i] + _E3 * k3[i] + _E4 * k4[i] + _E5 * k5[i] + _E6 * k6[i] + _E7 * k7[i])
            if i == 0:
                sc = TOL * (abs(yn[0]) + u_scale)
            elif i <= k:
                sc = TOL * (abs(yn[i]) + 1.0)
            elif i == k + 1:
                sc = TOL / max(s_now, 1e-300)
            elif i == k + 4:
                sc = TOL * (abs(yn[i]) + yn[k + 2] * u_scale) + 1e-300
            elif i >= k + 5:
                sc = TOL * (abs(yn[i]) + 1.0)
            else:
                sc = TOL * abs(yn[i]) + 1e-300
            r = abs(e) / sc
            if not (r <= 1e300):
                r = 1e300
            if r > err:
                err = r
        if err <= 1.0:
            x = x + hstep
            for i in range(nc):
                y[i] = yn[i]
                k1[i] = k7[i]
            s = math.exp(-y[k + 1])
            if has_cutoff and y[0] >= boundary:
                # the survivors fire at the cut-off, carrying their adaptation
                for c in range(k):
                    y[k + 5 + c] += s * y[1 + c]
                status = STATUS_OK
                break
            if s < S_FLOOR:
                status = STATUS_OK
                break
            # converged to within the error the step control allows (the potential may jitter at that level)
            settled = abs(k1[0]) * tau_m < SETTLED * TOL * (abs(y[0]) + u_scale)
            for c in range(k):
                if abs(k1[1 + c]) * taus[c] >= SETTLED * TOL * (abs(y[1 + c]) + 1.0):
                    settled = False
            if settled:
                if h_new > 0.0:
                    y[k + 2] += s / h_new
                    y[k + 3] += s * (x / h_new + 1.0 / (h_new * h_new))
                    y[k + 4] += s * y[0] / h_new
                    for c in range(k):
                        y[k + 5 + c] += s * y[1 + c]
                else:
                    y[k + 2] = math.inf
                    y[k + 3] = math.inf
                    y[k + 4] = math.inf
                status = STATUS_OK
                break
            fac = 0.9 * err ** -0.2 if err > 0.0 else 5.0
            hstep *= min(5.0, max(0.2, fac))
        else:
            hstep *= max(0.1, 0.9 * err ** -0.25)
            if not (hstep > 0.0):
                status = STATUS_NONFINITE
                break
    for i in range(nc):
        out[i] = y[i]
    return status
