"""Benchmark: Fokker--Planck solver vs the white-noise Monte Carlo twin.

LIF with white noise, a step drive, 1 s of biological time.  Prints the
solver's wall time at its defaults, the Monte Carlo's at N = 1e5, each one's
RMS error (1 ms bins) against a refined solver reference (4x the cells,
dt / 8), and the speed ratio at equal accuracy.  Monte Carlo error falls as
1/sqrt(N) (independent neurons), so reaching the solver's error would take
(err_MC/err_solver)^2 times the measured Monte Carlo time.  The stationary
rate is also compared with the Siegert formula (Siegert 1951; Brunel &
Hakim 1999).

Run:  popdens bench fokker_planck
"""

from __future__ import annotations

import time

import numpy as np
from scipy import integrate
from scipy.special import erfcx

import popdens
from popdens import drive

T_END = 1000.0  # ms
RECORD = 1.0  # ms bins for the comparison


def siegert(mu, sigma, tau_m, theta, reset, tau_ref):
    integral = integrate.quad(lambda x: erfcx(-x), (reset - mu) / sigma, (theta - mu) / sigma, limit=200)[0]
    return 1000.0 / (tau_ref + tau_m * np.sqrt(np.pi) * integral)


def main() -> None:
    pop = popdens.Population(popdens.LIF(tau_m=10.0, threshold=20.0, reset=10.0, refractory=2.0),
                             popdens.WhiteNoise(4.0))
    d = drive.Step(t=200.0, before=15.0, after=22.0)
    popdens.simulate(pop, d, 10.0)  # compile / load the cache outside the timings
    popdens.montecarlo(pop, d, 10.0, n=10, burn_in=1.0)

    ref = popdens.simulate(pop, d, T_END, dt=0.0125, record_interval=RECORD, n_cells=1600)
    walls = []
    for _ in range(5):
        t0 = time.perf_counter()
        sol = popdens.simulate(pop, d, T_END, record_interval=RECORD)
        walls.append(time.perf_counter() - t0)
    t_sol = min(walls)
    t0 = time.perf_counter()
    mc = popdens.montecarlo(pop, d, T_END, n=100_000, dt=0.1, seed=1, record_interval=RECORD)
    t_mc = time.perf_counter() - t0
    err_sol = float(np.sqrt(np.mean((sol.rate[1:] - ref.rate[1:]) ** 2)))
    err_mc = float(np.sqrt(np.mean((mc.rate[1:] - ref.rate[1:]) ** 2)))
    t_mc_equal = t_mc * (err_mc / err_sol) ** 2
    t0 = time.perf_counter()
    be = popdens.simulate(pop, d, T_END, record_interval=RECORD, scheme="backward-euler")
    t_be = time.perf_counter() - t0
    err_be = float(np.sqrt(np.mean((be.rate[1:] - ref.rate[1:]) ** 2)))
    exact = siegert(22.0, 4.0, 10.0, 20.0, 10.0, 2.0)
    print("Fokker-Planck benchmark: LIF + white noise (sigma 4 mV), step 15 -> 22 mV, 1 s biological time")
    print(f"  cells                         : {sol.diagnostics['n_cells']} "
          f"(width {sol.diagnostics['min_cell_mV']:.3g}..{sol.diagnostics['max_cell_mV']:.3g} mV), dt = {sol.dt} ms")
    print(f"  solver wall time (defaults)   : {t_sol:.4f} s  (best of 5; target <= 0.3 s)")
    print(f"  Monte Carlo wall time (N=1e5) : {t_mc:.2f} s  (dt 0.1 ms, burn-in {mc.diagnostics['burn_in_ms']:g} ms included)")
    print(f"  RMS error vs refined solver   : solver {err_sol:.3g} Hz, Monte Carlo {err_mc:.3g} Hz (1 ms bins)")
    print(f"  Monte Carlo time for solver's accuracy: {t_mc_equal:.3g} s")
    print(f"  speed ratio at equal accuracy : {t_mc_equal / t_sol:.3g}x")
    print(f"  backward Euler at defaults    : {t_be:.4f} s, RMS error {err_be:.3g} Hz")
    print(f"  final rate vs Siegert         : solver {sol.rate[-1]:.6g} Hz, refined {ref.rate[-1]:.6g} Hz, "
          f"Siegert {exact:.6g} Hz")


if __name__ == "__main__":
    main()
