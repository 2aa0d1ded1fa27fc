"""Benchmark: finite-size (mesoscopic) integration, cost against N, the twin, the infinite solver.

LIF with exponential escape at a constant drive (about 30 Hz), 1 s of biological time with the
mesoscopic default age span (refractory + 6 tau_m, the infinite solver given the same), no burn-in (it costs the same per step).  The twin runs
at its default dt = 0.1 ms; the mesoscopic integration at dt = 0.5 ms, where its discretisation
error (RMS over a step response against dt = 0.0125 ms, printed) is a fraction of the
finite-size standard deviation of a 1 ms bin at the largest N compared, so that both give the
same answer to within the twin's own noise.  Prints, each measured in this one run with CPU time
beside wall time:

* the mesoscopic cost per biological second for N = 1e2 ... 1e6 and its spread (max/min);
* the Monte Carlo twin of the same N (1e3, 1e5) and the speed-up;
* the infinite-population (refractory-density) solver on the same bins, and the ratio;
* a minimal compiled loop of the same scheme (LIF exact step, exponential escape, trapezoidal
  hazard, variance recursion, binomial draw; no model dispatch, one population), and the ratio.

Run:  popdens bench finite_size
"""

from __future__ import annotations

import math
import os
import time

import numba
import numpy as np

import popdens
from popdens import hazard

T_END = 1000.0  # ms
DT = 0.5  # ms, mesoscopic integration (see the module docstring)
DT_TWIN = 0.1  # ms, the twin's default
MU = 24.0  # mV
SIZES = (100, 1000, 10_000, 100_000, 1_000_000)
REPEATS = 3
#: The mesoscopic runs are timed over this span (ms) and reported per biological second, so that
#: each timing lasts long enough to be resolved on a loaded machine.
T_LONG = 10_000.0


@numba.njit(cache=True, nogil=True)
def _minimal_loop(m, w, u, n_steps, size, dt, tau_m, mu, rate0, theta, width, tau_ref):  # pragma: no cover
    """The mesoscopic step for one LIF population with exponential escape, written out plainly."""
    n_bins = m.shape[0]
    e = math.exp(-dt / tau_m)
    head = 0
    total = 0
    for _ in range(n_steps):
        fired = 0.0
        fired_w = 0.0
        m_tot = 0.0
        w_tot = 0.0
        for j in range(n_bins):
            p = (head + j) % n_bins
            age = (j + 0.5) * dt
            if age + dt <= tau_ref:
                continue
            un = mu + (u[p] - mu) * e
            h = rate0 * 0.5 * (math.exp((u[p] - theta) / width) + math.exp((un - theta) / width)) * dt * 1e-3
            s = math.exp(-h)
            q = 1.0 - s
            fired += m[p] * q
            fired_w += w[p] * q
            m_tot += m[p]
            w_tot += w[p]
            w[p] = s * s * w[p] + q * s * m[p]
            m[p] *= s
            u[p] = un
        lam = fired_w / w_tot if w_tot > 0.0 else 0.0
        f = min(max(fired + lam * (1.0 - m_tot), 0.0), 1.0)
        k = np.random.binomial(size, f)
        total += k
        head = (head - 1) % n_bins
        m[head] += k / size  # merged into the slot (the oldest bin's mass stays: no separate last bin)
        w[head] = 0.0
        u[head] = 0.0
    return total


def _timed(fn):
    best = (math.inf, math.inf)
    out = None
    for _ in range(REPEATS):
        c0, w0 = time.process_time(), time.perf_counter()
        out = fn()
        best = min(best, (time.perf_counter() - w0, time.process_time() - c0))
    return best, out


def main() -> None:
    pop = popdens.Population(popdens.LIF(tau_m=10.0, threshold=20.0, reset=0.0, refractory=2.0),
                             popdens.EscapeNoise(hazard.Exponential(rate=20.0, width=2.0)))
    # compile / load the caches outside the timings
    popdens.simulate(pop, MU, 10.0, dt=DT, n=10, burn_in=0.0)
    popdens.simulate(pop, MU, 10.0, dt=DT, max_age=50.0, error_control="off")
    popdens.montecarlo(pop, MU, 10.0, n=10, burn_in=0.0)
    diag = popdens.simulate(pop, MU, 1.0, dt=DT, n=10, burn_in=0.0).diagnostics
    n_bins, max_age = diag["n_bins"], diag["max_age_ms"]  # the mesoscopic default; the others use the same
    _minimal_loop(np.full(n_bins, 1.0 / n_bins), np.zeros(n_bins), np.zeros(n_bins), 1, 100, DT, 10.0, MU,
                  20.0, 20.0, 2.0, 2.0)
    load0 = os.getloadavg()

    print(f"finite-size benchmark: LIF + exponential escape, mu = {MU:g} mV, {T_END:g} ms; mesoscopic at "
          f"dt = {DT:g} ms with {n_bins} age bins, twin at dt = {DT_TWIN:g} ms "
          f"(times: best of {REPEATS}, wall / CPU)")
    meso = {}
    for n in SIZES:
        (wall, cpu), res = _timed(lambda: popdens.simulate(pop, MU, T_LONG, dt=DT, n=n, seed=1, burn_in=0.0))
        wall, cpu = wall * T_END / T_LONG, cpu * T_END / T_LONG
        meso[n] = (wall, cpu)
        print(f"  mesoscopic N = {n:>9,}: {wall:.3f} s / {cpu:.3f} s CPU per biological second "
              f"(mean rate {res.rate[1:].mean():.2f} Hz)")
    cpus = [c for _, c in meso.values()]
    print(f"  spread over N (max/min CPU): {max(cpus) / min(cpus):.3f}  (target <= 1.10)")

    (w_det, c_det), _ = _timed(lambda: popdens.simulate(pop, MU, T_LONG, dt=DT, max_age=max_age,
                                                       error_control="off"))
    w_det, c_det = w_det * T_END / T_LONG, c_det * T_END / T_LONG
    print(f"  infinite population (refractory density, same bins): {w_det:.3f} s / {c_det:.3f} s CPU; "
          f"mesoscopic / infinite = {np.median(cpus) / c_det:.2f}  (target <= 2)")
    m0 = np.full(n_bins, 1.0 / n_bins)
    (w_min, c_min), _ = _timed(lambda: _minimal_loop(m0.copy(), np.zeros(n_bins), np.zeros(n_bins),
                                                      int(round(T_LONG / DT)), 1000, DT, 10.0, MU, 20.0, 20.0, 2.0,
                                                      2.0))
    w_min, c_min = w_min * T_END / T_LONG, c_min * T_END / T_LONG
    print(f"  minimal compiled loop of the same scheme: {w_min:.3f} s / {c_min:.3f} s CPU; "
          f"mesoscopic / minimal = {np.median(cpus) / c_min:.2f}")
    step = popdens.drive.Step(t=200.0, before=15.0, after=MU)
    ref = popdens.simulate(pop, step, T_END, dt=0.0125, record_interval=1.0, error_control="off").rate[1:]
    err = [float(np.sqrt(np.mean((popdens.simulate(pop, step, T_END, dt=h, record_interval=1.0,
                                                   error_control="off").rate[1:] - ref) ** 2)))
           for h in (DT, DT_TWIN)]
    print(f"  step response RMS discretisation error (1 ms bins): {err[0]:.3f} Hz at dt = {DT:g} ms, "
          f"{err[1]:.3f} Hz at {DT_TWIN:g} ms; finite-size SD of a 1 ms bin at N = 1e5: "
          f"{math.sqrt(ref.mean() / (1e5 * 1e-3)):.3f} Hz")
    for n in (1000, 100_000):
        c0, w0 = time.process_time(), time.perf_counter()
        popdens.montecarlo(pop, MU, T_END, n=n, dt=DT_TWIN, seed=2, burn_in=0.0)
        w_mc, c_mc = time.perf_counter() - w0, time.process_time() - c0
        target = 10 if n == 1000 else 1000
        print(f"  Monte Carlo twin N = {n:>7,}: {w_mc:.3f} s / {c_mc:.3f} s CPU; "
              f"twin / mesoscopic = {c_mc / meso[n][1]:.1f}x  (target >= {target}x)")
    load1 = os.getloadavg()
    print(f"  load average (1 min) before/after: {load0[0]:.2f} / {load1[0]:.2f} on {os.cpu_count()} cores")


if __name__ == "__main__":
    main()
