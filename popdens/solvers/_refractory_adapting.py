"""Compiled kernels of the refractory-density solver for adapting neurons (quasi-renewal).

Every age bin (and every neuron of the Monte Carlo twin, which shares these
helpers) carries the state of its adaptation components, one row per
component of ``st`` (shape ``(K, n)``): the adaptation currents ``w_k`` (mV)
and the moving-threshold values ``theta_k`` (mV).  Over one step of ``dt``

* a threshold component decays exactly, ``theta <- theta e_k`` with ``e_k =
  exp(-dt/tau_k)``;
* a current decays exactly and relaxes towards ``a_k (u - rest)`` with the
  potential averaged over the step (trapezoid, second order):
  ``w <- w e_k + a_k (1 - e_k) ((u0 + u1)/2 - rest)``; the potential step
  itself sees the drive ``mu - sum w`` linear within the step (the end value
  predicted with the start potential);
* the escape function sees the threshold ``threshold + sum theta`` of the step end.

A spike (at mid-step, the convention of :mod:`popdens.solvers.refractory`)
adds ``kick_k = jump_k exp(-dt/(2 tau_k))``: the jump, decayed over the
half step left.

Closure: an age bin holds neurons whose last spike lies in the same step, and
it carries exactly the effect of that last spike (the kick, decayed with the
bin's age); what differs between its neurons is the adaptation left from their
earlier spikes.  The newborn bin of a step starts with ``kick_k + x_k``, where
``x_k`` stands for the earlier spikes of the neurons that just fired:

* ``"spike-weighted"`` (default): ``x_k`` is the adaptation of the neurons
  that fired, averaged with the probability each bin fired, ``sum_j m_j (1 -
  s_j) st_kj / sum_j m_j (1 - s_j)``: the conditional mean given a spike, so
  the adaptation each neuron carries across its spike is conserved (every bin
  carries the mean adaptation of its neurons, as for the slow variables of the
  conductance-based refractory density of Chizhov & Graham 2007, Phys. Rev. E
  75:011924).
* ``"quasi-renewal"``: ``x_k`` is the population mean ``M_k`` of the
  adaptation (the first-order, mean-field quasi-renewal approximation of Naud
  & Gerstner 2012, PLoS Comput. Biol. 8:e1002711, also used by Schwalger et
  al. 2017, PLoS Comput. Biol. 13:e1005507): the earlier spikes enter through
  the activity history convolved with the kernel, ``tau_k dM_k/dt = a_k (<u>
  - rest) - M_k + jump_k tau_k A(t)``.  It ignores that the neurons that fire
  carry less adaptation than the average, and sets the adapted rate too low
  (measured: 4 % at a 9 % jump of the threshold gap, 8 % at 27 %; see the
  contributor guide).

Both are exact without earlier spikes' effects (``jump = 0`` and ``coupling =
0``: no adaptation at all) and for the last spike's effect at any strength.
``M_k`` is tracked in either case (the population's mean adaptation).
"""

from __future__ import annotations

import math

import numba
import numpy as np

from ..model._kernels import MS_TO_S, NO_REFCOUNT, drift_value, hazard_value, survival
from ..model.adaptation import KIND_CURRENT
from ._age_step import AGE_TOL, _bin_step, _newborn, _refire_survival

__all__ = ["CLOSURES", "adapt_start", "adapt_end", "adapt_sums", "advance_adapting", "stationary_profile"]

#: Closures of the earlier spikes' adaptation (see the module docstring) and their codes.
CLOSURES = {"spike-weighted": 0, "quasi-renewal": 1}


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def adapt_start(kinds, decay, coup, rest, st, p, u0):  # pragma: no cover - compiled
    """``(W0, W1, Theta1)``: summed currents at the step start and predicted end (mV), thresholds at the end (mV).

    Branch-free over the components (a threshold has ``coup = 0`` and kind 1).
    """
    w0 = 0.0
    w1 = 0.0
    th1 = 0.0
    for c in range(kinds.shape[0]):
        x = st[c, p]
        xd = x * decay[c]
        cur = 1.0 - kinds[c]  # KIND_CURRENT = 0, KIND_THRESHOLD = 1
        w0 += cur * x
        w1 += cur * xd + coup[c] * (1.0 - decay[c]) * (u0 - rest)
        th1 += kinds[c] * xd
    return w0, w1, th1


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def adapt_end(kinds, decay, coup, rest, st, p, u0, u1):  # pragma: no cover - compiled
    """Advance the components of column ``p`` over the step in which the potential went ``u0 -> u1``."""
    for c in range(kinds.shape[0]):
        st[c, p] = st[c, p] * decay[c] + coup[c] * (1.0 - decay[c]) * (0.5 * (u0 + u1) - rest)


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def adapt_sums(kinds, st, p):  # pragma: no cover - compiled
    """``(W, Theta)``: summed currents and thresholds (mV) of column ``p``."""
    w = 0.0
    th = 0.0
    for c in range(kinds.shape[0]):
        if kinds[c] == KIND_CURRENT:
            w += st[c, p]
        else:
            th += st[c, p]
    return w, th


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def advance_adapting(ncode, npar, nops, nargs, tau_m, reset, boundary, has_cutoff,
                     hcode, hpar, hops, hargs, theta, uses_slope, tau_ref, dt,
                     kinds, decay, coup, kick, rest,
                     closure, m, u, h, st, head, old, mean_ad, fw, aux, mu, out_rate, out_mean_u, out_refr,
                     stack, xbuf):  # pragma: no cover - compiled
    """Advance ``len(mu) - 1`` steps in place; returns (head, steps_done, ok).

    As :func:`popdens.solvers.refractory._advance` with the adaptation state
    ``st`` (shape ``(K, n_bins + 1)``, the last column for the bin of old
    neurons), the population means ``mean_ad`` (shape ``(K,)``), scratch
    ``fw`` (shape ``(K,)``) and ``aux[0]``, the mean potential at the start of
    the step (mV); ``closure`` is a code of :data:`CLOSURES`.
    """
    n_bins = m.shape[0]
    n_comp = kinds.shape[0]
    e_dt = math.exp(-dt / tau_m)
    n = mu.shape[0] - 1
    for k in range(n):
        mu0 = mu[k]
        mu1 = mu[k + 1]
        fired = 0.0
        mean_u = 0.0
        refr = 0.0
        u_last = 0.0
        ms_last = 0.0
        p_last = 0
        for c in range(n_comp):
            fw[c] = 0.0
        for j in range(n_bins):
            p = head + j
            if p >= n_bins:
                p -= n_bins
            mj = m[p]
            u0 = u[p]
            w0, w1, th1 = adapt_start(kinds, decay, coup, rest, st, p, u0)
            un, hn, big_h = _bin_step(ncode, npar, nops, nargs, tau_m, reset, boundary, has_cutoff,
                                      hcode, hpar, hops, hargs, theta + th1, uses_slope,
                                      (j + 0.5) * dt, tau_ref, dt, e_dt, u0, h[p], mu0 - w0, mu1 - w1, stack, xbuf)
            adapt_end(kinds, decay, coup, rest, st, p, u0, un)
            s = survival(big_h)
            mf = mj * (1.0 - s)
            fired += mf
            for c in range(n_comp):
                fw[c] += mf * st[c, p]
            ms = mj * s
            if j == n_bins - 1:
                u_last = un
                ms_last = ms
                p_last = p
            else:
                m[p] = ms
                u[p] = un
                h[p] = hn
                mean_u += ms * un
                if (j + 1.5) * dt < tau_ref - AGE_TOL * dt:
                    refr += ms
        # the bin of all older neurons (always past refractoriness), column n_bins of st
        u0 = old[1]
        w0, w1, th1 = adapt_start(kinds, decay, coup, rest, st, n_bins, u0)
        un, hn, big_h = _bin_step(ncode, npar, nops, nargs, tau_m, reset, boundary, has_cutoff,
                                  hcode, hpar, hops, hargs, theta + th1, uses_slope,
                                  tau_ref + dt, tau_ref, dt, e_dt, u0, old[2], mu0 - w0, mu1 - w1, stack, xbuf)
        adapt_end(kinds, decay, coup, rest, st, n_bins, u0, un)
        s = survival(big_h)
        mf = old[0] * (1.0 - s)
        fired += mf
        for c in range(n_comp):
            fw[c] += mf * st[c, n_bins]
        m_old = old[0] * s + ms_last
        if m_old > 0.0:
            fa = old[0] * s / m_old
            fb = ms_last / m_old
            u_old = fa * un + fb * u_last
            for c in range(n_comp):
                st[c, n_bins] = fa * st[c, n_bins] + fb * st[c, p_last]
        else:
            u_old = un
        w_old, th_old = adapt_sums(kinds, st, n_bins)
        d1 = 0.0
        if uses_slope:
            d1 = (drift_value(ncode, npar, nops, nargs, u_old, stack, xbuf) + mu1 - w_old) / tau_m
        old[0] = m_old
        old[1] = u_old
        old[2] = hazard_value(hcode, hpar, hops, hargs, u_old, theta + th_old, d1, stack, xbuf)
        mean_u += m_old * u_old
        # the newborn bin: its spike's kick plus the earlier spikes' adaptation (closure)
        u_end = mean_u + fired * reset
        head -= 1
        if head < 0:
            head += n_bins
        for c in range(n_comp):
            excl = mean_ad[c] * decay[c]
            if kinds[c] == KIND_CURRENT:
                excl += coup[c] * (1.0 - decay[c]) * (0.5 * (aux[0] + u_end) - rest)
            if closure == 0 and fired > 0.0:
                st[c, head] = kick[c] + fw[c] / fired
            else:
                st[c, head] = kick[c] + excl
            mean_ad[c] = excl + kick[c] * fired
        wn, thn = adapt_sums(kinds, st, head)
        unb, hnb = _newborn(ncode, npar, nops, nargs, tau_m, reset, hcode, hpar, hops, hargs, theta + thn,
                            uses_slope, tau_ref, dt, mu1 - wn, stack, xbuf)
        m[head] = fired
        u[head] = unb
        h[head] = hnb
        if 0.5 * dt < tau_ref - AGE_TOL * dt:
            refr += fired
        mean_u += fired * unb
        aux[0] = mean_u
        # newborns that fire again within their birth step (tau_ref < dt/2): counted in the rate;
        # their extra adaptation kicks are not tracked (a first-order term in dt of kick * H)
        s_nb = _refire_survival(ncode, npar, nops, nargs, tau_m, reset, hcode, hpar, hops, hargs, theta + thn,
                                uses_slope, tau_ref, dt, mu1 - wn, hnb, stack, xbuf)
        out_rate[k] = fired / s_nb / (dt * MS_TO_S)
        out_mean_u[k] = mean_u
        out_refr[k] = refr
        if not (math.isfinite(fired) and math.isfinite(mean_u)):
            return head, k + 1, False
    return head, n, True


#: Iterations and tolerance of the old bin's stationary state (potential and adaptation).
OLD_BIN_MAX_ITER = 100_000
OLD_BIN_TOL = 1e-13


@numba.njit(cache=True, nogil=True)
def stationary_profile(ncode, npar, nops, nargs, tau_m, reset, boundary, has_cutoff,
                       hcode, hpar, hops, hargs, theta, uses_slope, tau_ref, dt,
                       kinds, decay, coup, kick, rest, newborn_state, mu,
                       m, u, h, st, old, fw, stack, xbuf):  # pragma: no cover - compiled
    """Stationary age profile at constant drive ``mu`` for a given newborn adaptation state.

    Fills ``m`` (normalised masses), ``u``, ``h``, ``st`` (bin 0 first, the
    old bin in the last column), ``old`` and ``fw`` (the adaptation of the
    neurons firing in a step, summed with their probabilities, shape
    ``(K,)``); returns ``(fired, mean_u, converged)``: the mass firing per
    step and the mean potential (mV) at a step end, as
    :func:`advance_adapting` would produce them.
    """
    n_bins = m.shape[0]
    n_comp = kinds.shape[0]
    e_dt = math.exp(-dt / tau_m)
    for c in range(n_comp):
        st[c, 0] = newborn_state[c]
    wn, thn = adapt_sums(kinds, st, 0)
    u[0], h[0] = _newborn(ncode, npar, nops, nargs, tau_m, reset, hcode, hpar, hops, hargs, theta + thn,
                          uses_slope, tau_ref, dt, mu - wn, stack, xbuf)
    m[0] = 1.0
    for c in range(n_comp):
        fw[c] = 0.0
    # explicit bins: bin j+1 is bin j one step later (st column n_bins used as scratch for the last one)
    for j in range(n_bins):
        col = j + 1
        for c in range(n_comp):
            st[c, col] = st[c, j]
        u0 = u[j]
        w0, w1, th1 = adapt_start(kinds, decay, coup, rest, st, col, u0)
        un, hn, big_h = _bin_step(ncode, npar, nops, nargs, tau_m, reset, boundary, has_cutoff,
                                  hcode, hpar, hops, hargs, theta + th1, uses_slope,
                                  (j + 0.5) * dt, tau_ref, dt, e_dt, u0, h[j], mu - w0, mu - w1, stack, xbuf)
        adapt_end(kinds, decay, coup, rest, st, col, u0, un)
        s = survival(big_h)
        for c in range(n_comp):
            fw[c] += m[j] * (1.0 - s) * st[c, col]
        if j + 1 < n_bins:
            m[j + 1] = m[j] * s
            u[j + 1] = un
            h[j + 1] = hn
        else:
            ms_last = m[j] * s
            u_last = un
    # inflow state of the old bin is in column n_bins; iterate the old bin to its fixed point
    n_c = n_comp if n_comp > 0 else 1
    inflow = np.empty(n_c)
    cur = np.empty(n_c)
    for c in range(n_comp):
        inflow[c] = st[c, n_bins]
        cur[c] = st[c, n_bins]
    uo = u_last
    w_o, th_o = adapt_sums(kinds, st, n_bins)
    d1 = 0.0
    if uses_slope:
        d1 = (drift_value(ncode, npar, nops, nargs, uo, stack, xbuf) + mu - w_o) / tau_m
    ho = hazard_value(hcode, hpar, hops, hargs, uo, theta + th_o, d1, stack, xbuf)
    s_old = 0.0
    converged = False
    # the map contracts only by ~ survival x decay per step: componentwise Aitken extrapolation every
    # third iterate (exact for a linear map) cuts tens of thousands of iterations to tens
    hist = np.empty((3, n_comp + 1))
    prev_change = 0.0
    for it in range(OLD_BIN_MAX_ITER):
        for c in range(n_comp):
            st[c, n_bins] = cur[c]
        w0, w1, th1 = adapt_start(kinds, decay, coup, rest, st, n_bins, uo)
        un, hn, big_h = _bin_step(ncode, npar, nops, nargs, tau_m, reset, boundary, has_cutoff,
                                  hcode, hpar, hops, hargs, theta + th1, uses_slope,
                                  tau_ref + dt, tau_ref, dt, e_dt, uo, ho, mu - w0, mu - w1, stack, xbuf)
        adapt_end(kinds, decay, coup, rest, st, n_bins, uo, un)
        s_old = survival(big_h)
        u_new = s_old * un + (1.0 - s_old) * u_last
        change = abs(u_new - uo)
        for c in range(n_comp):
            x = s_old * st[c, n_bins] + (1.0 - s_old) * inflow[c]
            change = max(change, abs(x - cur[c]))
            cur[c] = x
            st[c, n_bins] = x
        row = it % 3
        hist[row, 0] = u_new
        for c in range(n_comp):
            hist[row, c + 1] = cur[c]
        if row == 2 and change > OLD_BIN_TOL * max(1.0, abs(u_new)):
            for c in range(n_comp + 1):
                d2 = hist[2, c] - 2.0 * hist[1, c] + hist[0, c]
                if d2 != 0.0:
                    x = hist[2, c] - (hist[2, c] - hist[1, c]) ** 2 / d2
                    if math.isfinite(x) and abs(x - hist[2, c]) < 1e3 * abs(hist[2, c] - hist[1, c]) + 1e-300:
                        if c == 0:
                            u_new = x
                        else:
                            cur[c - 1] = x
                            st[c - 1, n_bins] = x
        w_o, th_o = adapt_sums(kinds, st, n_bins)
        d1 = 0.0
        if uses_slope:
            d1 = (drift_value(ncode, npar, nops, nargs, u_new, stack, xbuf) + mu - w_o) / tau_m
        ho = hazard_value(hcode, hpar, hops, hargs, u_new, theta + th_o, d1, stack, xbuf)
        uo = u_new
        # distance to the fixed point ~ change q / (1 - q) for a map contracting by q per iteration
        q = change / prev_change if prev_change > 0.0 else 1.0
        prev_change = change
        if change <= OLD_BIN_TOL * max(1.0, abs(uo)) * max(1.0 - q, 1e-6) and row != 2:
            converged = True
            break
    # survival of the old bin at its fixed point
    w0, w1, th1 = adapt_start(kinds, decay, coup, rest, st, n_bins, uo)
    un, hn, big_h = _bin_step(ncode, npar, nops, nargs, tau_m, reset, boundary, has_cutoff,
                              hcode, hpar, hops, hargs, theta + th1, uses_slope,
                              tau_ref + dt, tau_ref, dt, e_dt, uo, ho, mu - w0, mu - w1, stack, xbuf)
    s_old = survival(big_h)
    adapt_end(kinds, decay, coup, rest, st, n_bins, uo, un)
    m_old = ms_last / (1.0 - s_old) if s_old < 1.0 else math.inf
    if not math.isinf(m_old):
        for c in range(n_comp):
            fw[c] += m_old * (1.0 - s_old) * st[c, n_bins]
    for c in range(n_comp):
        st[c, n_bins] = cur[c]
    total = 0.0
    for j in range(n_bins):
        total += m[j]
    if math.isinf(m_old):
        # nobody fires in the long run: every neuron sits in the old bin
        for j in range(n_bins):
            m[j] = 0.0
        old[0] = 1.0
        old[1] = uo
        old[2] = ho
        return 0.0, uo, converged
    total += m_old
    for c in range(n_comp):
        fw[c] /= total
    mean_u = 0.0
    for j in range(n_bins):
        m[j] /= total
        mean_u += m[j] * u[j]
    old[0] = m_old / total
    old[1] = uo
    old[2] = ho
    mean_u += old[0] * uo
    return m[0], mean_u, converged
