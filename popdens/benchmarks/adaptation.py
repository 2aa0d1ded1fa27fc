"""Benchmark: the cost of adaptation in every time-domain method (the issue's budget: at most +50 %).

For each method the same run (LIF, a step drive, 1 s of biological time, dt = 0.1 ms) is timed
without adaptation and with one adaptation current (tau 100 ms, jump 1 mV), alternating the two
five times and keeping the best of each (wall and CPU time), so both see the same machine load.
Printed: each time and the ratio adapting / renewal, measured in one run.

* refractory density (escape noise), default 1021 age bins;
* Fokker--Planck (white noise), default grid, TR-BDF2;
* escape-noise and white-noise Monte Carlo twins, 10^4 neurons (burn-in excluded: ``burn_in=0``).

Run:  popdens bench adaptation
"""

from __future__ import annotations

import time

import popdens
from popdens import drive, hazard

T_END = 1000.0  # ms
REPEATS = 5
TARGET_OVERHEAD = 1.5


def _neuron(adapting: bool, tau_m: float, threshold: float, reset: float):
    ad = [popdens.Adaptation(tau=100.0, jump=1.0)] if adapting else None
    return popdens.LIF(tau_m=tau_m, threshold=threshold, reset=reset, refractory=2.0, adaptation=ad)


def _cases():
    esc = popdens.EscapeNoise(hazard.Exponential(rate=20.0, width=2.0))
    white = popdens.WhiteNoise(4.0)
    step = drive.Step(t=200.0, before=15.0, after=25.0)

    def pops(noise, tau_m, threshold, reset):
        return [popdens.Population(_neuron(a, tau_m, threshold, reset), noise) for a in (False, True)]

    return [
        ("refractory density", pops(esc, 10.0, 20.0, 0.0), lambda p: popdens.simulate(p, step, T_END)),
        ("Fokker-Planck", pops(white, 20.0, 20.0, 10.0), lambda p: popdens.simulate(p, step, T_END)),
        ("escape twin, N=1e4", pops(esc, 10.0, 20.0, 0.0),
         lambda p: popdens.montecarlo(p, step, T_END, n=10_000, seed=1, burn_in=0.0)),
        ("white twin, N=1e4", pops(white, 20.0, 20.0, 10.0),
         lambda p: popdens.montecarlo(p, step, T_END, n=10_000, seed=1, burn_in=0.0)),
    ]


def _best_pair(run, pops):
    """Best wall and CPU times (s) of each population, the two runs alternated."""
    best = [[float("inf"), float("inf")] for _ in pops]
    for _ in range(REPEATS):
        for b, pop in zip(best, pops):
            w0, c0 = time.perf_counter(), time.process_time()
            run(pop)
            b[0] = min(b[0], time.perf_counter() - w0)
            b[1] = min(b[1], time.process_time() - c0)
    return best


def main() -> None:
    cases = _cases()
    for name, pops, _ in cases:  # compile / load the caches outside the timings
        for p in pops:
            if "twin" in name:
                popdens.montecarlo(p, 15.0, 10.0, n=10, burn_in=0.0)
            else:
                popdens.simulate(p, 15.0, 10.0)
    print("adaptation benchmark: LIF, step drive, 1 s biological time, dt = 0.1 ms; best of "
          f"{REPEATS}, renewal and adapting alternated")
    print(f"  {'method':<22} {'renewal wall/cpu (s)':>22} {'adapting wall/cpu (s)':>23} {'ratio (cpu)':>12}")
    worst = 0.0
    for name, (plain, adapting), run in cases:
        (w0, c0), (w1, c1) = _best_pair(run, (plain, adapting))
        ratio = c1 / c0
        worst = max(worst, ratio)
        print(f"  {name:<22} {w0:>10.4f} / {c0:<10.4f} {w1:>10.4f} / {c1:<11.4f} {ratio:>10.2f}x")
    print(f"  largest overhead: {worst:.2f}x (budget {TARGET_OVERHEAD:.2f}x)")


if __name__ == "__main__":
    main()
