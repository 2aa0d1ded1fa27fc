"""Compiled recurrent input of the mean-field integrator: delayed, filtered rates to drive and noise.

:func:`block_inputs` computes, for a block of steps whose delayed input is already known, every
pathway's delayed rate (linear between step midpoints), its exponential filter (exact for that
piecewise-linear input), and each cohort's drive, noise amplitude, effective boundary shift and
the drive seen by its solver (with the moving-boundary term); :func:`combine` does the last part
for one boundary.  The arithmetic is that of the interpreted loop it replaced, operation for
operation, so the results are the same bit for bit (see :mod:`popdens.network.integrate` for the
equations).  Per step and pathway this is a few dozen floating-point operations: interpreted,
it took more time than the Fokker--Planck steps it feeds.
"""

from __future__ import annotations

import math

import numba

from ..model._kernels import NO_REFCOUNT
from .circuit import HZ_TO_PER_MS

__all__ = ["block_inputs", "combine"]


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def combine(ext_mu, ext_var, ext_fw, col, s, tgt, cmean, cvar, root_tau, filtered, root_tau_m, half_alpha,
            mu, sg, shift):  # pragma: no cover - compiled
    """Drive ``mu`` (mV), noise ``sg`` (mV) and boundary shift ``shift`` (mV) of every cohort at one boundary.

    ``ext_*[:, col]`` is the external part, ``s`` the filtered rate of each pathway (1/ms).
    """
    nk = mu.shape[0]
    for k in range(nk):
        mu[k] = ext_mu[k, col]
        sg[k] = ext_var[k, col]  # the variance until the square root below
        shift[k] = ext_fw[k, col]  # the filter weight until the division below
    for q in range(s.shape[0]):
        k = tgt[q]
        mu[k] += cmean[q] * s[q]
        sg[k] += cvar[q] * s[q]
        shift[k] += cvar[q] * s[q] * root_tau[q]
    for k in range(nk):
        sg[k] = math.sqrt(max(sg[k], 0.0))
        if filtered[k] and sg[k] > 0:
            shift[k] = half_alpha * shift[k] / (sg[k] * root_tau_m[k])
        else:
            shift[k] = 0.0


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def block_inputs(j, nb, dt, rate, src, tgt, delay, tau, decay, r0, s, a_prev, cmean, cvar, root_tau,
                 ext_mu, ext_var, ext_fw, filtered, root_tau_m, half_alpha, slope, tau_m, shift0,
                 mus, sgs, shifts, mus_eff, s_rec, mu, sg, shift):  # pragma: no cover - compiled
    """Inputs at the boundaries ``j + 1 .. j + nb`` from the rates (Hz) of the ``j`` completed steps.

    Updates the filter states ``s`` and the last delayed rates ``a_prev`` (1/ms) in place and writes
    columns ``j + 1 .. j + nb`` of ``mus``, ``sgs``, ``shifts`` (mV), ``mus_eff`` (mV, the drive
    with the moving-boundary term ``slope (shift - shift0) - tau_m d shift/dt``) and ``s_rec``
    (1/ms, every pathway's filtered delayed rate, for inputs that are not current synapses);
    ``mu``, ``sg``, ``shift`` are scratch of one value per cohort.
    """
    nk = mu.shape[0]
    last = j - 1
    for b in range(nb):
        t1 = (j + b + 1) * dt
        for q in range(s.shape[0]):
            # delayed rate: linear between step midpoints, held beyond the last known one
            x = (t1 - delay[q]) / dt - 0.5
            if x >= last:
                a1 = rate[src[q], last] * HZ_TO_PER_MS if last >= 0 else r0[q]
            else:
                i = int(math.floor(x))
                w = x - i
                lo = rate[src[q], i] * HZ_TO_PER_MS if i >= 0 else r0[q]
                hi = rate[src[q], i + 1] * HZ_TO_PER_MS if i + 1 >= 0 else r0[q]
                a1 = (1.0 - w) * lo + w * hi
            # exponential filter, exact for the input linear from a_prev to a1 over the step
            if tau[q] <= 0.0:
                s[q] = a1
            else:
                a0 = a_prev[q]
                sl = (a1 - a0) / dt
                s[q] = a1 - tau[q] * sl + (s[q] - a0 + tau[q] * sl) * decay[q]
            a_prev[q] = a1
            s_rec[q, j + b + 1] = s[q]
        i1 = j + b + 1
        combine(ext_mu, ext_var, ext_fw, i1, s, tgt, cmean, cvar, root_tau, filtered, root_tau_m, half_alpha,
                mu, sg, shift)
        for k in range(nk):
            mus[k, i1] = mu[k]
            sgs[k, i1] = sg[k]
            shifts[k, i1] = shift[k]
            mus_eff[k, i1] = mu[k] + slope[k] * (shift[k] - shift0[k]) - tau_m[k] * (shift[k] - shifts[k, i1 - 1]) / dt
