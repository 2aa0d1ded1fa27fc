"""Monte Carlo twin for conductance input: N neurons driven through exponentially decaying conductances.

Each neuron obeys ``tau_m du/dt = F(u) + mu + g_e (E_e - u) + g_i (E_i - u)``
(:class:`popdens.ConductanceNoise`; conductances in leak units); each
conductance jumps by its weight at the arrivals of an independent Poisson
train and decays with its time constant.  The conductances are simulated
exactly, with no diffusion or effective-time-constant approximation:

* per step ``h`` and input type, the number of arrivals is Poisson with mean
  ``nu h`` and each arrival time is uniform in the step; the conductance at
  the step end, ``g e^{-h/tau} + w sum_k e^{-(h - s_k)/tau}``, and its
  integral over the step, ``g tau (1 - e^{-h/tau}) + w tau sum_k (1 -
  e^{-(h - s_k)/tau})``, are exact;
* the potential takes the step with the step-averaged conductances: for the
  LIF the exact exponential step of the linear equation they make (exact
  when the conductances are constant over the step; its error is of order
  ``h`` times the conductance's change within the step), Heun's step for
  other models.

A spike is recorded when ``u`` ends a step at or above the ``boundary``; it
is placed at the middle of the step and the neuron is held at ``reset`` for
``refractory`` ms from then (as in :mod:`popdens.twins._diffusive`), while its
conductances keep evolving (they belong to the synapses).  The default step
(:func:`popdens.montecarlo`) is a twentieth of the shorter synaptic time
constant and at most 0.02 ms; the step's bias is measured in the tests.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from ..model._kernels import NO_REFCOUNT, drift_value
from ..model.neurons import CODE_LIF
from ._diffusive import REF_TOL

__all__ = ["ConductanceEnsemble", "neuron_step", "potential_step"]


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def _arrivals(lam, w, tau, h):  # pragma: no cover - compiled
    """Conductance added at the step end and its integral over the step (ms) by this step's arrivals."""
    k = np.random.poisson(lam) if lam > 0.0 else 0
    add = 0.0
    integ = 0.0
    for _ in range(k):
        e = math.exp(-(h * np.random.random()) / tau)  # time from the arrival to the step end: uniform
        add += w * e
        integ += w * tau * (1.0 - e)
    return add, integ


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def potential_step(lif, ncode, npar, nops, nargs, rest, tau_m, boundary, ui, hs, m, gsum, grev,
                   stack, xbuf):  # pragma: no cover - compiled
    """Potential after ``hs`` ms at constant conductances: ``gsum = sum_x g_x``, ``grev = sum_x g_x E_x``.

    ``tau_m du/dt = F(u) + m + grev - gsum u``: the exact exponential step for the LIF, Heun's step
    otherwise (Euler's when the predictor crosses ``boundary``).
    """
    if lif:
        gt = 1.0 + gsum
        u_inf = (rest + m + grev) / gt
        return u_inf + (ui - u_inf) * math.exp(-hs * gt / tau_m)
    f0 = (drift_value(ncode, npar, nops, nargs, ui, stack, xbuf) + m + grev - gsum * ui) / tau_m
    up = ui + hs * f0
    if up < boundary:
        f1 = (drift_value(ncode, npar, nops, nargs, up, stack, xbuf) + m + grev - gsum * up) / tau_m
        return ui + 0.5 * hs * (f0 + f1)
    return up


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def neuron_step(ref, i, ui, h, tol, reset, lif, ncode, npar, nops, nargs, rest, tau_m, boundary, m, gsum, grev,
                stack, xbuf):  # pragma: no cover - compiled
    """Potential of neuron ``i`` at the end of a step of ``h`` ms, and True when it was refractory throughout.

    ``ref[i]`` (refractory time left, ms) is updated; a neuron whose refractory time ends within the
    step integrates the rest of it from ``reset`` (:func:`potential_step`).
    """
    hs = h
    r = ref[i]
    if r > 0.0:
        r -= h
        if r > tol:
            ref[i] = r
            return reset, True
        ref[i] = 0.0
        hs = -r if r < 0.0 else 0.0
        ui = reset
        if hs <= tol:
            return reset, False
    return potential_step(lif, ncode, npar, nops, nargs, rest, tau_m, boundary, ui, hs, m, gsum, grev,
                          stack, xbuf), False


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def run_conductance(ncode, npar, nops, nargs, tau_m, reset, boundary, tau_ref, dt,
                    lam_e, w_e, tau_e, rev_e, lam_i, w_i, tau_i, rev_i,
                    u, g_e, g_i, ref, mu, t0, record, spk_t, spk_i, n_spk,
                    out_count, out_mean_u, out_refr, stack, xbuf):  # pragma: no cover - compiled
    """Advance all neurons ``len(mu) - 1`` steps in place.

    ``lam_x``: mean arrivals per step; ``g_x``: conductances (leak units); ``ref``: refractory time
    left (ms).  Returns ``(steps_done, n_spikes_recorded, buffer_full)``.
    """
    n = u.shape[0]
    n_steps = mu.shape[0] - 1
    cap = spk_t.shape[0]
    h = dt
    de = math.exp(-h / tau_e)
    di = math.exp(-h / tau_i)
    ie = tau_e * (1.0 - de)
    ii = tau_i * (1.0 - di)
    lif = ncode == CODE_LIF
    tol = REF_TOL * dt
    rest = npar[0] if lif else 0.0
    for k in range(n_steps):
        if record and cap - n_spk < n:
            return k, n_spk, True
        m = 0.5 * (mu[k] + mu[k + 1])
        count = 0
        su = 0.0
        refr = 0
        for i in range(n):
            ge0 = g_e[i]
            gi0 = g_i[i]
            add_e, int_e = _arrivals(lam_e, w_e, tau_e, h)
            add_i, int_i = _arrivals(lam_i, w_i, tau_i, h)
            g_e[i] = ge0 * de + add_e
            g_i[i] = gi0 * di + add_i
            ge = (ge0 * ie + int_e) / h  # step averages
            gi = (gi0 * ii + int_i) / h
            ui, held = neuron_step(ref, i, u[i], h, tol, reset, lif, ncode, npar, nops, nargs, rest, tau_m, boundary,
                                   m, ge + gi, ge * rev_e + gi * rev_i, stack, xbuf)
            if held:
                refr += 1
                su += reset
                continue
            if ui >= boundary or not math.isfinite(ui):
                count += 1
                if record:
                    spk_t[n_spk] = t0 + (k + 0.5) * h
                    spk_i[n_spk] = i
                    n_spk += 1
                ui = reset
                r = tau_ref - 0.5 * h
                if r > tol:
                    ref[i] = r
                    refr += 1
                else:
                    ref[i] = 0.0
            u[i] = ui
            su += ui
        out_count[k] = count
        out_mean_u[k] = su / n
        out_refr[k] = refr / n
    return n_steps, n_spk, False


class ConductanceEnsemble:
    """State of N neurons with conductance input (used by :func:`popdens.montecarlo`).

    Parameters
    ----------
    population : Population
        Neuron model with :class:`~popdens.ConductanceNoise`.
    n : int
        Number of neurons.
    dt : float
        Time step (ms).
    rng : numpy.random.Generator
        Generator for the initial conductances.
    """

    def __init__(self, population, n, dt, rng):
        nrn = population.neuron
        if getattr(nrn, "adaptation", None):
            raise ValueError("the conductance Monte Carlo twin does not support `adaptation` yet; "
                             "remove it from the neuron model")
        noise = population.noise
        self.dt = float(dt)
        chans = noise.channels()
        nu_e, w_e, tau_e, rev_e = chans[0]
        nu_i, w_i, tau_i, rev_i = chans[1] if len(chans) > 1 else (0.0, 0.0, noise.inh_tau, 0.0)
        self.args = (nrn.code, np.ascontiguousarray(nrn.kernel_params, dtype=float), nrn.program[0],
                     nrn.program[1], float(nrn.tau_m), float(nrn.reset), float(nrn.boundary),
                     float(nrn.refractory), self.dt, nu_e * self.dt, w_e, tau_e, rev_e, nu_i * self.dt, w_i, tau_i,
                     rev_i)
        ge0, gi0 = noise.mean_conductances()
        # start from the stationary mean and spread (Campbell) of each conductance, clipped at 0
        self.g_e = np.maximum(ge0 + math.sqrt(w_e * ge0 / 2.0) * rng.standard_normal(n), 0.0)
        self.g_i = np.maximum(gi0 + math.sqrt(w_i * gi0 / 2.0) * rng.standard_normal(n), 0.0) if gi0 > 0 \
            else np.zeros(n)
        self.u = np.full(n, float(nrn.reset))
        self.ref = np.zeros(n)
        self.stack = np.empty(nrn.program[0].size + 2)
        self.xbuf = np.zeros(3)
        self.reset = float(nrn.reset)

    def run(self, mu, sig, t0, record, spk_t, spk_i, n_spk):
        """Advance ``len(mu) - 1`` steps from time ``t0`` (ms) with drive ``mu`` (mV) at the step
        boundaries (``sig`` is unused)."""
        mu = np.ascontiguousarray(mu, dtype=float)
        n = mu.size - 1
        count = np.empty(n, dtype=np.int64)
        mean_u = np.empty(n)
        refr = np.empty(n)
        done, n_spk, full = run_conductance(*self.args, self.u, self.g_e, self.g_i, self.ref, mu, float(t0), record,
                                            spk_t, spk_i, n_spk, count, mean_u, refr, self.stack, self.xbuf)
        return done, n_spk, full, count[:done], mean_u[:done], refr[:done]

    def instantaneous_rate(self, population, mu):
        """Not defined for a finite ensemble: NaN."""
        return float("nan")

    def start_synchronous(self, population, mu0):
        """All neurons fire at t = 0: reset and refractory."""
        self.u[:] = self.reset
        self.ref[:] = float(population.neuron.refractory)

    def mean_potential(self):
        return float(self.u.mean())

    def refractory_fraction(self):
        return float(np.mean(self.ref > REF_TOL * self.dt))
