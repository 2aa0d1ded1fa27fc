"""
Inter-spike intervals and spike-train spectra in the stationary state
=====================================================================

At constant drive every neuron is a renewal process.  Its ISI density (from the Laplace transform of
the first-passage time for white noise, from renewal theory for escape noise) is compared here with
the intervals of a Monte Carlo twin, and the spike-train power spectrum follows from the ISI
density by the renewal formula: it starts at ``rate * CV**2`` and tends to the rate at high
frequency.
"""

import matplotlib.pyplot as plt
import numpy as np

import popdens
from popdens import hazard

neuron = popdens.LIF(tau_m=20.0, threshold=20.0, reset=10.0, refractory=2.0)  # ms, mV
models = {"white noise, sigma = 3 mV": popdens.Population(neuron, popdens.WhiteNoise(sigma=3.0)),
          "escape noise, width 2 mV": popdens.Population(
              neuron, popdens.EscapeNoise(hazard.Exponential(rate=10.0, width=2.0)))}
mu = 21.0  # mV
isi_t = np.linspace(0.0, 150.0, 601)  # ms
freqs = np.linspace(1.0, 300.0, 300)  # Hz

fig, (ax_isi, ax_spec) = plt.subplots(1, 2, figsize=(9, 3.8), layout="constrained")
for k, (label, pop) in enumerate(models.items()):
    st = popdens.stationary(pop, mu, isi_t=isi_t)
    twin = popdens.montecarlo(pop, mu, t_end=2000.0, n=1000, seed=k, record_spikes=True)
    isis = twin.isis()
    rate = twin.spike_times.size / (1000 * 2.0)  # Hz: spikes per neuron per second
    print(f"{label}: theory rate {st.rate:.2f} Hz, CV {st.cv:.3f}; twin rate {rate:.2f} Hz "
          f"(Poisson SE {np.sqrt(rate / 2000.0):.2f} Hz), CV of {isis.size} intervals {twin.isi_cv():.3f}")
    # each interval weighted for the 2 s record (long intervals are less often complete), normalised
    # over all intervals (some are longer than the 150 ms shown), 2 ms bins
    ax_isi.hist(isis, bins=np.arange(0.0, 150.0, 2.0), weights=twin.isi_weights() / 2.0,
                color=f"C{k}", alpha=0.3)
    ax_isi.plot(st.isi_t, st.isi_density, color=f"C{k}", label=label)
    ax_spec.plot(freqs, popdens.spike_train_spectrum(pop, mu, freqs), color=f"C{k}", label=label)
    ax_spec.axhline(st.rate, color=f"C{k}", ls=":", lw=1)
ax_isi.set_xlabel("inter-spike interval (ms)")
ax_isi.set_ylabel("ISI density (1/ms)")
ax_isi.legend(frameon=False, fontsize="small")
ax_spec.set_xlabel("frequency (Hz)")
ax_spec.set_ylabel("spike-train spectrum (Hz)")
ax_spec.set_title("dotted: the rate (high-frequency limit)", fontsize="small")
