"""Monte Carlo twin for shot-noise populations: N neurons driven by Poisson input spikes.

Each neuron obeys ``tau_m du/dt = F(u) + mu`` between input spikes; its
excitatory and inhibitory inputs are independent Poisson trains
(:class:`popdens.ShotNoise`) whose arrival times are drawn exactly
(exponential waiting times, kept per neuron across steps), and each input
spike moves ``u`` at once by its amplitude (fixed, or exponential of the
given mean).  The run is event-driven inside each step: the potential is
advanced to each arrival with the deterministic step of the other twins
(exact for the LIF, Heun otherwise), the jump applied, and a jump to the
``boundary`` or beyond is a spike at that arrival time.  A crossing by the
drift alone (``rest + mu`` above threshold) is found at the end of the
sub-interval it happens in (within one step).  Input arriving during the
refractory period is lost; the neuron re-enters at ``reset``.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from ..model._kernels import NO_REFCOUNT, advance_potential

__all__ = ["ShotEnsemble"]


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def _amplitude(mean, expo):  # pragma: no cover - compiled
    return np.random.exponential(mean) if expo else mean


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def run_shot(ncode, npar, nops, nargs, tau_m, reset, boundary, tau_ref, dt,
             nu_e, a_e, nu_i, a_i, expo, u, ref, wait_e, wait_i, mu, t0, record, spk_t, spk_i, n_spk,
             out_count, out_mean_u, out_refr, stack, xbuf):  # pragma: no cover - compiled
    """Advance all neurons ``len(mu) - 1`` steps in place.

    ``wait_e``/``wait_i``: time (ms) from the start of the step to each neuron's next excitatory /
    inhibitory arrival; ``ref``: refractory time left (ms); rates ``nu`` in 1/ms, amplitudes in mV.
    Returns ``(steps_done, n_spikes_recorded, buffer_full)``.
    """
    n = u.shape[0]
    n_steps = mu.shape[0] - 1
    cap = spk_t.shape[0]
    inv_e = 1.0 / nu_e if nu_e > 0.0 else 0.0
    inv_i = 1.0 / nu_i if nu_i > 0.0 else 0.0
    for k in range(n_steps):
        if record and cap - n_spk < n:
            return k, n_spk, True
        mu0 = mu[k]
        slope = (mu[k + 1] - mu0) / dt
        count = 0
        su = 0.0
        refr = 0
        for i in range(n):
            t = 0.0
            ui = u[i]
            we = wait_e[i]
            wi = wait_i[i]
            r = ref[i]
            while True:
                if r > 0.0:
                    # refractory until t + r: arrivals before then are lost
                    t_free = t + r
                    if t_free >= dt:
                        r = t_free - dt
                        t = dt
                        while nu_e > 0.0 and we < dt:
                            we += np.random.exponential(inv_e)
                        while nu_i > 0.0 and wi < dt:
                            wi += np.random.exponential(inv_i)
                        break
                    while nu_e > 0.0 and we < t_free:
                        we += np.random.exponential(inv_e)
                    while nu_i > 0.0 and wi < t_free:
                        wi += np.random.exponential(inv_i)
                    t = t_free
                    r = 0.0
                    ui = reset
                te = we if nu_e > 0.0 else math.inf
                ti = wi if nu_i > 0.0 else math.inf
                tn = te if te < ti else ti
                t_end = tn if tn < dt else dt
                if t_end > t:
                    ui = advance_potential(ncode, npar, nops, nargs, tau_m, ui, t_end - t, mu0 + slope * t,
                                           mu0 + slope * t_end, stack, xbuf)
                    if ui >= boundary or not math.isfinite(ui):  # crossing by the drift
                        t = t_end
                        count += 1
                        if record:
                            spk_t[n_spk] = t0 + k * dt + t
                            spk_i[n_spk] = i
                            n_spk += 1
                        ui = reset
                        r = tau_ref
                        if r <= 0.0:
                            r = 0.0
                        continue
                t = t_end
                if t >= dt:
                    break
                if te <= ti:
                    ui += _amplitude(a_e, expo)
                    we += np.random.exponential(inv_e)
                    if ui >= boundary:
                        count += 1
                        if record:
                            spk_t[n_spk] = t0 + k * dt + t
                            spk_i[n_spk] = i
                            n_spk += 1
                        ui = reset
                        r = tau_ref
                else:
                    ui -= _amplitude(a_i, expo)
                    wi += np.random.exponential(inv_i)
            u[i] = ui if r <= 0.0 else reset
            ref[i] = r
            wait_e[i] = we - dt
            wait_i[i] = wi - dt
            if r > 0.0:
                refr += 1
            su += u[i]
        out_count[k] = count
        out_mean_u[k] = su / n
        out_refr[k] = refr / n
    return n_steps, n_spk, False


class ShotEnsemble:
    """State of N shot-noise neurons (used by :func:`popdens.montecarlo`).

    Parameters
    ----------
    population : Population
        Neuron model with :class:`~popdens.ShotNoise`.
    n : int
        Number of neurons.
    dt : float
        Time step (ms) of the drive's sampling and of the recording (the
        input arrivals are exact at any step).
    rng : numpy.random.Generator
        Generator for the first waiting times.
    """

    def __init__(self, population, n, dt, rng):
        nrn = population.neuron
        if getattr(nrn, "adaptation", None):
            raise ValueError("the shot-noise Monte Carlo twin does not support `adaptation` yet; "
                             "remove it from the neuron model")
        noise = population.noise
        self.dt = float(dt)
        nu_e, nu_i = noise.exc_rate * 1e-3, noise.inh_rate * 1e-3
        self.args = (nrn.code, np.ascontiguousarray(nrn.kernel_params, dtype=float), nrn.program[0],
                     nrn.program[1], float(nrn.tau_m), float(nrn.reset), float(nrn.boundary),
                     float(nrn.refractory), self.dt, nu_e, float(noise.exc_psp), nu_i, float(noise.inh_psp),
                     bool(noise.exponential))
        self.u = np.full(n, float(nrn.reset))
        self.ref = np.zeros(n)
        self.wait_e = rng.exponential(1.0 / nu_e, size=n) if nu_e > 0 else np.full(n, np.inf)
        self.wait_i = rng.exponential(1.0 / nu_i, size=n) if nu_i > 0 else np.full(n, np.inf)
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
        done, n_spk, full = run_shot(*self.args, self.u, self.ref, self.wait_e, self.wait_i, mu, float(t0),
                                     record, spk_t, spk_i, n_spk, count, mean_u, refr, self.stack, self.xbuf)
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
        return float(np.mean(self.ref > 0.0))
