"""
Adapting neurons: the onset transient
=====================================

With a spike-triggered adaptation current the rate overshoots after a step of the input and then
relaxes to a lower, adapted rate.  An adapting neuron is not a renewal process; the
refractory-density solver describes it with a closure (default ``"spike-weighted"``), shown here
beside the first-order quasi-renewal closure and the Monte Carlo twin, which simulates every
neuron's own adaptation exactly.
"""

import matplotlib.pyplot as plt
import numpy as np

import popdens
from popdens import drive, hazard

neuron = popdens.LIF(tau_m=10.0, threshold=20.0, reset=0.0, refractory=2.0,  # ms, mV
                     adaptation=[popdens.Adaptation(tau=100.0, jump=1.0)])   # ms, mV per spike
pop = popdens.Population(neuron, popdens.EscapeNoise(hazard.Exponential(rate=20.0, width=2.0)))
stim = drive.Step(t=100.0, before=15.0, after=25.0)  # mV

runs = {closure: popdens.simulate(pop, stim, t_end=500.0, dt=0.1, record_interval=2.0,
                                  adaptation_closure=closure)
        for closure in ("spike-weighted", "quasi-renewal")}
n = 10_000
twin = popdens.montecarlo(pop, stim, t_end=500.0, n=n, seed=4, record_interval=2.0)

late = twin.t > 400.0
for closure, run in runs.items():
    print(f"{closure:>15}: adapted rate {run.rate[late].mean():.2f} Hz")
print(f"{'twin':>15}: adapted rate {twin.rate[late].mean():.2f} Hz "
      f"(SE {np.sqrt(twin.rate[late].mean() / (n * late.sum() * 2e-3)):.2f} Hz)")

fig, ax = plt.subplots(figsize=(7, 3.5), layout="constrained")
ax.plot(twin.t, twin.rate, color="0.6", lw=0.8, label=f"Monte Carlo, N = {n}")
ax.plot(runs["spike-weighted"].t, runs["spike-weighted"].rate, lw=2, label="spike-weighted closure")
ax.plot(runs["quasi-renewal"].t, runs["quasi-renewal"].rate, "--", lw=1.5, label="quasi-renewal closure")
ax.set_xlabel("time (ms)")
ax.set_ylabel("population rate (Hz)")
ax.legend(frameon=False)
