"""Benchmark: the cost of one coloured-noise stationary rate on the (potential, current) plane.

For the EIF of the contributor guide's coloured-noise table (tau_m 20 ms, mu 14 mV, sigma 4 mV) at
tau_syn/tau_m = 0.05 ... 0.5, one ``popdens.gain`` evaluation (two plane grids, each a banded
sparse LU and one closure solve), timed in this run beside the one-dimensional threshold
integration of the same neuron (the effective-boundary rate, two grids) and the Monte Carlo twin's
cost for the same rate to 1 % (Poisson SE: 1e4 spikes); best of 3, CPU time beside wall time, the
solved grids' cache cleared before each run.  Then the mean-drive transfer function on the plane at
six frequencies against the white-noise one, and the LIF of the same table (mu 18 mV, sigma 4 mV): its
default rate (the boundary shift up to tau_syn/tau_m = 0.1, the plane on three grids from 0.15,
blended between) against the boundary shift (Siegert formula at the moved boundaries).

Run:  popdens bench coloured
"""

from __future__ import annotations

import popdens
from popdens.theory import _filtered_plane
from popdens.theory._filtered_plane import correlation_length, plane_state

from ._timing import best_of


def _best(fn, repeats=3):
    """best_of with the plane's cache of solved grids cleared before each run (each run solves)."""
    def run():
        _filtered_plane._solve_cached.cache_clear()
        return fn()
    return best_of(run, repeats)

RATIOS = (0.05, 0.1, 0.25, 0.5)
LIF_RATIOS = (0.05, 0.1, 0.125, 0.15, 0.25, 0.5)
LIF_MU = 18.0  # mV
MU, SIGMA = 14.0, 4.0  # mV
TWIN_N, TWIN_T = 400, 500.0  # neurons, ms


def main() -> None:
    nrn = popdens.EIF(20.0, 15.0, 2.0, 30.0, 10.0, 2.0)
    white = popdens.Population(nrn, popdens.WhiteNoise(SIGMA))
    popdens.gain(white, MU)  # compile / load the caches
    w1, c1, r1 = _best(lambda: popdens.gain(white, MU))
    print(f"coloured noise, EIF at mu = {MU:g} mV, sigma = {SIGMA:g} mV")
    print(f"  one-dimensional threshold integration (2 grids): {float(r1):.4f} Hz, wall {1e3 * w1:.1f} ms, "
          f"CPU {1e3 * c1:.1f} ms")
    for ratio in RATIOS:
        pop = popdens.Population(nrn, popdens.ColouredNoise(SIGMA, ratio * nrn.tau_m))
        popdens.montecarlo(pop, MU, 1.0, n=4, progress=False)  # compile / load
        w, c, r = _best(lambda: popdens.gain(pop, MU))
        cells = plane_state(nrn, MU, SIGMA, ratio * nrn.tau_m,
                            0.5 * correlation_length(nrn, SIGMA, ratio * nrn.tau_m) / 3).mass.shape
        wt, ct, _ = _best(lambda: popdens.montecarlo(pop, MU, TWIN_T, n=TWIN_N, seed=1, progress=False), 1)
        twin_1pc = ct * (1e4 / (float(r) * 1e-3)) / (TWIN_N * TWIN_T)
        print(f"  tau_syn/tau_m {ratio:g}: plane {float(r):.4f} Hz (fine grid {cells[0]} x {cells[1]} cells), "
              f"wall {1e3 * w:.0f} ms, CPU {1e3 * c:.0f} ms; ratio to threshold integration {c / c1:.0f} (CPU); "
              f"the twin for 1 %: about {twin_1pc:.2g} s CPU (ratio twin/plane {twin_1pc / c:.2g}; "
              f"wall of {TWIN_N} x {TWIN_T:g} ms: {wt:.2f} s)")
    pop = popdens.Population(nrn, popdens.ColouredNoise(SIGMA, 0.25 * nrn.tau_m))
    freqs = [1.0, 3.0, 10.0, 30.0, 100.0, 300.0]
    w, c, _ = _best(lambda: popdens.transfer(pop, MU, freqs, method="plane"), 1)
    w1, c1, _ = _best(lambda: popdens.transfer(white, MU, freqs), 1)
    print(f"  transfer at {len(freqs)} frequencies, tau_syn/tau_m 0.25: plane wall {w:.2f} s, CPU {c:.2f} s "
          f"({1e3 * c / len(freqs):.0f} ms per frequency); white-noise threshold integration CPU {c1:.3f} s "
          f"(ratio {c / c1:.0f})")
    lif = popdens.LIF(20.0, 20.0, 10.0, 2.0)
    print(f"coloured noise, LIF at mu = {LIF_MU:g} mV, sigma = {SIGMA:g} mV: default rate against the boundary shift")
    for ratio in LIF_RATIOS:
        pop = popdens.Population(lif, popdens.ColouredNoise(SIGMA, ratio * lif.tau_m))
        ws, cs, rs = _best(lambda: popdens.gain(pop, LIF_MU, method="siegert"))
        w, c, r = _best(lambda: popdens.gain(pop, LIF_MU))
        print(f"  tau_syn/tau_m {ratio:g}: default {float(r):.4f} Hz, wall {1e3 * w:.1f} ms, CPU {1e3 * c:.1f} ms; "
              f"shift {float(rs):.4f} Hz, CPU {1e3 * cs:.2f} ms; ratio {c / max(cs, 1e-6):.0f} (CPU)")


if __name__ == "__main__":
    main()
