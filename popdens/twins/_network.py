"""Compiled kernel of the network Monte Carlo twin.

All neurons of all cohorts live in one set of arrays; cohort ``p``
owns the neurons ``start[p] .. start[p+1]-1``.  Per step:

1. Every neuron collects the spikes that arrive in this step from the ring
   buffer of each incoming pathway.  The spikes of a step are spread
   uniformly over it (their times within the step are not resolved), so
   after a delay of ``m`` whole steps they arrive uniformly over step
   ``i + m``: an instantaneous synapse adds a rectangular drive
   ``tau_m J / dt`` (mV) over that step (PSP jump ``J``), an exponential
   synapse a current with unit-area kernel, whose contribution is
   piecewise linear in the step.  Poisson background spikes are drawn per
   step and delivered the same way.  Cohorts with shot-noise synapses
   (``shot[p]``) instead take the summed jumps (``q_drive`` and ``bg_drive``
   are then the jumps in mV) at once at the start of the step, unless
   refractory there (input during the refractory period is lost), and a jump
   to the boundary or beyond is a spike, as in :class:`popdens.ShotNoise`.
2. The neuron advances with the step of its noise model, the same as the
   single-population twins: white noise by the exact Ornstein--Uhlenbeck
   step (LIF) or Euler--Maruyama, with Brownian-bridge crossings
   (:mod:`popdens.twins._diffusive`); escape noise by the time-rescaled hazard
   (:mod:`popdens.twins._escape`).
3. Each spike is written into the ring buffers of its outgoing pathways
   (CSR lists of targets), ``m`` slots ahead.

Connectivity is drawn with a fixed in-degree: each target neuron picks
``C`` distinct sources (partial Fisher--Yates shuffle), no self-connections
within a cohort.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from ..model._kernels import NO_REFCOUNT
from ._diffusive import BRIDGE_SKIP, REF_TOL, _move
from ..model.neurons import CODE_LIF
from ..solvers._age_step import _bin_step, _newborn, _refire_survival
from ..solvers._refractory_adapting import adapt_end, adapt_start, adapt_sums

NOISE_WHITE, NOISE_ESCAPE = 0, 1


@numba.njit(cache=True, nogil=True)
def draw_in_degree(n_target, n_source, c, same, perm):  # pragma: no cover - compiled
    """Sources (local indices, int32, shape (n_target * c,)) for fixed in-degree ``c``.

    ``perm`` is scratch of length ``n_source`` holding a permutation of
    ``0..n_source-1``; with ``same`` the target itself is excluded.
    """
    out = np.empty(n_target * c, dtype=np.int32)
    for t in range(n_target):
        pool = n_source
        if same:
            # move the target to the end of the permutation and draw from the rest
            for j in range(n_source):
                if perm[j] == t:
                    perm[j] = perm[n_source - 1]
                    perm[n_source - 1] = t
                    break
            pool = n_source - 1
        for j in range(c):
            r = j + np.random.randint(0, pool - j)
            tmp = perm[j]
            perm[j] = perm[r]
            perm[r] = tmp
            out[t * c + j] = perm[j]
    return out


@numba.njit(cache=True, nogil=True)
def csr_by_source(sources, c, n_source):  # pragma: no cover - compiled
    """Outgoing lists from the per-target source lists: (indptr int64, targets int32)."""
    counts = np.zeros(n_source + 1, dtype=np.int64)
    for e in range(sources.shape[0]):
        counts[sources[e] + 1] += 1
    for s in range(n_source):
        counts[s + 1] += counts[s]
    fill = counts[:-1].copy()
    tg = np.empty(sources.shape[0], dtype=np.int32)
    for e in range(sources.shape[0]):
        s = sources[e]
        tg[fill[s]] = e // c
        fill[s] += 1
    return counts, tg


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def deliver(p, li, n_fire, start, q_tgt, q_m, q_head, q_buf_off, q_ptr_off, q_idx_off, out_ptr, out_list, buf,
            ptr_flat, idx_flat):  # pragma: no cover - compiled
    """Write ``n_fire`` spikes of neuron ``li`` of cohort ``p`` into the ring buffers of its outgoing
    pathways, ``q_m[q]`` slots ahead of the head (the step they arrive in)."""
    for jq in range(out_ptr[p], out_ptr[p + 1]):
        q = out_list[jq]
        tg = q_tgt[q]
        n_t = start[tg + 1] - start[tg]
        slot = q_head[q] + q_m[q]
        if slot > q_m[q]:
            slot -= q_m[q] + 1
        base = q_buf_off[q] + slot * n_t
        p0 = q_ptr_off[q] + li
        j0 = q_idx_off[q] + ptr_flat[p0]
        j1 = q_idx_off[q] + ptr_flat[p0 + 1]
        for j in range(j0, j1):
            buf[base + idx_flat[j]] += n_fire


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def run_network(start, noise, ncode, tau_m, reset, boundary, has_cutoff, tau_ref,
                hcode, theta, uses_slope, npar_flat, npar_ptr, nops_flat, nargs_flat, nprog_ptr,
                hpar_flat, hpar_ptr, hops_flat, hargs_flat, hprog_ptr,
                bg_lam, bg_drive, ad_ptr, ad_kinds, ad_decay, ad_coup, ad_kick, ad_rest, st, shot,
                ext_mu, ext_sig, dt, bridge,
                q_src, q_tgt, q_m, q_head, q_buf_off, q_x_off, q_drive, q_decay, q_ptr_off, q_idx_off,
                in_ptr, in_list, out_ptr, out_list, buf, xs, ptr_flat, idx_flat,
                u, ref, age, lam, thr, hz, t0, record, spk_t, spk_i, n_spk,
                out_count, out_mean_u, stack, xbuf):  # pragma: no cover - compiled
    """Advance the whole network ``ext_mu.shape[1] - 1`` steps in place.

    Adapting cohorts: the components of cohort ``p`` are ``ad_*[ad_ptr[p]:ad_ptr[p+1]]`` and neuron ``i``
    carries them in ``st[:, i]`` (mV), stepped as in the single-population twins.
    Returns ``(steps_done, n_spikes_recorded, buffer_full)``.
    """
    n_pop = start.shape[0] - 1
    n_total = start[n_pop]
    n_steps = ext_mu.shape[1] - 1
    cap = spk_t.shape[0]
    tol = REF_TOL * dt
    for k in range(n_steps):
        if record and cap - n_spk < 2 * n_total:
            return k, n_spk, True
        for p in range(n_pop):
            i0 = start[p]
            i1 = start[p + 1]
            n_p = i1 - i0
            npar = npar_flat[npar_ptr[p]:npar_ptr[p + 1]]
            nops = nops_flat[nprog_ptr[p]:nprog_ptr[p + 1]]
            nargs = nargs_flat[nprog_ptr[p]:nprog_ptr[p + 1]]
            hpar = hpar_flat[hpar_ptr[p]:hpar_ptr[p + 1]]
            hops = hops_flat[hprog_ptr[p]:hprog_ptr[p + 1]]
            hargs = hargs_flat[hprog_ptr[p]:hprog_ptr[p + 1]]
            tm = tau_m[p]
            rs = reset[p]
            bd = boundary[p]
            tr = tau_ref[p]
            e_dt = math.exp(-dt / tm)
            sigma = 0.5 * (ext_sig[p, k] + ext_sig[p, k + 1])
            s2 = sigma * sigma / tm
            sd_full = sigma * math.sqrt(-0.5 * math.expm1(-2.0 * dt / tm))
            is_lif = ncode[p] == CODE_LIF
            rest = npar[0]
            kinds = ad_kinds[ad_ptr[p]:ad_ptr[p + 1]]
            decay = ad_decay[ad_ptr[p]:ad_ptr[p + 1]]
            coup = ad_coup[ad_ptr[p]:ad_ptr[p + 1]]
            kick = ad_kick[ad_ptr[p]:ad_ptr[p + 1]]
            adapting = kinds.shape[0] > 0
            arest = ad_rest[p]
            count = 0
            su = 0.0
            for i in range(i0, i1):
                li = i - i0
                d0 = ext_mu[p, k]
                d1 = ext_mu[p, k + 1]
                jump = 0.0
                for jq in range(in_ptr[p], in_ptr[p + 1]):
                    q = in_list[jq]
                    pos = q_buf_off[q] + q_head[q] * n_p + li
                    c = buf[pos]
                    buf[pos] = 0.0
                    if shot[p]:
                        jump += c * q_drive[q]
                    elif q_decay[q] == 0.0:
                        d0 += c * q_drive[q]
                        d1 += c * q_drive[q]
                    else:
                        xp = q_x_off[q] + li
                        x0 = xs[xp]
                        x1 = x0 * q_decay[q] + c * q_drive[q]
                        d0 += x0
                        d1 += x1
                        xs[xp] = x1
                if bg_lam[p] > 0.0:
                    nb = np.random.poisson(bg_lam[p])
                    if shot[p]:
                        jump += nb * bg_drive[p]
                    else:
                        d0 += nb * bg_drive[p]
                        d1 += nb * bg_drive[p]
                fired = False
                if jump != 0.0 and ref[i] <= 0.0:
                    # shot-noise synapses: the step's jumps at its start; a jump over the boundary is a spike.
                    # The triggering arrival lies anywhere in the step, so the neuron is free again tr after
                    # it: from the start of the step tr later (its input all received) or of the one after,
                    # with equal chance (the input received after the refractory period is then right on
                    # average; a fixed tr gave rates 1.1 % high at 160 Hz with dt = 0.1 ms)
                    u[i] += jump
                    if u[i] >= bd:
                        fired = True
                        u[i] = rs
                        ref[i] = tr + dt if np.random.random() < 0.5 else tr
                n_fire = 1
                u_start = u[i]
                w0 = 0.0
                w1 = 0.0
                th1 = 0.0
                if adapting:
                    w0, w1, th1 = adapt_start(kinds, decay, coup, arest, st, i, u_start)
                    d0 -= w0
                    d1 -= w1
                if noise[p] == NOISE_WHITE:
                    h = dt
                    ms = d0
                    u0 = u[i]
                    skip = False
                    if ref[i] > 0.0:
                        r = ref[i] - dt
                        if r > tol:
                            ref[i] = r
                            u[i] = rs
                            skip = True
                        else:
                            ref[i] = 0.0
                            h = -r if r < 0.0 else 0.0
                            ms = d1 - (d1 - d0) * h / dt
                            u0 = rs
                            if h <= tol:
                                u[i] = rs
                                skip = True
                    if not skip:
                        jumped = fired
                        if is_lif and h == dt:
                            # exact OU step over a full step with precomputed factors (Gillespie 1996)
                            slope_tm = tm * (d1 - d0) / dt
                            u1 = (rest + d1) - slope_tm + (u0 - rest - d0 + slope_tm) * e_dt
                            if sd_full > 0.0:
                                u1 += sd_full * np.random.standard_normal()
                        else:
                            z = np.random.standard_normal()
                            u1 = _move(ncode[p], npar, nops, nargs, tm, u0, h, ms, d1, sigma, z, stack, xbuf)
                        # (a spike by a jump at the step's start stays one; a second one in the step,
                        # possible only when tau_ref < dt, is not counted)
                        fired = jumped or u1 >= bd
                        if not fired and bridge and s2 > 0.0:
                            x = 2.0 * (bd - u0) * (bd - u1) / (s2 * h)
                            if x < BRIDGE_SKIP:
                                fired = np.random.random() < math.exp(-x)
                        if fired:
                            r = tr - 0.5 * dt
                            u1 = rs
                            d_n = d1
                            if adapting:
                                adapt_end(kinds, decay, coup, arest, st, i, u_start, bd)
                                for c in range(kinds.shape[0]):
                                    st[c, i] += kick[c]
                                wn, _ = adapt_sums(kinds, st, i)
                                d_n = d1 + w1 - wn
                            if r > tol:
                                ref[i] = r
                            else:
                                ref[i] = 0.0
                                hf = -r if r < 0.0 else 0.0
                                if hf > tol:
                                    u1 = _move(ncode[p], npar, nops, nargs, tm, rs, hf,
                                               d_n - (d1 - d0) * hf / dt, d_n, sigma,
                                               np.random.standard_normal(), stack, xbuf)
                                    if u1 >= bd:  # pragma: no cover - needs absurd noise
                                        u1 = rs
                        elif adapting:
                            adapt_end(kinds, decay, coup, arest, st, i, u_start, u1)
                        u[i] = u1
                    elif adapting:
                        adapt_end(kinds, decay, coup, arest, st, i, rs, rs)
                else:
                    un, hn, big_h = _bin_step(ncode[p], npar, nops, nargs, tm, rs, bd, has_cutoff[p],
                                              hcode[p], hpar, hops, hargs, theta[p] + th1, uses_slope[p],
                                              age[i], tr, dt, e_dt, u[i], hz[i], d0, d1, stack, xbuf)
                    lam[i] += big_h
                    if lam[i] >= thr[i]:
                        fired = True
                        th_n = 0.0
                        d_n = d1
                        if adapting:
                            adapt_end(kinds, decay, coup, arest, st, i, u_start, un)
                            for c in range(kinds.shape[0]):
                                st[c, i] += kick[c]
                            wn, th_n = adapt_sums(kinds, st, i)
                            d_n = d1 + w1 - wn
                        u[i], hz[i] = _newborn(ncode[p], npar, nops, nargs, tm, rs, hcode[p], hpar, hops, hargs,
                                               theta[p] + th_n, uses_slope[p], tr, dt, d_n, stack, xbuf)
                        # firing again within the birth step (tau_ref < dt/2; see _refire_survival)
                        s_nb = _refire_survival(ncode[p], npar, nops, nargs, tm, rs, hcode[p], hpar, hops, hargs,
                                                theta[p] + th_n, uses_slope[p], tr, dt, d_n, hz[i], stack, xbuf)
                        while s_nb < 1.0 and np.random.random() >= s_nb:
                            n_fire += 1
                            if adapting:  # each spike with its kick, as in run_escape_adapting
                                for c in range(kinds.shape[0]):
                                    st[c, i] += kick[c]
                                wn, th_n = adapt_sums(kinds, st, i)
                                d_n = d1 + w1 - wn
                                u[i], hz[i] = _newborn(ncode[p], npar, nops, nargs, tm, rs, hcode[p], hpar, hops,
                                                       hargs, theta[p] + th_n, uses_slope[p], tr, dt, d_n, stack, xbuf)
                                s_nb = _refire_survival(ncode[p], npar, nops, nargs, tm, rs, hcode[p], hpar, hops,
                                                        hargs, theta[p] + th_n, uses_slope[p], tr, dt, d_n, hz[i],
                                                        stack, xbuf)
                        age[i] = 0.5 * dt
                        lam[i] = 0.0
                        thr[i] = np.random.exponential(1.0)
                    else:
                        if adapting:
                            adapt_end(kinds, decay, coup, arest, st, i, u_start, un)
                        u[i] = un
                        hz[i] = hn
                        age[i] += dt
                su += u[i]
                if fired:
                    count += n_fire
                    if record:
                        for _ in range(n_fire):
                            if n_spk < cap:  # room for 2 n_total per step (re-firings are rare)
                                spk_t[n_spk] = t0 + (k + 0.5) * dt
                                spk_i[n_spk] = i
                                n_spk += 1
                    deliver(p, li, n_fire, start, q_tgt, q_m, q_head, q_buf_off, q_ptr_off, q_idx_off, out_ptr,
                            out_list, buf, ptr_flat, idx_flat)
            out_count[k, p] = count
            out_mean_u[k, p] = su / n_p
        for q in range(q_head.shape[0]):
            q_head[q] += 1
            if q_head[q] > q_m[q]:
                q_head[q] = 0
    return n_steps, n_spk, False
