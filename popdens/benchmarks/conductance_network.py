"""Benchmark: the spiking twin of a conductance network against a minimal compiled loop of the same scheme.

An E-I network of LIF neurons in the high-conductance state (the one of
``tests/network/test_network_conductance.py`` with fewer neurons): an
excitatory conductance background, excitatory and inhibitory conductance
pathways with one delay.  ``popdens.network.montecarlo_network`` keeps one
conductance per pathway and neuron, draws the background in the front end
and runs the compiled kernel of ``popdens.twins._network_conductance``; the
reference is the smallest compiled loop doing the same steps (one
conductance per channel and neuron, a ring buffer of conductance
increments, the background drawn in the loop, the exact LIF step of the
step-averaged conductances, the same connectivity): no recording, no
cohort bookkeeping, no other models.  Both are timed in this run, best of
3, CPU time beside wall time; the rates of both are printed (they differ
only by the random numbers).

Run:  popdens bench conductance_network
"""

from __future__ import annotations

import math

import numba
import numpy as np

import popdens
from popdens.benchmarks._timing import best_of as _best
from popdens.network import Circuit, Cohort, Pathway, PoissonBackground, montecarlo_network

T_END = 200.0  # ms
DT = 0.05  # ms
DELAY = 1.0  # ms
N_E, N_I, C_E, C_I = 4000, 1000, 800, 400
W_BG, W_E, W_I = 0.02, 0.04, 0.2  # leak units
TAU_E, TAU_I = 1.0, 1.2  # ms
E_E, E_I = 70.0, -10.0  # mV
BG_RATE = 25000.0  # Hz per neuron (2500 trains at 10 Hz)
DRIVE = 5.0  # mV
LIF = (20.0, 20.0, 10.0, 2.0)  # tau_m, threshold, reset, refractory


def circuit() -> Circuit:
    """The benchmark network."""
    pop = popdens.Population(popdens.LIF(*LIF), popdens.WhiteNoise(1.0))
    bg = PoissonBackground(10.0, W_BG, int(BG_RATE / 10.0), TAU_E, "conductance", E_E)
    coh = [Cohort(n, pop, size=s, drive=DRIVE, sigma_ext=0.0, background=bg) for n, s in (("E", N_E), ("I", N_I))]
    pws = [Pathway(s, t, w, c, DELAY, tau, "conductance", rev)
           for s, w, c, tau, rev in (("E", W_E, C_E, TAU_E, E_E), ("I", W_I, C_I, TAU_I, E_I)) for t in "EI"]
    return Circuit(coh, pws)


@numba.njit(cache=True)
def _minimal(steps, h, d, ptr, tgt, wgt, chan, lam_bg, w_bg, tau, rev, tau_m, th, re, tref,
             mu):  # pragma: no cover - compiled
    """Fixed-step conductance network: ``ptr``/``tgt`` outgoing lists of every neuron with the weight and
    channel (0 excitatory, 1 inhibitory) of each synapse; returns the spike count."""
    n = ptr.shape[0] - 1
    g = np.zeros((2, n))
    buf = np.zeros((d + 1, 2, n))
    ref = np.zeros(n)
    u = np.zeros(n) + re
    dec = np.exp(-h / tau)
    avg = tau * (1.0 - dec) / h
    spikes = 0
    head = 0
    for _ in range(steps):
        ahead = head + d
        if ahead > d:
            ahead -= d + 1
        for i in range(n):
            gsum = 0.0
            grev = 0.0
            for x in range(2):
                inc = buf[head, x, i]
                buf[head, x, i] = 0.0
                if x == 0:
                    inc += w_bg * np.random.poisson(lam_bg)
                g0 = g[x, i]
                g[x, i] = g0 * dec[x] + inc * avg[x]
                gbar = g0 * avg[x] + inc * tau[x] * (1.0 - avg[x]) / h
                gsum += gbar
                grev += gbar * rev[x]
            if ref[i] > 0.0:
                ref[i] -= h
                continue
            gt = 1.0 + gsum
            uinf = (mu + grev) / gt
            u[i] = uinf + (u[i] - uinf) * math.exp(-h * gt / tau_m)
            if u[i] >= th:
                spikes += 1
                u[i] = re
                ref[i] = tref - 0.5 * h
                for j in range(ptr[i], ptr[i + 1]):
                    buf[ahead, chan[j], tgt[j]] += wgt[j]
        head += 1
        if head > d:
            head = 0
    return spikes


def _connectivity(rng):
    """Outgoing lists of the benchmark network (fixed in-degree, no self-connections)."""
    n = N_E + N_I
    lists = [[] for _ in range(n)]
    for src0, n_src, c, w, ch in ((0, N_E, C_E, W_E, 0), (N_E, N_I, C_I, W_I, 1)):
        for t in range(n):
            pool = np.arange(src0, src0 + n_src)
            if src0 <= t < src0 + n_src:
                pool = pool[pool != t]
            for s in rng.choice(pool, size=c, replace=False):
                lists[s].append((t, w, ch))
    ptr = np.zeros(n + 1, dtype=np.int64)
    ptr[1:] = np.cumsum([len(x) for x in lists])
    flat = [e for x in lists for e in x]
    return (ptr, np.array([e[0] for e in flat], dtype=np.int64), np.array([e[1] for e in flat]),
            np.array([e[2] for e in flat], dtype=np.int64))


def main() -> None:
    c = circuit()
    steps = int(round(T_END / DT))
    ptr, tgt, wgt, chan = _connectivity(np.random.default_rng(1))
    args = (int(round(DELAY / DT)), ptr, tgt, wgt, chan, BG_RATE * 1e-3 * DT, W_BG, np.array([TAU_E, TAU_I]),
            np.array([E_E, E_I]), LIF[0], LIF[1], LIF[2], LIF[3], DRIVE)
    small = Circuit([Cohort(a.name, a.population, size=1001, drive=a.drive, sigma_ext=0.0, background=a.background)
                     for a in c.cohorts], c.pathways)
    montecarlo_network(small, 1.0, dt=DT, burn_in=0.0, progress=False)  # compile / load the caches
    _minimal(2, DT, *args)

    w_twin, c_twin, mc = _best(lambda: montecarlo_network(c, T_END, dt=DT, seed=1, burn_in=0.0, progress=False))
    w_min, c_min, count = _best(lambda: _minimal(steps, DT, *args))
    work = (N_E + N_I) * steps
    print(f"conductance network twin: {N_E} E + {N_I} I LIF, in-degrees {C_E} / {C_I}, synapses {TAU_E:g} / {TAU_I:g} "
          f"ms, background {BG_RATE:g} Hz, {T_END:g} ms at dt {DT:g} ms, no burn-in")
    print(f"  twin            : wall {w_twin:.3f} s, CPU {c_twin:.3f} s ({1e9 * c_twin / work:.1f} ns per neuron-step)")
    print(f"  minimal loop    : wall {w_min:.3f} s, CPU {c_min:.3f} s ({1e9 * c_min / work:.1f} ns per neuron-step)")
    print(f"  ratio twin/min  : {c_twin / c_min:.2f} (CPU), {w_twin / w_min:.2f} (wall)")
    print(f"  mean rates: twin {mc.diagnostics['n_spikes'] / (N_E + N_I) / (T_END * 1e-3):.2f} Hz, "
          f"minimal {count / (N_E + N_I) / (T_END * 1e-3):.2f} Hz")


if __name__ == "__main__":
    main()
