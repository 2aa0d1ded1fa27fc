"""Benchmark: transfer functions at 200 frequencies vs estimating them by Monte Carlo.

Two populations:

* diffusive LIF (white noise), threshold integration; accuracy checked
  against the parabolic-cylinder closed form at every 20th frequency;
* LIF with exponential escape noise, linearised renewal equation; accuracy
  checked against the same computation on an age grid 4x finer.

Both curves span 1 Hz to 1 kHz (log-spaced).  The Monte Carlo estimate of one
point: N = 2e4 neurons driven by a weak sinusoid, rate in 0.5 ms bins, a
least-squares sine fit; its standard error SE falls as 1/sqrt(N T).  The cost
of reaching SE = 1 % of the amplitude (so that the 95 % interval is +-2 %) at
one frequency is the measured wall time times (SE_measured / SE_target)^2;
the whole curve needs one run per frequency (the 1 s simulated per point is
kept, N scaled).  The load average is printed, as the machine is shared.

Run:  popdens bench linear_response
"""

from __future__ import annotations

import math
import os
import time

import numpy as np

import popdens
import popdens.theory.linear_response as lr
from popdens import drive, hazard

FREQS = np.logspace(0.0, 3.0, 200)  # Hz
MC_N = 20_000
MC_T = 1000.0  # ms of fitted signal
MC_F = 40.0  # Hz
TARGET_REL_SE = 0.01


def best_of(fn, k=5):
    walls = []
    for _ in range(k):
        t0 = time.perf_counter()
        out = fn()
        walls.append(time.perf_counter() - t0)
    return min(walls), out


def mc_cost(pop, mu, eps, chi):
    burn = 100.0
    t0 = time.perf_counter()
    res = popdens.montecarlo(pop, drive.Sine(mean=mu, amplitude=eps, frequency=MC_F), t_end=burn + MC_T,
                             n=MC_N, dt=0.05, seed=7, record_interval=0.5, burn_in=200.0)
    wall = time.perf_counter() - t0
    keep = res.t > burn
    t = res.t[keep] - 0.25
    w = 2 * np.pi * MC_F * t * 1e-3
    basis = np.column_stack([np.ones_like(t), np.sin(w), np.cos(w)])
    c = np.linalg.lstsq(basis, res.rate[keep], rcond=None)[0]
    se = math.sqrt(2.0 / t.size) * float(np.std(res.rate[keep] - basis @ c))
    amp = eps * abs(chi)
    factor = (se / (TARGET_REL_SE * amp)) ** 2
    return wall, float(np.hypot(c[1], c[2])), amp, se, wall * factor * FREQS.size


def main() -> None:
    load = os.getloadavg()
    white = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(4.0))
    escape = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0), popdens.EscapeNoise(hazard.Exponential(20.0, 2.0)))
    popdens.transfer(white, 17.0, FREQS[:2])  # compile / load the caches outside the timings
    popdens.transfer(escape, 24.0, FREQS[:2])
    popdens.montecarlo(white, 17.0, 5.0, n=10, burn_in=1.0)
    popdens.montecarlo(escape, 24.0, 5.0, n=10, burn_in=1.0)

    t_w, chi_w = best_of(lambda: popdens.transfer(white, 17.0, FREQS))
    t0 = time.perf_counter()
    exact = popdens.transfer(white, 17.0, FREQS[::20], method="closed-form")
    t_exact = time.perf_counter() - t0
    err_w = float(np.max(np.abs(chi_w[::20] / exact - 1.0)))

    t_e, chi_e = best_of(lambda: popdens.transfer(escape, 24.0, FREQS))
    step = lr.AGE_STEP_MS
    try:
        lr.AGE_STEP_MS = step / 4
        fine = popdens.transfer(escape, 24.0, FREQS)
    finally:
        lr.AGE_STEP_MS = step
    err_e = float(np.max(np.abs(chi_e / fine - 1.0)))

    print("linear-response benchmark: 200 frequencies, 1 Hz - 1 kHz")
    print(f"  load average (1, 5, 15 min)   : {load[0]:.2f} {load[1]:.2f} {load[2]:.2f} on {os.cpu_count()} cores")
    print(f"  diffusive LIF, threshold integration : {t_w:.4f} s (best of 5; target <= 0.5 s); "
          f"max rel. error vs closed form {err_w:.2g}")
    print(f"  diffusive LIF, closed form (mpmath)  : {t_exact / 10 * 1e3:.1f} ms per frequency")
    print(f"  escape noise, renewal equation       : {t_e:.4f} s (best of 5; target <= 0.5 s); "
          f"max rel. error vs 4x finer ages {err_e:.2g}")
    for name, pop, mu, eps, chi, t_sol in (("diffusive LIF", white, 17.0, 0.15, chi_w, t_w),
                                           ("escape noise", escape, 24.0, 0.1, chi_e, t_e)):
        chi_f = popdens.transfer(pop, mu, [MC_F])[0]
        wall, amp_mc, amp, se, t_curve = mc_cost(pop, mu, eps, chi_f)
        print(f"  {name}: Monte Carlo at {MC_F:g} Hz, N={MC_N:g}, {MC_T:g} ms: {wall:.1f} s, amplitude "
              f"{amp_mc:.4f} vs {amp:.4f} Hz, SE {se:.4f} Hz ({se / amp:.1%})")
        print(f"  {name}: Monte Carlo for the curve at SE = 1 %: {t_curve:.3g} s -> "
              f"{t_curve / t_sol:.3g}x the transfer-function time")


if __name__ == "__main__":
    main()
