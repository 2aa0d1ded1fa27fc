"""Benchmark: the speed targets of the fits.

* ISI fit of 10^4 intervals of a white-noise LIF (mu, sigma free), data from the twin;
* PSTH fit of 100 trials x 10 s of an escape-noise LIF under a two-sine stimulus
  (rate, width, scale free), data from the twin.

Both are timed (wall and CPU), with their log-likelihood evaluations.  The
spike-train likelihood's cost per bin-step is set beside a minimal compiled
loop of the same scheme (exact LIF step, exponential hazard, trapezoidal
integral, Bernoulli log-likelihood of the binned spikes) timed in the same
run, so the ratio is comparable across machines.

Run:  popdens bench fitting
"""

from __future__ import annotations

import math
import time

import numba
import numpy as np

import popdens
from popdens import SpikeTrains, drive, hazard

TARGET_S = 10.0


@numba.njit(cache=True, nogil=True)
def _minimal_loglik(mu, bins, first, tau, reset, theta, r0, width, tau_ref, dt):  # pragma: no cover
    """The scheme at its barest: one trial after another, no adaptation, refractory in whole steps."""
    e = math.exp(-dt / tau)
    n_ref = int(round(tau_ref / dt))
    ll = 0.0
    for i in range(first.shape[0] - 1):
        j = first[i]
        if j == first[i + 1]:
            continue
        k = bins[j] + 1
        j += 1
        u = reset
        h = r0 * math.exp((u - theta) / width)
        age = 0
        while k < mu.shape[0] - 1:
            if age < n_ref:
                big_h = 0.0
            else:
                u_new = mu[k + 1] + (u - mu[k]) * e
                h_new = r0 * math.exp((u_new - theta) / width)
                big_h = 0.5 * (h + h_new) * dt * 1e-3
                u, h = u_new, h_new
            if j < first[i + 1] and bins[j] == k:
                ll += math.log(-math.expm1(-big_h)) if big_h > 0.0 else -1e300
                j += 1
                u = reset
                h = r0 * math.exp((u - theta) / width)
                age = 0
            else:
                ll -= big_h
                age += 1
            k += 1
    return ll


def _timed(fn):
    w0, c0 = time.perf_counter(), time.process_time()
    out = fn()
    return out, time.perf_counter() - w0, time.process_time() - c0


def main() -> None:
    # --- ISI fit, 1e4 intervals of a white-noise LIF
    cell = popdens.LIF(tau_m=20.0, threshold=20.0, reset=10.0, refractory=2.0)
    white = popdens.Population(cell, popdens.WhiteNoise(sigma=4.0))
    mc = popdens.montecarlo(white, 18.0, t_end=12500.0, n=50, seed=1, record_spikes=True, dt=0.05)
    sp = SpikeTrains([mc.spike_times[mc.spike_ids == i] for i in range(50)], duration=12500.0)
    isis = sp.isis()[:10_000]
    popdens.fit_isi(white, isis[:200], ["mu", "sigma"], mu=16.0)  # compile / load caches
    fit, wall, cpu = _timed(lambda: popdens.fit_isi(white, isis, ["mu", "sigma"], mu=16.0))
    print("fitting benchmark")
    print(f"  ISI fit, white-noise LIF, {isis.size} ISIs (mu, sigma free): {wall:.2f} s wall, {cpu:.2f} s CPU, "
          f"{fit.diagnostics['evaluations']} log-likelihood evaluations (target < {TARGET_S:g} s)")
    print(f"    {fit}")

    # --- PSTH fit, 100 trials x 10 s of an escape-noise LIF
    esc = popdens.Population(popdens.LIF(tau_m=10.0, threshold=20.0, reset=14.0, refractory=5.0),
                             popdens.EscapeNoise(hazard.Exponential(rate=20.0, width=2.0)))
    stim = drive.Sine(0.0, 1.0, 3.0) + drive.Sine(0.0, 2.0 / 3.0, 11.0)
    d = drive.Sum((drive.Constant(20.0), drive.Sine(0.0, 3.0, 3.0), drive.Sine(0.0, 2.0, 11.0)))
    mc = popdens.montecarlo(esc, d, t_end=10_000.0, n=100, seed=2, record_spikes=True)
    trains = SpikeTrains([mc.spike_times[mc.spike_ids == i] for i in range(100)], duration=10_000.0)
    start = popdens.Population(esc.neuron, popdens.EscapeNoise(hazard.Exponential(rate=30.0, width=1.5)))
    small = SpikeTrains(trains.trains[:2], duration=10_000.0)
    popdens.fit_psth(start, small, stim, ["rate", "width", "scale"], scale=2.5, offset=20.0, predict=False)
    fit, wall, cpu = _timed(lambda: popdens.fit_psth(start, trains, stim, ["rate", "width", "scale"], scale=2.5,
                                                     offset=20.0, predict=False))
    print(f"  PSTH fit, escape LIF, 100 trials x 10 s, {trains.n_spikes} spikes (rate, width, scale free): "
          f"{wall:.2f} s wall, {cpu:.2f} s CPU, {fit.diagnostics['evaluations']} evaluations (part of them on "
          f"a tenth of the trials) (target < {TARGET_S:g} s)")
    print(f"    {fit}")

    # --- one likelihood evaluation against the minimal compiled loop of the same scheme
    from popdens.fitting.psth import _Binned

    data = _Binned(trains, stim, 0.1)
    mu = 3.0 * data.stimulus + 20.0
    data.loglik(esc, {"scale": 3.0, "offset": 20.0})
    _minimal_loglik(mu, data.bins, data.first, 10.0, 14.0, 20.0, 20.0, 2.0, 5.0, 0.1)
    reps = 5
    ours = min(_timed(lambda: data.loglik(esc, {"scale": 3.0, "offset": 20.0}))[2] for _ in range(reps))
    bare = min(_timed(lambda: _minimal_loglik(mu, data.bins, data.first, 10.0, 14.0, 20.0, 20.0, 2.0, 5.0, 0.1))[2]
               for _ in range(reps))
    steps = int(sum(data.n_steps - data.bins[data.first[i]] for i in range(100) if data.first[i + 1] > data.first[i]))
    print(f"  one spike-train log-likelihood, {steps:.3g} bin-steps: {ours * 1e3:.1f} ms CPU "
          f"({ours / steps * 1e9:.1f} ns per bin-step); minimal compiled loop of the same scheme "
          f"{bare * 1e3:.1f} ms ({bare / steps * 1e9:.1f} ns); ratio {ours / bare:.2f} (best of {reps})")


if __name__ == "__main__":
    main()
