"""
Gain curves: white noise and escape noise
=========================================

The stationary rate of a leaky integrate-and-fire population as a function of a constant drive.
With white-noise input the rate is the Siegert formula, one curve per noise amplitude ``sigma``;
with escape noise it comes from renewal theory.  The escape-noise curve is checked against long
runs of the refractory-density solver at three drives.
"""

import matplotlib.pyplot as plt
import numpy as np

import popdens
from popdens import hazard

neuron = popdens.LIF(tau_m=20.0, threshold=20.0, reset=10.0, refractory=2.0)  # ms, mV
mu = np.linspace(5.0, 35.0, 121)  # mV

sigmas = (1.0, 3.0, 6.0)  # mV
white_rates = [popdens.gain(popdens.Population(neuron, popdens.WhiteNoise(sigma=s)), mu) for s in sigmas]

escape = popdens.Population(neuron, popdens.EscapeNoise(hazard.Exponential(rate=10.0, width=3.0)))
escape_rates = popdens.gain(escape, mu)  # Hz, renewal theory

# %%
# Long runs of the time-domain solver settle on the rates of renewal theory.

checks = (15.0, 20.0, 25.0)  # mV
settled = [popdens.simulate(escape, m, t_end=300.0, dt=0.1, record_interval=1.0).rate[-50:].mean()
           for m in checks]
for m, r in zip(checks, settled):
    print(f"mu = {m:4.1f} mV: solver {r:7.3f} Hz, renewal theory {float(popdens.gain(escape, m)):7.3f} Hz")

fig, ax = plt.subplots(figsize=(7, 4), layout="constrained")
for s, r in zip(sigmas, white_rates):
    ax.plot(mu, r, label=f"white noise, sigma = {s:g} mV (Siegert)")
ax.plot(mu, escape_rates, "k--", label="escape noise, exponential of width 3 mV (renewal)")
ax.plot(checks, settled, "ko", mfc="none", label="escape noise, long solver runs")
ax.set_xlabel("drive mu (mV)")
ax.set_ylabel("stationary rate (Hz)")
ax.legend(frameon=False, loc="upper left")
