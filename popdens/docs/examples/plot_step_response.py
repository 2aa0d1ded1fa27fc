"""
Step response: density prediction against the Monte Carlo twin
===============================================================

A population of leaky integrate-and-fire neurons with exponential escape noise receives a step of
its input drive.  The refractory-density solver predicts the population rate; the Monte Carlo twin
simulates 20 000 of the same neurons.  The shaded band is +-2 standard errors of the twin's binned
rate, ``sqrt(rate / (N * bin))``, around the prediction.
"""

import matplotlib.pyplot as plt
import numpy as np

import popdens
from popdens import drive, hazard

neuron = popdens.LIF(tau_m=10.0, threshold=20.0, reset=0.0, refractory=2.0)  # ms, mV
noise = popdens.EscapeNoise(hazard.Exponential(rate=20.0, width=2.0))  # Hz at threshold, mV
pop = popdens.Population(neuron, noise)
stim = drive.Step(t=50.0, before=15.0, after=20.0)  # mV, step at 50 ms

pred = popdens.simulate(pop, stim, t_end=150.0, dt=0.1, record_interval=1.0)
n = 20_000
twin = popdens.montecarlo(pop, stim, t_end=150.0, n=n, seed=3, record_interval=1.0)

# %%
# The prediction and the twin on the same 1 ms bins.

se = np.sqrt(np.maximum(pred.rate, 0.0) / (n * 1e-3))  # Hz: SE of a 1 ms bin of n neurons
fig, ax = plt.subplots(figsize=(7, 3.5), layout="constrained")
ax.fill_between(pred.t, pred.rate - 2 * se, pred.rate + 2 * se, color="C0", alpha=0.25,
                label="prediction +- 2 SE of the twin")
ax.plot(pred.t, pred.rate, color="C0", label="refractory density")
ax.plot(twin.t, twin.rate, ".", color="C3", ms=3, label=f"Monte Carlo, N = {n}")
ax.set_xlabel("time (ms)")
ax.set_ylabel("population rate (Hz)")
ax.legend(frameon=False)

# %%
# A statistical test of the twin against the prediction over all bins (chi-square), with its
# verdict at the 1 % level.

check = popdens.agreement(pred, twin)
verdict = "agrees" if check.agrees else "disagrees"
print(f"chi-square {check.chi2:.1f} on {check.dof} degrees of freedom, p = {check.p_value:.3f}: "
      f"the twin {verdict} with the prediction at alpha = {check.alpha}")
