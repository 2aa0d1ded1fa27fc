"""Compiled kernel of the network Monte Carlo twin for cohorts with conductance synapses.

Same arrays, ring buffers and connectivity as :mod:`popdens.twins._network`
(every cohort of the circuit receives conductance synapses; the front end
checks).  Each pathway ``q`` into a neuron is one conductance ``g_q``
(leak units), kept in the slot the current kernel uses for its filtered
current, decaying with ``tau_q`` towards reversal ``E_q``.  Per step ``h``:

1. The ``c`` spikes the ring buffer delivers in this step are spread
   uniformly over it (their times within the step are not resolved, as in
   the current kernel); the conductance at the step end and its step
   average follow exactly for that input:
   ``g_1 = g_0 e + c w a`` and ``gbar = g_0 a + c w tau (1 - a) / h``,
   with ``e = exp(-h/tau)`` and ``a = tau (1 - e) / h``.  Poisson
   background spikes come through the same buffers (the front end draws
   them; conductance backgrounds always have ``tau_syn > 0``).
2. The potential takes the step of the single-population conductance twin
   (:func:`popdens.twins._conductance.potential_step`: the exact
   exponential step of the LIF at the step-averaged conductances, Heun's
   step otherwise), with the same spike rule: a spike when the potential
   ends the step at or above the boundary, placed at the middle of the
   step, the neuron held at reset for the refractory time while its
   conductances go on evolving.
3. Spikes go into the ring buffers of the outgoing pathways.

``q_cond[q]`` is 0 for an input that is not a conductance (an external
noise feed of zero amplitude): its slot is cleared and ignored.
"""

from __future__ import annotations

import math

import numba

from ..model._kernels import NO_REFCOUNT
from ..model.neurons import CODE_LIF
from ._conductance import neuron_step
from ._network import deliver
from ._diffusive import REF_TOL

__all__ = ["run_conductance_network"]


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def run_conductance_network(start, noise, ncode, tau_m, reset, boundary, has_cutoff, tau_ref,
                            hcode, theta, uses_slope, npar_flat, npar_ptr, nops_flat, nargs_flat, nprog_ptr,
                            hpar_flat, hpar_ptr, hops_flat, hargs_flat, hprog_ptr,
                            bg_lam, bg_drive, ad_ptr, ad_kinds, ad_decay, ad_coup, ad_kick, ad_rest, st,
                            ext_mu, ext_sig, dt, bridge,
                            q_src, q_tgt, q_m, q_head, q_buf_off, q_x_off, q_drive, q_decay, q_ptr_off, q_idx_off,
                            in_ptr, in_list, out_ptr, out_list, buf, xs, ptr_flat, idx_flat,
                            u, ref, age, lam, thr, hz, t0, record, spk_t, spk_i, n_spk,
                            out_count, out_mean_u, stack, xbuf,
                            q_cond, q_w, q_rev, q_tau, q_avg):  # pragma: no cover - compiled
    """Advance the whole network ``ext_mu.shape[1] - 1`` steps in place (arguments as
    :func:`popdens.twins._network.run_network`, whose noise, escape, background and adaptation arrays
    are unused, plus per pathway: conductance flag, weight (leak units), reversal (mV), time constant
    (ms) and step-average factor ``a``).  Returns ``(steps_done, n_spikes_recorded, buffer_full)``."""
    n_pop = start.shape[0] - 1
    n_total = start[n_pop]
    n_steps = ext_mu.shape[1] - 1
    cap = spk_t.shape[0]
    h = dt
    tol = REF_TOL * dt
    for k in range(n_steps):
        if record and cap - n_spk < n_total:
            return k, n_spk, True
        for p in range(n_pop):
            i0 = start[p]
            i1 = start[p + 1]
            n_p = i1 - i0
            npar = npar_flat[npar_ptr[p]:npar_ptr[p + 1]]
            nops = nops_flat[nprog_ptr[p]:nprog_ptr[p + 1]]
            nargs = nargs_flat[nprog_ptr[p]:nprog_ptr[p + 1]]
            tm = tau_m[p]
            rs = reset[p]
            bd = boundary[p]
            lif = ncode[p] == CODE_LIF
            rest = npar[0] if lif else 0.0
            m = 0.5 * (ext_mu[p, k] + ext_mu[p, k + 1])
            count = 0
            su = 0.0
            for i in range(i0, i1):
                li = i - i0
                gsum = 0.0
                grev = 0.0
                for jq in range(in_ptr[p], in_ptr[p + 1]):
                    q = in_list[jq]
                    pos = q_buf_off[q] + q_head[q] * n_p + li
                    c = buf[pos]
                    buf[pos] = 0.0
                    if q_cond[q] == 0:
                        continue
                    xp = q_x_off[q] + li
                    g0 = xs[xp]
                    a = q_avg[q]
                    cw = c * q_w[q]
                    xs[xp] = g0 * q_decay[q] + cw * a
                    gbar = g0 * a + cw * q_tau[q] * (1.0 - a) / h
                    gsum += gbar
                    grev += gbar * q_rev[q]
                ui, held = neuron_step(ref, i, u[i], h, tol, rs, lif, ncode[p], npar, nops, nargs, rest, tm, bd, m,
                                       gsum, grev, stack, xbuf)
                if held:
                    su += rs
                    continue
                if ui >= bd or not math.isfinite(ui):
                    count += 1
                    if record:
                        spk_t[n_spk] = t0 + (k + 0.5) * h
                        spk_i[n_spk] = i
                        n_spk += 1
                    ui = rs
                    r = tau_ref[p] - 0.5 * h
                    ref[i] = r if r > tol else 0.0
                    deliver(p, li, 1, start, q_tgt, q_m, q_head, q_buf_off, q_ptr_off, q_idx_off, out_ptr, out_list,
                            buf, ptr_flat, idx_flat)
                u[i] = ui
                su += ui
            out_count[k, p] = count
            out_mean_u[k, p] = su / n_p
        for q in range(q_head.shape[0]):
            q_head[q] += 1
            if q_head[q] > q_m[q]:
                q_head[q] = 0
    return n_steps, n_spk, False
