"""
A bistable population: branches of fixed points and their folds
===============================================================

One excitatory cohort with strong recurrent excitation has, over a range of external drives, three
stationary states: a low-rate and a high-rate one separated by a middle one.  Pseudo-arclength
continuation follows the branch of fixed points through both folds (saddle-node points), where
states appear and vanish in pairs.  The roots of the characteristic equation at one drive tell the
states apart: the middle state is a saddle (a real root with positive real part), and with this
1.5 ms delay the high-rate state is unstable too, to a fast oscillation (a complex pair), so only
the low state is stable here.
"""

import matplotlib.pyplot as plt

import popdens

cell = popdens.LIF(tau_m=20.0, threshold=20.0, reset=10.0, refractory=2.0)  # ms, mV
pop = popdens.Population(cell, popdens.WhiteNoise(sigma=3.0))  # mV
net = popdens.Circuit([popdens.Cohort("E", pop, drive=12.0)],
                      [popdens.Pathway("E", "E", weight=0.1, in_degree=150, delay=1.5)])  # mV, count, ms

diagram = popdens.bifurcation_diagram(net, "cohort.E.drive", (6.0, 18.0), rate_range=(0.0, 400.0),
                                      stability=False)  # geometry and folds only: fast
for p in diagram.folds():
    print(f"fold at drive {p.parameter:.4f} mV, rate {p.rates[0]:.2f} Hz")

states = popdens.fixed_points(net, (0.0, 400.0))  # at the drive of 12 mV
for s in states:
    v = popdens.stability(net, s)
    print(f"drive 12 mV: {s.rates[0]:7.2f} Hz, leading root: growth {v.growth_rate:8.1f} 1/s, "
          f"frequency {v.frequency:6.1f} Hz -> {'stable' if v.stable else 'unstable'}")

fig, ax = plt.subplots(figsize=(7, 4), layout="constrained")
for b in diagram.branches:
    ax.plot(b.parameter, b.rates[:, 0], color="C0")
for p in diagram.folds():
    ax.plot(p.parameter, p.rates[0], "kv", ms=7)
for s in states:
    ax.plot(12.0, s.rates[0], "o", color="C3", mfc="none", ms=8)
ax.set_yscale("log")
ax.set_ylim(1e-3, 500.0)
ax.set_xlabel("external drive (mV)")
ax.set_ylabel("stationary rate of E (Hz)")
ax.set_title("branch of fixed points; triangles: folds; circles: the states at 12 mV", fontsize="small")
