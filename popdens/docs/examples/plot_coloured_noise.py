"""
Filtered synaptic noise: white-noise theory against the effective boundary
==========================================================================

When the noise reaches the membrane through a synapse with time constant ``tau_syn``, the
white-noise theory overestimates the rate; moving threshold and reset up by
``sigma * alpha/2 * sqrt(tau_syn/tau_m)`` corrects it to first order.  Both are compared with the
Monte Carlo twin, which simulates the filtered current exactly, at ``tau_syn/tau_m = 0.1``.
"""

import matplotlib.pyplot as plt
import numpy as np

import popdens

cell = popdens.LIF(tau_m=20.0, threshold=20.0, reset=10.0, refractory=2.0)  # ms, mV
sigma, tau_syn = 4.0, 2.0  # mV, ms
white = popdens.Population(cell, popdens.WhiteNoise(sigma=sigma))
coloured = popdens.Population(cell, popdens.ColouredNoise(sigma, tau_syn))
print(f"boundary shift {coloured.noise.boundary_shift(cell.tau_m):.3f} mV")

mu = np.linspace(12.0, 26.0, 57)  # mV
drives = (14.0, 18.0, 22.0)  # mV, checked by the twin
n, t_end = 1000, 600.0  # neurons, ms
twin_rates, twin_se = [], []
for k, m in enumerate(drives):
    run = popdens.montecarlo(coloured, m, t_end=t_end, n=n, seed=k, record_interval=1.0)
    r = np.nanmean(run.rate[1:])
    twin_rates.append(r)
    twin_se.append(np.sqrt(r / (n * t_end * 1e-3)))  # Hz, Poisson counting
    print(f"mu = {m:4.1f} mV: twin {r:6.2f} +- {twin_se[-1]:.2f} Hz, white noise "
          f"{float(popdens.gain(white, m)):6.2f} Hz, effective boundary {float(popdens.gain(coloured, m)):6.2f} Hz")

fig, ax = plt.subplots(figsize=(7, 4), layout="constrained")
ax.plot(mu, popdens.gain(white, mu), "--", label="white-noise theory")
ax.plot(mu, popdens.gain(coloured, mu), label=f"effective boundary, tau_syn = {tau_syn:g} ms")
ax.errorbar(drives, twin_rates, yerr=2 * np.array(twin_se), fmt="ko", mfc="none",
            label=f"Monte Carlo twin, N = {n} (+- 2 SE)")
ax.set_xlabel("drive mu (mV)")
ax.set_ylabel("stationary rate (Hz)")
ax.legend(frameon=False, loc="upper left")
