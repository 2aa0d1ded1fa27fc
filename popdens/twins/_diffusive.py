"""Monte Carlo twin for white-noise populations: N independent diffusing neurons.

Each neuron obeys ``tau_m du = (F(u) + mu) dt + sigma sqrt(tau_m) dW`` and
fires when ``u`` reaches the neuron's ``boundary``.

* LIF: exact Ornstein--Uhlenbeck update (Gillespie 1996): the mean follows
  the exact solution for a drive linear within the step, the noise has
  variance ``sigma**2 (1 - exp(-2 h/tau_m)) / 2``.
* Other drifts: Euler--Maruyama.
* Crossings of the boundary between two grid times (both end points below
  it) are detected with the Brownian-bridge probability

  .. math:: P = \\exp\\!\\Big(-\\frac{2(\\theta - u_0)(\\theta - u_1)}{\\sigma_{\\rm eff}^2\\,h}\\Big),
            \\qquad \\sigma_{\\rm eff}^2 = \\sigma^2/\\tau_m,

  the probability that a Brownian motion with these end points reaches
  ``theta`` (reflection principle; its use for integrate-and-fire neurons:
  Giraudo & Sacerdote 1999, Honerkamp 1993).  Without it, the discrete
  sampling misses crossings and the rate is too low by O(sqrt(dt)).

Spikes are placed at the middle of their step (the density solver spreads a
step's outflow uniformly over the step, which has the same mean); the
neuron is held at ``reset`` for ``refractory`` ms from that time and then
integrates from ``reset`` for the rest of its step.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from ..model._kernels import NO_REFCOUNT, advance_potential, drift_value
from ..model.adaptation import step_args
from ..model.neurons import CODE_LIF
from ..solvers._refractory_adapting import adapt_end, adapt_start, adapt_sums

__all__ = ["DiffusiveEnsemble"]

#: Tolerance (in units of dt) for the end of the refractory period.
REF_TOL = 1e-9
#: Bridge exponents above this are not sampled: the crossing probability
#: exp(-40) ~ 4e-18 is far below anything a finite ensemble can resolve.
BRIDGE_SKIP = 40.0


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def _move(ncode, npar, nops, nargs, tau_m, u, h, mu0, mu1, sigma, stack, xbuf):  # pragma: no cover
    """One stochastic update of length ``h`` ms from ``u`` (mV)."""
    if ncode == CODE_LIF:
        mean = advance_potential(ncode, npar, nops, nargs, tau_m, u, h, mu0, mu1, stack, xbuf)
        var = 0.5 * sigma * sigma * (-math.expm1(-2.0 * h / tau_m))
        return mean + math.sqrt(var) * np.random.standard_normal()
    f = drift_value(ncode, npar, nops, nargs, u, stack, xbuf)
    return u + h * (f + mu0) / tau_m + sigma * math.sqrt(h / tau_m) * np.random.standard_normal()


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def run_diffusive(ncode, npar, nops, nargs, tau_m, reset, boundary, tau_ref, dt, bridge,
                  u, ref, mu, sig, t0, record, spk_t, spk_i, n_spk,
                  out_count, out_mean_u, out_refr, stack, xbuf):  # pragma: no cover - compiled
    """Advance all neurons ``len(mu) - 1`` steps in place.

    ``ref`` is the remaining refractory time (ms) of each neuron.  Returns
    ``(steps_done, n_spikes_recorded, buffer_full)``.
    """
    n = u.shape[0]
    n_steps = mu.shape[0] - 1
    cap = spk_t.shape[0]
    tol = REF_TOL * dt
    for k in range(n_steps):
        if record and cap - n_spk < n:
            return k, n_spk, True
        mu0 = mu[k]
        mu1 = mu[k + 1]
        sigma = 0.5 * (sig[k] + sig[k + 1])
        s2 = sigma * sigma / tau_m
        count = 0
        su = 0.0
        refr = 0
        for i in range(n):
            h = dt
            ms = mu0
            u0 = u[i]
            if ref[i] > 0.0:
                r = ref[i] - dt
                if r > tol:
                    ref[i] = r
                    su += reset
                    refr += 1
                    continue
                ref[i] = 0.0
                h = -r if r < 0.0 else 0.0
                ms = mu1 - (mu1 - mu0) * h / dt
                u0 = reset
                if h <= tol:
                    u[i] = reset
                    su += reset
                    continue
            u1 = _move(ncode, npar, nops, nargs, tau_m, u0, h, ms, mu1, sigma, stack, xbuf)
            fired = u1 >= boundary
            if not fired and bridge:
                x = 2.0 * (boundary - u0) * (boundary - u1) / (s2 * h)
                if x < BRIDGE_SKIP:
                    fired = np.random.random() < math.exp(-x)
            if fired:
                count += 1
                if record:
                    spk_t[n_spk] = t0 + (k + 0.5) * dt
                    spk_i[n_spk] = i
                    n_spk += 1
                r = tau_ref - 0.5 * dt
                if r > tol:
                    ref[i] = r
                    u1 = reset
                    refr += 1
                else:
                    ref[i] = 0.0
                    hf = -r if r < 0.0 else 0.0
                    u1 = reset
                    if hf > tol:
                        u1 = _move(ncode, npar, nops, nargs, tau_m, reset, hf, mu1 - (mu1 - mu0) * hf / dt,
                                   mu1, sigma, stack, xbuf)
                        if u1 >= boundary:  # pragma: no cover - needs absurd noise
                            u1 = reset
            u[i] = u1
            su += u1
        out_count[k] = count
        out_mean_u[k] = su / n
        out_refr[k] = refr / n
    return n_steps, n_spk, False


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def run_diffusive_adapting(ncode, npar, nops, nargs, tau_m, reset, boundary, tau_ref, dt, bridge,
                           kinds, decay, coup, kick, rest, st,
                           u, ref, mu, sig, t0, record, spk_t, spk_i, n_spk,
                           out_count, out_mean_u, out_refr, stack, xbuf):  # pragma: no cover - compiled
    """:func:`run_diffusive` for neurons with adaptation currents: neuron ``i`` carries ``st[:, i]`` (mV).

    The drive of each neuron is ``mu - sum w``, linear within the step
    (end value predicted from the start potential); the currents follow the
    step of :mod:`popdens.solvers._refractory_adapting` and jump by ``kick``
    at the neuron's spike.
    """
    n = u.shape[0]
    n_steps = mu.shape[0] - 1
    n_comp = kinds.shape[0]
    cap = spk_t.shape[0]
    tol = REF_TOL * dt
    for k in range(n_steps):
        if record and cap - n_spk < n:
            return k, n_spk, True
        mu0 = mu[k]
        mu1 = mu[k + 1]
        sigma = 0.5 * (sig[k] + sig[k + 1])
        s2 = sigma * sigma / tau_m
        count = 0
        su = 0.0
        refr = 0
        for i in range(n):
            u_start = u[i]
            w0, w1, _ = adapt_start(kinds, decay, coup, rest, st, i, u_start)
            h = dt
            ms = mu0 - w0
            u0 = u_start
            if ref[i] > 0.0:
                r = ref[i] - dt
                if r > tol:
                    ref[i] = r
                    adapt_end(kinds, decay, coup, rest, st, i, reset, reset)
                    su += reset
                    refr += 1
                    continue
                ref[i] = 0.0
                h = -r if r < 0.0 else 0.0
                ms = (mu1 - w1) - ((mu1 - w1) - (mu0 - w0)) * h / dt
                u0 = reset
                if h <= tol:
                    u[i] = reset
                    adapt_end(kinds, decay, coup, rest, st, i, reset, reset)
                    su += reset
                    continue
            u1 = _move(ncode, npar, nops, nargs, tau_m, u0, h, ms, mu1 - w1, sigma, stack, xbuf)
            fired = u1 >= boundary
            if not fired and bridge:
                x = 2.0 * (boundary - u0) * (boundary - u1) / (s2 * h)
                if x < BRIDGE_SKIP:
                    fired = np.random.random() < math.exp(-x)
            if fired:
                adapt_end(kinds, decay, coup, rest, st, i, u_start, boundary)
                for c in range(n_comp):
                    st[c, i] += kick[c]
                count += 1
                if record:
                    spk_t[n_spk] = t0 + (k + 0.5) * dt
                    spk_i[n_spk] = i
                    n_spk += 1
                r = tau_ref - 0.5 * dt
                if r > tol:
                    ref[i] = r
                    u1 = reset
                    refr += 1
                else:
                    ref[i] = 0.0
                    hf = -r if r < 0.0 else 0.0
                    u1 = reset
                    if hf > tol:
                        wn, _ = adapt_sums(kinds, st, i)
                        u1 = _move(ncode, npar, nops, nargs, tau_m, reset, hf, mu1 - wn - (mu1 - mu0) * hf / dt,
                                   mu1 - wn, sigma, stack, xbuf)
                        if u1 >= boundary:  # pragma: no cover - needs absurd noise
                            u1 = reset
            else:
                adapt_end(kinds, decay, coup, rest, st, i, u_start, u1)
            u[i] = u1
            su += u1
        out_count[k] = count
        out_mean_u[k] = su / n
        out_refr[k] = refr / n
    return n_steps, n_spk, False


class DiffusiveEnsemble:
    """State of N white-noise neurons (used by :func:`popdens.montecarlo`).

    Parameters
    ----------
    population : Population
        Neuron model with :class:`~popdens.WhiteNoise`.
    n : int
        Number of neurons.
    dt : float
        Time step (ms).
    rng : numpy.random.Generator
        Generator for the initial state (the compiled kernel's generator is
        seeded by the caller).
    bridge : bool, optional
        Detect threshold crossings within a step with the Brownian-bridge
        probability (default True).
    """

    def __init__(self, population, n, dt, rng, bridge=True):
        nrn = population.neuron
        self.population = population
        self.dt = float(dt)
        self.bridge = bool(bridge)
        self.args = (nrn.code, np.ascontiguousarray(nrn.kernel_params, dtype=float), nrn.program[0],
                     nrn.program[1], float(nrn.tau_m), float(nrn.reset), float(nrn.boundary),
                     float(nrn.refractory), self.dt, self.bridge)
        self.u = np.full(n, float(nrn.reset))
        self.ref = np.zeros(n)
        self.stack = np.empty(nrn.program[0].size + 2)
        self.xbuf = np.zeros(3)
        self.reset = float(nrn.reset)
        self.adapt = step_args(nrn, self.dt) if nrn.adapting else None
        self.st = np.zeros((len(nrn.adaptation), n))  # adaptation current of each neuron (mV)
        _ = rng  # the initial state is deterministic (all at reset)

    def run(self, mu, sig, t0, record, spk_t, spk_i, n_spk):
        """Advance ``len(mu) - 1`` steps from time ``t0`` (ms) with drive ``mu`` and noise amplitude
        ``sig`` (mV) at the step boundaries."""
        mu = np.ascontiguousarray(mu, dtype=float)
        n = mu.size - 1
        sig = np.ascontiguousarray(sig, dtype=float)
        if not np.all(np.isfinite(sig) & (sig > 0)):
            raise FloatingPointError("the noise amplitude must stay finite and > 0 mV")
        count = np.empty(n, dtype=np.int64)
        mean_u = np.empty(n)
        refr = np.empty(n)
        if self.adapt is None:
            done, n_spk, full = run_diffusive(*self.args, self.u, self.ref, mu, sig, float(t0), record, spk_t, spk_i,
                                              n_spk, count, mean_u, refr, self.stack, self.xbuf)
        else:
            done, n_spk, full = run_diffusive_adapting(*self.args, *self.adapt, self.st, self.u, self.ref, mu, sig,
                                                       float(t0), record, spk_t, spk_i, n_spk, count, mean_u, refr,
                                                       self.stack, self.xbuf)
        return done, n_spk, full, count[:done], mean_u[:done], refr[:done]

    def instantaneous_rate(self, population, mu):
        """Not defined for diffusive noise (a finite ensemble has no flux): NaN."""
        return float("nan")

    def start_synchronous(self, population, mu0):
        """All neurons fire at t = 0 (with no earlier spikes): reset and refractory for the full period."""
        self.u[:] = self.reset
        self.ref[:] = float(population.neuron.refractory)
        if self.adapt is not None:
            self.st[:] = self.adapt[3][:, None]

    def mean_potential(self):
        return float(self.u.mean())

    def refractory_fraction(self):
        return float(np.mean(self.ref > REF_TOL * self.dt))
