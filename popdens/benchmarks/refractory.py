"""Benchmark: refractory-density solver vs the escape-noise Monte Carlo twin.

LIF with exponential escape, a step drive, 1 s of biological time.  Prints the
solver's wall time at dt = 0.1 ms, the Monte Carlo's at N = 1e5, each one's
RMS error against a fine-dt solver reference (dt = 0.0125 ms), and the speed
ratio at equal accuracy.  Monte Carlo error falls as 1/sqrt(N) (independent
neurons), so reaching the solver's error would take (err_MC/err_solver)^2
times the measured Monte Carlo time.

Run:  popdens bench refractory
"""

from __future__ import annotations

import time

import numpy as np

import popdens
from popdens import drive, hazard

T_END = 1000.0  # ms
RECORD = 1.0  # ms bins for the comparison


def main() -> None:
    pop = popdens.Population(popdens.LIF(tau_m=10.0, threshold=20.0, reset=0.0, refractory=2.0),
                             popdens.EscapeNoise(hazard.Exponential(rate=20.0, width=2.0)))
    d = drive.Step(t=200.0, before=15.0, after=20.0)
    popdens.simulate(pop, d, 10.0)  # compile / load the cache outside the timings
    popdens.montecarlo(pop, d, 10.0, n=10, burn_in=1.0)

    ref = popdens.simulate(pop, d, T_END, dt=0.0125, record_interval=RECORD)
    walls = []
    for _ in range(5):
        t0 = time.perf_counter()
        sol = popdens.simulate(pop, d, T_END, dt=0.1, record_interval=RECORD)
        walls.append(time.perf_counter() - t0)
    t_sol = min(walls)
    t0 = time.perf_counter()
    mc = popdens.montecarlo(pop, d, T_END, n=100_000, dt=0.1, seed=1, record_interval=RECORD)
    t_mc = time.perf_counter() - t0
    err_sol = float(np.sqrt(np.mean((sol.rate[1:] - ref.rate[1:]) ** 2)))
    err_mc = float(np.sqrt(np.mean((mc.rate[1:] - ref.rate[1:]) ** 2)))
    t_mc_equal = t_mc * (err_mc / err_sol) ** 2
    fast = popdens.simulate(pop, d, T_END, dt=0.1, record_interval=RECORD, max_age=2.0 + 6 * 10.0)
    t0 = time.perf_counter()
    popdens.simulate(pop, d, T_END, dt=0.1, record_interval=RECORD, max_age=2.0 + 6 * 10.0)
    t_fast = time.perf_counter() - t0
    err_fast = float(np.sqrt(np.mean((fast.rate[1:] - ref.rate[1:]) ** 2)))
    print("refractory-density benchmark: LIF + exponential escape, step drive, 1 s biological time")
    print(f"  age bins                      : {sol.diagnostics['n_bins']}")
    print(f"  solver wall time (dt=0.1 ms)  : {t_sol:.4f} s  (best of 5; target <= 0.1 s)")
    print(f"  Monte Carlo wall time (N=1e5) : {t_mc:.2f} s  (burn-in {mc.diagnostics['burn_in_ms']:g} ms included)")
    print(f"  RMS error vs dt=0.0125 ms ref : solver {err_sol:.3g} Hz, Monte Carlo {err_mc:.3g} Hz (1 ms bins)")
    print(f"  Monte Carlo time for solver's accuracy: {t_mc_equal:.3g} s")
    print(f"  speed ratio at equal accuracy : {t_mc_equal / t_sol:.3g}x  (target >= 1000x)")
    print(f"  with max_age = refractory + 6 tau_m: {t_fast:.4f} s, RMS error {err_fast:.3g} Hz")


if __name__ == "__main__":
    main()
