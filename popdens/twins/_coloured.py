"""Monte Carlo twin for coloured-noise populations: N neurons driven by a filtered current.

Each neuron obeys ``tau_m du = (F(u) + mu + I) dt`` with the synaptic current
``tau_s dI = -I dt + sigma sqrt(tau_m) dW`` (:class:`popdens.ColouredNoise`),
and fires when ``u`` reaches the neuron's ``boundary``.

* The current and its integral over a step are drawn exactly and jointly
  (the Ornstein--Uhlenbeck process and its integral are jointly Gaussian:
  Gillespie 1996, Phys. Rev. E 54:2084, eqs. 2.47-2.48): with ``b = h/tau_s``,

  .. math::
      I_1 = I_0 e^{-b} + n_1,\\qquad Y = \\int_0^h I\\,dt = I_0\\tau_s(1 - e^{-b}) + n_2,

  ``var n_1 = c^2 tau_s (1 - e^{-2b})/2``, ``var n_2 = c^2 tau_s^3 [b - 2(1 - e^{-b}) + (1 - e^{-2b})/2]``,
  ``cov = c^2 tau_s^2 (1 - e^{-b})^2 / 2`` with ``c = sigma sqrt(tau_m)/tau_s``.
* The potential takes the step of the white-noise twin's deterministic part
  (exact for the LIF, Heun otherwise) with the drive raised by the step's mean
  current ``Y/h``.
* The potential is differentiable, so a crossing inside a step shows as a
  maximum between the end points: when the velocity ``(F(u) + mu + I)/tau_m``
  changes sign from + to - within the step, the cubic Hermite interpolant
  through both ends is checked against the boundary.

The current keeps evolving while the neuron is refractory (it is the
synapse's, not the neuron's).  Spikes are placed at the middle of their
step and the neuron is held at ``reset`` for ``refractory`` ms from then,
as in :mod:`popdens.twins._diffusive`.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from ..model._kernels import NO_REFCOUNT, advance_potential, drift_value
from ._diffusive import REF_TOL

__all__ = ["ColouredEnsemble", "ou_step_moments"]


@numba.njit(cache=True, nogil=True)
def ou_step_moments(h, tau_s, c):  # pragma: no cover - compiled
    """(e^{-b}, sd of n_1, n_2 regression on n_1, residual sd of n_2) for one step ``h`` (ms)."""
    b = h / tau_s
    em = -math.expm1(-b)  # 1 - e^{-b}
    em2 = -math.expm1(-2.0 * b)
    v1 = c * c * tau_s * 0.5 * em2
    # b - 2(1 - e^-b) + (1 - e^-2b)/2, by its series for small b (cancellation)
    if b < 1e-2:
        g = b ** 3 / 3.0 - b ** 4 / 4.0 + 7.0 * b ** 5 / 60.0 - b ** 6 / 24.0
    else:
        g = b - 2.0 * em + 0.5 * em2
    v2 = c * c * tau_s ** 3 * g
    cov = 0.5 * c * c * tau_s * tau_s * em * em
    s1 = math.sqrt(v1)
    reg = cov / v1 if v1 > 0.0 else 0.0
    res = v2 - cov * reg
    return 1.0 - em, s1, reg, math.sqrt(res) if res > 0.0 else 0.0


@numba.njit(cache=True, nogil=True, inline="always")
def _hermite_max(u0, u1, v0, v1, h):  # pragma: no cover - compiled
    """Largest value of the cubic Hermite interpolant on [0, h] (end values u, slopes v)."""
    # p(s) = u0 + v0 s + a s^2 + b s^3 ; p'(s) = v0 + 2 a s + 3 b s^2
    d = u1 - u0
    a = (3.0 * d - (2.0 * v0 + v1) * h) / (h * h)
    b = (-2.0 * d + (v0 + v1) * h) / (h * h * h)
    best = u0 if u0 > u1 else u1
    if b == 0.0:
        if a != 0.0:
            s = -v0 / (2.0 * a)
            if 0.0 < s < h:
                val = u0 + v0 * s + a * s * s
                if val > best:
                    best = val
        return best
    disc = a * a - 3.0 * b * v0
    if disc < 0.0:
        return best
    sq = math.sqrt(disc)
    for sgn in (-1.0, 1.0):
        s = (-a + sgn * sq) / (3.0 * b)
        if 0.0 < s < h:
            val = u0 + s * (v0 + s * (a + b * s))
            if val > best:
                best = val
    return best


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def run_coloured(ncode, npar, nops, nargs, tau_m, reset, boundary, has_cutoff, tau_ref, dt, tau_s,
                 u, cur, ref, mu, sig, t0, record, spk_t, spk_i, n_spk,
                 out_count, out_mean_u, out_refr, stack, xbuf):  # pragma: no cover - compiled
    """Advance all neurons ``len(mu) - 1`` steps in place; ``cur`` is the synaptic current (mV).

    Returns ``(steps_done, n_spikes_recorded, buffer_full)``.
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
        c = sigma * math.sqrt(tau_m) / tau_s
        decay, s1, reg, s2 = ou_step_moments(dt, tau_s, c)
        count = 0
        su = 0.0
        refr = 0
        for i in range(n):
            # the synaptic current over the full step, jointly with its integral
            i0 = cur[i]
            z1 = np.random.standard_normal()
            z2 = np.random.standard_normal()
            n1 = s1 * z1
            i1 = i0 * decay + n1
            y = i0 * tau_s * (1.0 - decay) + reg * n1 + s2 * z2
            cur[i] = i1
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
            # mean current over the part of the step the neuron integrates (the whole
            # step's mean when it is only partly free: a first-order approximation there)
            ybar = y / dt
            u1 = advance_potential(ncode, npar, nops, nargs, tau_m, u0, h, ms + ybar, mu1 + ybar, stack, xbuf)
            fired = u1 >= boundary or not math.isfinite(u1)
            if not fired and not has_cutoff:
                v0 = (drift_value(ncode, npar, nops, nargs, u0, stack, xbuf) + ms + i0) / tau_m
                v1 = (drift_value(ncode, npar, nops, nargs, u1, stack, xbuf) + mu1 + i1) / tau_m
                if v0 > 0.0 and v1 < 0.0:
                    fired = _hermite_max(u0, u1, v0, v1, h) >= boundary
            if fired:
                count += 1
                if record:
                    spk_t[n_spk] = t0 + (k + 0.5) * dt
                    spk_i[n_spk] = i
                    n_spk += 1
                r = tau_ref - 0.5 * dt
                u1 = reset
                if r > tol:
                    ref[i] = r
                    refr += 1
                else:
                    ref[i] = 0.0
                    hf = -r if r < 0.0 else 0.0
                    if hf > tol:
                        u1 = advance_potential(ncode, npar, nops, nargs, tau_m, reset, hf,
                                               mu1 - (mu1 - mu0) * hf / dt + ybar, mu1 + ybar, stack, xbuf)
                        if u1 >= boundary:  # pragma: no cover - needs absurd noise
                            u1 = reset
            u[i] = u1
            su += u1
        out_count[k] = count
        out_mean_u[k] = su / n
        out_refr[k] = refr / n
    return n_steps, n_spk, False


class ColouredEnsemble:
    """State of N coloured-noise neurons (used by :func:`popdens.montecarlo`).

    Parameters
    ----------
    population : Population
        Neuron model with :class:`~popdens.ColouredNoise`.
    n : int
        Number of neurons.
    dt : float
        Time step (ms); should be well below ``tau_syn`` (the white-noise
        limit is approached only as ``dt/tau_syn -> 0``).
    rng : numpy.random.Generator
        Generator for the initial synaptic currents (drawn from their
        stationary distribution at the initial amplitude).
    """

    def __init__(self, population, n, dt, rng):
        nrn = population.neuron
        if getattr(nrn, "adaptation", None):
            raise ValueError("the coloured-noise Monte Carlo twin does not support `adaptation` yet; "
                             "remove it from the neuron model")
        noise = population.noise
        self.population = population
        self.sigma_drive = noise.sigma_drive
        self.dt = float(dt)
        self.tau_s = float(noise.tau_syn)
        self.args = (nrn.code, np.ascontiguousarray(nrn.kernel_params, dtype=float), nrn.program[0],
                     nrn.program[1], float(nrn.tau_m), float(nrn.reset), float(nrn.boundary),
                     bool(nrn.has_cutoff), float(nrn.refractory), self.dt, self.tau_s)
        self.u = np.full(n, float(nrn.reset))
        s0 = float(self.sigma_drive(0.0))
        self.cur = rng.standard_normal(n) * s0 * math.sqrt(nrn.tau_m / (2.0 * self.tau_s))
        self.ref = np.zeros(n)
        self.stack = np.empty(nrn.program[0].size + 2)
        self.xbuf = np.zeros(3)
        self.reset = float(nrn.reset)

    def run(self, mu, sig, t0, record, spk_t, spk_i, n_spk):
        """Advance ``len(mu) - 1`` steps from time ``t0`` (ms) with drive ``mu`` and noise amplitude ``sig``
        (mV) at the step boundaries."""
        mu = np.ascontiguousarray(mu, dtype=float)
        n = mu.size - 1
        sig = np.ascontiguousarray(sig, dtype=float)
        if not np.all(np.isfinite(sig) & (sig >= 0)):
            raise FloatingPointError("the noise amplitude must stay finite and >= 0 mV")
        count = np.empty(n, dtype=np.int64)
        mean_u = np.empty(n)
        refr = np.empty(n)
        done, n_spk, full = run_coloured(*self.args, self.u, self.cur, self.ref, mu, sig, float(t0), record,
                                         spk_t, spk_i, n_spk, count, mean_u, refr, self.stack, self.xbuf)
        return done, n_spk, full, count[:done], mean_u[:done], refr[:done]

    def instantaneous_rate(self, population, mu):
        """Not defined for a finite ensemble (no flux): NaN."""
        return float("nan")

    def start_synchronous(self, population, mu0):
        """All neurons fire at t = 0: reset and refractory; the currents keep their values."""
        self.u[:] = self.reset
        self.ref[:] = float(population.neuron.refractory)

    def mean_potential(self):
        return float(self.u.mean())

    def refractory_fraction(self):
        return float(np.mean(self.ref > REF_TOL * self.dt))
