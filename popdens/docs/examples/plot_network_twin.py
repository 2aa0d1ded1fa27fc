"""
An excitatory-inhibitory network: fixed point, stability and the spiking twin
=============================================================================

Two coupled cohorts of white-noise LIF neurons (2000 excitatory, 500 inhibitory, each neuron with
200 excitatory and 50 inhibitory inputs).  The mean field gives the self-consistent rates and
their linear stability; the coupled Fokker–Planck solvers give the rates over time from rest, and the
spiking network it describes is simulated for comparison.
"""

import matplotlib.pyplot as plt

import popdens

cell = popdens.LIF(tau_m=20.0, threshold=20.0, reset=10.0, refractory=2.0)  # ms, mV
white = popdens.Population(cell, popdens.WhiteNoise(sigma=5.0))  # mV
exc = popdens.Cohort("E", white, size=2000, drive=24.0, sigma_ext=5.0)  # mV
inh = popdens.Cohort("I", white, size=500, drive=21.0, sigma_ext=5.0)
paths = [popdens.Pathway(src, tgt, weight=w, in_degree=c, delay=1.5)  # mV, count, ms
         for src, w, c in (("E", 0.1, 200), ("I", -0.5, 50)) for tgt in ("E", "I")]
net = popdens.Circuit([exc, inh], paths)

state = popdens.fixed_points(net)[0]
verdict = popdens.stability(net, state)
print("fixed point:", ", ".join(f"{n} {r:.2f} Hz" for n, r in zip(state.names, state.rates)))
print(f"leading root: growth rate {verdict.growth_rate:.1f} 1/s, frequency {verdict.frequency:.1f} Hz, "
      f"{'stable' if verdict.stable else 'unstable'}")

# %%
# Mean field and spiking network over time (1 ms bins), with the fixed point for reference.  The
# spiking network starts after a burn-in, the mean field from its own initial state; the spread of
# the spiking rate is the finite-size noise of 2000 and 500 neurons.

mf = popdens.simulate_network(net, t_end=300.0, dt=0.1, record_interval=1.0)
twin = popdens.montecarlo_network(net, t_end=300.0, dt=0.1, seed=2, record_interval=1.0)  # 1 ms bins
print("mean rates after 100 ms: mean field",
      ", ".join(f"{r:.2f}" for r in mf.mean_rate(100.0)), "Hz; spiking network",
      ", ".join(f"{r:.2f}" for r in twin.mean_rate(100.0)), "Hz")

fig, axes = plt.subplots(2, 1, figsize=(7, 5), sharex=True, layout="constrained")
for k, (ax, name) in enumerate(zip(axes, state.names)):
    ax.plot(twin.t, twin.rate_of(name), color="0.6", lw=0.8, label="spiking network")
    ax.plot(mf.t, mf.rate_of(name), color=f"C{k}", lw=2, label="mean field (Fokker-Planck)")
    ax.axhline(state.rates[k], color="k", ls=":", label="fixed point")
    ax.set_ylabel(f"rate of {name} (Hz)")
    ax.legend(frameon=False, loc="upper right", fontsize="small")
axes[-1].set_xlabel("time (ms)")
