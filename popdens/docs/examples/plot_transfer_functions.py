"""
Transfer functions and the response to a weak pulse
===================================================

How strongly does the population rate follow a weak modulation of its input, as a function of
frequency?  The transfer function (Hz per mV of modulation) of a white-noise LIF population falls
slowly at high frequency (as :math:`f^{-1/2}`), while an escape-noise population with a sharp
escape function follows fast input almost instantaneously.  Its inverse Fourier transform, the
response kernel, predicts the rate for any weak drive: here a 1 mV, 5 ms pulse, checked against the
time-domain solver.
"""

import matplotlib.pyplot as plt
import numpy as np

import popdens
from popdens import drive, hazard

neuron = popdens.LIF(tau_m=20.0, threshold=20.0, reset=10.0, refractory=2.0)  # ms, mV
white = popdens.Population(neuron, popdens.WhiteNoise(sigma=4.0))  # mV
escape = popdens.Population(neuron, popdens.EscapeNoise(hazard.Exponential(rate=10.0, width=1.0)))
mu0 = 18.0  # mV, the stationary drive
freqs = np.geomspace(1.0, 1000.0, 60)  # Hz

chi_white = popdens.transfer(white, mu0, freqs)  # complex, Hz/mV
chi_escape = popdens.transfer(escape, mu0, freqs)

fig, (amp, phase) = plt.subplots(2, 1, figsize=(7, 5), sharex=True, layout="constrained")
for chi, label in ((chi_white, "white noise, sigma = 4 mV"), (chi_escape, "escape noise, width 1 mV")):
    amp.loglog(freqs, np.abs(chi), label=label)
    phase.semilogx(freqs, np.degrees(np.angle(chi)))
amp.set_ylabel("|chi| (Hz/mV)")
amp.legend(frameon=False)
phase.set_ylabel("phase (degrees)")
phase.set_xlabel("modulation frequency (Hz)")

# %%
# A weak input pulse: the linear prediction (response kernel) against the Fokker–Planck solver.

pulse = drive.Pulse(t=20.0, duration=5.0, amplitude=1.0, base=mu0)  # mV
t_lin, r_lin = popdens.linear_rate_response(white, pulse, t_end=100.0, dt=0.1, mu=mu0)
run = popdens.simulate(white, pulse, t_end=100.0, dt=0.1, record_interval=0.5)
print(f"peak rate: solver {run.rate.max():.2f} Hz, linear response {r_lin.max():.2f} Hz "
      f"(stationary {float(popdens.gain(white, mu0)):.2f} Hz)")

fig, ax = plt.subplots(figsize=(7, 3.5), layout="constrained")
ax.plot(run.t, run.rate, label="Fokker-Planck solver")
ax.plot(t_lin, r_lin, "--", label="linear response")
ax.set_xlabel("time (ms)")
ax.set_ylabel("population rate (Hz)")
ax.legend(frameon=False)
