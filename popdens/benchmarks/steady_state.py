"""Benchmark: 1000-point gain curves from the steady-state module vs time-domain alternatives.

Three curves of 1000 drives each: the white-noise LIF by the Siegert formula
(target <= 10 ms), the white-noise EIF by threshold integration (<= 1 s), and
the escape-noise LIF and EIF by renewal theory (<= 1 s).  Beside each, the
time the same curve would take by

* a long density-solver run per drive (relaxation from a synchronous start
  for 300 ms, which the tests show agrees with the steady state to 1e-3),
  measured at one drive and multiplied by 1000;
* the Monte Carlo twin at 1e-3 relative standard error per drive: a run of
  N neurons for T seconds gives SE/rate = CV/sqrt(rate N T) (renewal count
  statistics, Cox 1962), so the needed N T follows; one run with N = 1e4,
  T = 1 s is measured and scaled.

Accuracy beside the timings: Siegert vs mpmath quadrature; threshold
integration vs a 4x finer grid; renewal vs a scipy-quad renewal integral.

Run:  popdens bench steady_state
"""

from __future__ import annotations

import math
import os
import time

import mpmath as mp
import numpy as np
from scipy.integrate import quad

import popdens
from popdens import hazard
from popdens.theory._stationary_white import threshold_rates
from popdens.theory.steady_state import gain, stationary

N_POINTS = 1000
SE_TARGET = 1e-3


def best_of(fn, repeats=5):
    walls = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        walls.append(time.perf_counter() - t0)
    return min(walls), out


def solver_time_per_point(pop, mu, **options):
    t0 = time.perf_counter()
    popdens.simulate(pop, mu, t_end=300.0, dt=0.05, initial="synchronous", record_interval=1.0, **options)
    return time.perf_counter() - t0


def mc_time_for_se(pop, mu):
    st = stationary(pop, mu)
    n, t_s = 10_000, 1.0
    t0 = time.perf_counter()
    popdens.montecarlo(pop, mu, t_end=t_s * 1000.0, n=n, dt=0.05, seed=1)
    wall = time.perf_counter() - t0
    needed_nt = (st.cv / SE_TARGET) ** 2 / st.rate  # neuron-seconds
    return wall * needed_nt / (n * t_s), st


def siegert_mp(mu, sigma, tau, theta, reset, tau_ref):
    with mp.workdps(30):
        yth, yr = mp.mpf(theta - mu) / sigma, mp.mpf(reset - mu) / sigma
        pts = [yr] + [c for c in (-1, 0, 1) if yr < c < yth] + [yth]
        return float(1000 / (tau_ref + tau * mp.sqrt(mp.pi) * mp.quad(lambda x: mp.exp(x * x) * mp.erfc(-x), pts)))


def main() -> None:
    load = os.getloadavg()
    print(f"steady-state benchmark: {N_POINTS}-point gain curves; load average {load[0]:.2f} {load[1]:.2f} "
          f"{load[2]:.2f} on {os.cpu_count()} cores")
    lif_w = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(3.0))
    eif = popdens.EIF(tau_m=10.0, soft_threshold=-50.0, slope_factor=2.0, cutoff=-30.0, reset=-60.0,
                      refractory=2.0, rest=-65.0)
    eif_w = popdens.Population(eif, popdens.WhiteNoise(3.0))
    esc = hazard.Exponential(rate=20.0, width=2.0)
    lif_e = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0), popdens.EscapeNoise(esc))
    eif_e = popdens.Population(eif, popdens.EscapeNoise(hazard.Exponential(rate=2.0, width=5.0)))
    mus_lif = np.linspace(0.0, 40.0, N_POINTS)
    mus_eif = np.linspace(-5.0, 30.0, N_POINTS)
    for pop, mus in ((lif_w, mus_lif), (eif_w, mus_eif), (lif_e, mus_lif), (eif_e, mus_eif)):
        gain(pop, mus[:3])  # compile / load caches outside the timings

    # --- Siegert
    t_sg, r_sg = best_of(lambda: gain(lif_w, mus_lif))
    idx = np.linspace(0, N_POINTS - 1, 6).astype(int)
    err_sg = max(abs(r_sg[i] / siegert_mp(mus_lif[i], 3.0, 20.0, 20.0, 10.0, 2.0) - 1.0) for i in idx)
    t_fp = solver_time_per_point(lif_w, 18.0, n_cells=1600)
    t_mc, st = mc_time_for_se(lif_w, 18.0)
    print("\n[white-noise LIF, Siegert formula]  mu 0..40 mV, sigma 3 mV")
    print(f"  curve time            : {t_sg * 1e3:.2f} ms  (best of 5; target <= 10 ms)")
    print(f"  max rel. error vs mpmath at 6 drives: {err_sg:.2e}")
    print(f"  Fokker-Planck run x{N_POINTS}: {t_fp * N_POINTS:.1f} s  ({t_fp * N_POINTS / t_sg:.3g}x slower)")
    print(f"  Monte Carlo x{N_POINTS} at SE {SE_TARGET:g} (rate {st.rate:.3g} Hz, CV {st.cv:.3g}): "
          f"{t_mc * N_POINTS:.3g} s  ({t_mc * N_POINTS / t_sg:.3g}x slower)")

    # --- threshold integration, EIF
    t_ti, r_ti = best_of(lambda: gain(eif_w, mus_eif), repeats=3)
    ref = threshold_rates(eif_w, mus_eif[idx], 3.0, cells_per_scale=400)
    err_ti = float(np.max(np.abs(r_ti[idx] / ref - 1.0)))
    t_fp = solver_time_per_point(eif_w, 12.0, n_cells=1600)
    t_mc, st = mc_time_for_se(eif_w, 12.0)
    print("\n[white-noise EIF, threshold integration]  mu -5..30 mV, sigma 3 mV")
    print(f"  curve time            : {t_ti:.3f} s  (best of 3; target <= 1 s)")
    print(f"  max rel. change vs 4x finer grid at 6 drives: {err_ti:.2e}")
    print(f"  Fokker-Planck run x{N_POINTS}: {t_fp * N_POINTS:.1f} s  ({t_fp * N_POINTS / t_ti:.3g}x slower)")
    print(f"  Monte Carlo x{N_POINTS} at SE {SE_TARGET:g} (rate {st.rate:.3g} Hz, CV {st.cv:.3g}): "
          f"{t_mc * N_POINTS:.3g} s  ({t_mc * N_POINTS / t_ti:.3g}x slower)")

    # --- renewal, escape noise
    for name, pop, mus, mu1 in (("LIF", lif_e, mus_lif, 18.0), ("EIF (cut-off reached above ~7 mV)", eif_e, mus_eif, 12.0)):
        t_rn, r_rn = best_of(lambda: gain(pop, mus), repeats=3)
        t_rd = solver_time_per_point(pop, mu1)
        t_mc, st = mc_time_for_se(pop, mu1)
        print(f"\n[escape-noise {name}, renewal]")
        print(f"  curve time            : {t_rn:.3f} s  (best of 3; target <= 1 s)")
        if pop is lif_e:
            def ref_rate(mu):
                u = lambda a: mu * (1 - math.exp(-a / 10.0))  # noqa: E731
                big_h = lambda a: quad(lambda x: float(esc.rate(u(x), 20.0)) * 1e-3, 0, a, limit=200)[0]  # noqa: E731
                a_max = 400.0
                m0 = 2.0 + quad(lambda a: math.exp(-big_h(a)), 0, a_max, limit=400)[0]
                m0 += math.exp(-big_h(a_max)) / (float(esc.rate(u(a_max), 20.0)) * 1e-3)
                return 1000.0 / m0

            sub = idx[1:]
            err = max(abs(r_rn[i] / ref_rate(mus[i]) - 1.0) for i in sub)
            print(f"  max rel. error vs scipy-quad renewal at 5 drives: {err:.2e}")
        print(f"  refractory-density run x{N_POINTS}: {t_rd * N_POINTS:.1f} s  ({t_rd * N_POINTS / t_rn:.3g}x slower)")
        print(f"  Monte Carlo x{N_POINTS} at SE {SE_TARGET:g} (rate {st.rate:.3g} Hz, CV {st.cv:.3g}): "
              f"{t_mc * N_POINTS:.3g} s  ({t_mc * N_POINTS / t_rn:.3g}x slower)")
    load = os.getloadavg()
    print(f"\nload average at the end: {load[0]:.2f} {load[1]:.2f} {load[2]:.2f}")


if __name__ == "__main__":
    main()
