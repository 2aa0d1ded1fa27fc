"""Benchmark: the conductance twin against a minimal compiled loop of the same scheme, and the conductance theories.

The twin (``popdens.montecarlo`` with :class:`popdens.ConductanceNoise`) advances every neuron by
fixed steps: Poisson numbers of arrivals with uniform times per conductance, the exact decay and
step integral of each conductance, the exact LIF step of the step-averaged conductances.  The
reference is the smallest compiled loop doing the same for the same neurons and time (one
function, no drive sampling, no recording, no other models); both are timed in this run, best of
3, CPU time beside wall time.  Then the cost of one stationary rate (threshold integration, two
grids) and of one Fokker--Planck step, against the twin's cost for a rate to 1 %.

Run:  popdens bench conductance
"""

from __future__ import annotations

import math

import numba
import numpy as np

import popdens

from ._timing import best_of as _best

T_END = 200.0  # ms
N = 2000
DT = 0.02  # ms
# mean conductances 0.8 and 1.25 (leak units), synapses 1 / 2 ms: tau_eff = tau_m / 3.05
EXC = (20000.0, 0.04, 1.0, 70.0)  # Hz, leak units, ms, mV
INH = (5000.0, 0.125, 2.0, -10.0)
MU = 10.0  # mV


@numba.njit(cache=True)
def _minimal(n, steps, h, tau, rest, mu, th, re, tref, ee, ei):  # pragma: no cover - compiled
    """Fixed-step LIF with exponential Poisson conductances (the twin's scheme); returns the spike count."""
    nu_e, w_e, t_e, e_e = ee
    nu_i, w_i, t_i, e_i = ei
    de, di = math.exp(-h / t_e), math.exp(-h / t_i)
    spikes = 0
    for _ in range(n):
        u, ge, gi, ref = re, w_e * nu_e * t_e, w_i * nu_i * t_i, 0.0
        for _ in range(steps):
            ae = ie = 0.0
            for _ in range(np.random.poisson(nu_e * h)):
                x = math.exp(-h * np.random.random() / t_e)
                ae += x
                ie += 1.0 - x
            ai = ii = 0.0
            for _ in range(np.random.poisson(nu_i * h)):
                x = math.exp(-h * np.random.random() / t_i)
                ai += x
                ii += 1.0 - x
            gem = (ge * t_e * (1.0 - de) + w_e * t_e * ie) / h
            gim = (gi * t_i * (1.0 - di) + w_i * t_i * ii) / h
            ge = ge * de + w_e * ae
            gi = gi * di + w_i * ai
            if ref > 0.0:
                ref -= h
                continue
            g = 1.0 + gem + gim
            uinf = (rest + mu + gem * e_e + gim * e_i) / g
            u = uinf + (u - uinf) * math.exp(-h * g / tau)
            if u >= th:
                spikes += 1
                u = re
                ref = tref - 0.5 * h
    return spikes


def main() -> None:
    nrn = popdens.LIF(20.0, 20.0, 10.0, 2.0)
    noise = popdens.ConductanceNoise(*EXC, *INH)
    pop = popdens.Population(nrn, noise)
    ee = (EXC[0] * 1e-3, EXC[1], EXC[2], EXC[3])
    ei = (INH[0] * 1e-3, INH[1], INH[2], INH[3])
    steps = int(round(T_END / DT))
    popdens.montecarlo(pop, MU, 1.0, n=10, dt=DT, burn_in=0.0, progress=False)  # compile / load the caches
    _minimal(2, 10, DT, 20.0, 0.0, MU, 20.0, 10.0, 2.0, ee, ei)

    w_twin, c_twin, mc = _best(lambda: popdens.montecarlo(pop, MU, T_END, n=N, dt=DT, burn_in=0.0, seed=1,
                                                          progress=False))
    w_min, c_min, count = _best(lambda: _minimal(N, steps, DT, 20.0, 0.0, MU, 20.0, 10.0, 2.0, ee, ei))
    work = N * steps
    print(f"conductance twin: LIF, g_e0 {noise.mean_conductances()[0]:g}, g_i0 {noise.mean_conductances()[1]:g} "
          f"(leak units), synapses {EXC[2]:g} / {INH[2]:g} ms, {N} neurons x {T_END:g} ms at dt {DT:g} ms")
    print(f"  twin            : wall {w_twin:.3f} s, CPU {c_twin:.3f} s ({1e9 * c_twin / work:.1f} ns per neuron-step)")
    print(f"  minimal loop    : wall {w_min:.3f} s, CPU {c_min:.3f} s ({1e9 * c_min / work:.1f} ns per neuron-step)")
    print(f"  ratio twin/min  : {c_twin / c_min:.2f} (CPU), {w_twin / w_min:.2f} (wall)")
    print(f"  rates (from reset, no burn-in): twin {float(np.nansum(mc.rate[1:]) / (mc.rate.size - 1)):.3f} Hz, "
          f"minimal {1e3 * count / (N * T_END):.3f} Hz")

    w, c, r = _best(lambda: popdens.gain(pop, MU))
    print(f"  stationary rate (threshold integration, 2 grids): {float(r):.4f} Hz in wall {1e3 * w:.1f} ms, "
          f"CPU {1e3 * c:.1f} ms")
    # a twin estimate of that rate to 1 % (Poisson SE): rate x N x T >= 1e4 spikes
    neuron_ms = 1e4 / (float(r) * 1e-3)
    print(f"  the twin for 1 % on it: {neuron_ms / T_END:.3g} neurons x {T_END:g} ms, about "
          f"{c_twin * neuron_ms / (N * T_END):.2g} s CPU (ratio {c_twin * neuron_ms / (N * T_END) / c:.3g})")
    w, c, res = _best(lambda: popdens.simulate(pop, MU, 500.0, dt=0.05, error_control="off", progress=False), 1)
    print(f"  Fokker-Planck solver: {1e6 * c / 10000:.1f} us CPU per step, set-up included ({res.diagnostics['n_cells']} "
          f"cells; wall {1e6 * w / 10000:.1f} us)")


if __name__ == "__main__":
    main()
