"""Compiled Monte Carlo kernel for escape-noise neurons.

Each neuron carries its potential, its age and the hazard integrated since
its last spike; it fires when that integral passes an exponentially
distributed threshold drawn at its previous spike (time rescaling: the
probability to fire within a step is exactly ``1 - exp(-integral of h)``).
Potentials and per-step hazard integrals use the same step as the density
solver (:func:`popdens.solvers.refractory._bin_step`), so both simulate one
and the same discretised neuron.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from ..model._kernels import NO_REFCOUNT
from ..solvers._age_step import _bin_step, _newborn, _refire_survival
from ..solvers._refractory_adapting import adapt_end, adapt_start, adapt_sums


@numba.njit(cache=True, nogil=True)
def seed_compiled_rng(seed):  # pragma: no cover - compiled
    """Seed the random generator used inside compiled kernels."""
    np.random.seed(seed)


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def run_escape(ncode, npar, nops, nargs, tau_m, reset, boundary, has_cutoff,
               hcode, hpar, hops, hargs, theta, uses_slope, tau_ref, dt,
               u, age, lam, thr, h, mu, t0, record, spk_t, spk_i, n_spk,
               out_count, out_mean_u, out_refr, stack, xbuf):  # pragma: no cover - compiled
    """Advance all neurons ``len(mu) - 1`` steps in place.

    Returns ``(steps_done, n_spikes_recorded, buffer_full)``; when the spike
    buffer might overflow within the next step the kernel stops before it,
    so the caller can grow the buffer and continue.
    """
    n = u.shape[0]
    n_steps = mu.shape[0] - 1
    e_dt = math.exp(-dt / tau_m)
    cap = spk_t.shape[0]
    for k in range(n_steps):
        if record and cap - n_spk < 2 * n:
            # a step adds up to n spikes, plus re-firings within birth steps (each with probability
            # below h dt/2 << 1, so more than n of them in one step does not happen): grow first
            return k, n_spk, True
        mu0 = mu[k]
        mu1 = mu[k + 1]
        count = 0
        su = 0.0
        refr = 0
        for i in range(n):
            un, hn, big_h = _bin_step(ncode, npar, nops, nargs, tau_m, reset, boundary, has_cutoff,
                                      hcode, hpar, hops, hargs, theta, uses_slope,
                                      age[i], tau_ref, dt, e_dt, u[i], h[i], mu0, mu1, stack, xbuf)
            lam[i] += big_h
            if lam[i] >= thr[i]:
                count += 1
                if record:
                    spk_t[n_spk] = t0 + (k + 0.5) * dt  # midpoint of the step (unbiased)
                    spk_i[n_spk] = i
                    n_spk += 1
                # fired, on average, half a step ago (see refractory._newborn)
                u[i], h[i] = _newborn(ncode, npar, nops, nargs, tau_m, reset, hcode, hpar, hops, hargs,
                                      theta, uses_slope, tau_ref, dt, mu1, stack, xbuf)
                # and may fire again before the step ends (tau_ref < dt/2; _refire_survival)
                s_nb = _refire_survival(ncode, npar, nops, nargs, tau_m, reset, hcode, hpar, hops, hargs,
                                        theta, uses_slope, tau_ref, dt, mu1, h[i], stack, xbuf)
                while s_nb < 1.0 and np.random.random() >= s_nb:
                    count += 1
                    if record and n_spk < cap:
                        spk_t[n_spk] = t0 + (k + 0.5) * dt
                        spk_i[n_spk] = i
                        n_spk += 1
                age[i] = 0.5 * dt
                lam[i] = 0.0
                thr[i] = np.random.exponential(1.0)
            else:
                u[i] = un
                h[i] = hn
                age[i] += dt
            su += u[i]
            if age[i] < tau_ref - 1e-9 * dt:
                refr += 1
        out_count[k] = count
        out_mean_u[k] = su / n
        out_refr[k] = refr / n
    return n_steps, n_spk, False


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def run_escape_adapting(ncode, npar, nops, nargs, tau_m, reset, boundary, has_cutoff,
                        hcode, hpar, hops, hargs, theta, uses_slope, tau_ref, dt,
                        kinds, decay, coup, kick, rest, st,
                        u, age, lam, thr, h, mu, t0, record, spk_t, spk_i, n_spk,
                        out_count, out_mean_u, out_refr, stack, xbuf):  # pragma: no cover - compiled
    """:func:`run_escape` for adapting neurons: neuron ``i`` carries its own adaptation ``st[:, i]`` (mV).

    Between spikes the components follow the step of
    :mod:`popdens.solvers._refractory_adapting` (the density solver's bin
    step); a spike adds ``kick`` to every component of the neuron that fired:
    each neuron's adaptation is its own, exactly as in the model.
    """
    n = u.shape[0]
    n_steps = mu.shape[0] - 1
    n_comp = kinds.shape[0]
    e_dt = math.exp(-dt / tau_m)
    cap = spk_t.shape[0]
    for k in range(n_steps):
        if record and cap - n_spk < 2 * n:
            return k, n_spk, True  # as in run_escape
        mu0 = mu[k]
        mu1 = mu[k + 1]
        count = 0
        su = 0.0
        refr = 0
        for i in range(n):
            u0 = u[i]
            w0, w1, th1 = adapt_start(kinds, decay, coup, rest, st, i, u0)
            un, hn, big_h = _bin_step(ncode, npar, nops, nargs, tau_m, reset, boundary, has_cutoff,
                                      hcode, hpar, hops, hargs, theta + th1, uses_slope,
                                      age[i], tau_ref, dt, e_dt, u0, h[i], mu0 - w0, mu1 - w1, stack, xbuf)
            adapt_end(kinds, decay, coup, rest, st, i, u0, un)
            lam[i] += big_h
            if lam[i] >= thr[i]:
                count += 1
                if record:
                    spk_t[n_spk] = t0 + (k + 0.5) * dt
                    spk_i[n_spk] = i
                    n_spk += 1
                for c in range(n_comp):
                    st[c, i] += kick[c]
                wn, thn = adapt_sums(kinds, st, i)
                u[i], h[i] = _newborn(ncode, npar, nops, nargs, tau_m, reset, hcode, hpar, hops, hargs,
                                      theta + thn, uses_slope, tau_ref, dt, mu1 - wn, stack, xbuf)
                # firing again within the birth step (tau_ref < dt/2), each spike with its kick
                s_nb = _refire_survival(ncode, npar, nops, nargs, tau_m, reset, hcode, hpar, hops, hargs,
                                        theta + thn, uses_slope, tau_ref, dt, mu1 - wn, h[i], stack, xbuf)
                while s_nb < 1.0 and np.random.random() >= s_nb:
                    count += 1
                    if record and n_spk < cap:
                        spk_t[n_spk] = t0 + (k + 0.5) * dt
                        spk_i[n_spk] = i
                        n_spk += 1
                    for c in range(n_comp):
                        st[c, i] += kick[c]
                    wn, thn = adapt_sums(kinds, st, i)
                    u[i], h[i] = _newborn(ncode, npar, nops, nargs, tau_m, reset, hcode, hpar, hops, hargs,
                                          theta + thn, uses_slope, tau_ref, dt, mu1 - wn, stack, xbuf)
                    s_nb = _refire_survival(ncode, npar, nops, nargs, tau_m, reset, hcode, hpar, hops, hargs,
                                            theta + thn, uses_slope, tau_ref, dt, mu1 - wn, h[i], stack, xbuf)
                age[i] = 0.5 * dt
                lam[i] = 0.0
                thr[i] = np.random.exponential(1.0)
            else:
                u[i] = un
                h[i] = hn
                age[i] += dt
            su += u[i]
            if age[i] < tau_ref - 1e-9 * dt:
                refr += 1
        out_count[k] = count
        out_mean_u[k] = su / n
        out_refr[k] = refr / n
    return n_steps, n_spk, False
