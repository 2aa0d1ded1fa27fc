"""Benchmark: the shot-noise twin against a minimal compiled loop of the same scheme, and the shot-noise theories.

The twin (``popdens.montecarlo`` with :class:`popdens.ShotNoise`) advances each neuron from one
Poisson arrival to the next (exact exponential waiting times, exact LIF decay, fixed jumps).  The
reference is the smallest compiled loop doing the same for the same neurons and time (one
function, no drive sampling, no recording); both are timed in this run, best of 3, CPU time beside
wall time.  Then the cost of one stationary rate: the exact formula (exponential PSPs) and the
jump-density operator (three grids), of one step of the jump-density solver (also with input rates
that change every step, as in a network: defect correction against refactorising every step, ratio),
of ``transfer`` per frequency and of ``stationary`` (ISI statistics and densities).

Run:  popdens bench shot_noise
"""

from __future__ import annotations

import math

import numba
import numpy as np

import popdens

from ._timing import best_of as _best

T_END = 500.0  # ms
N = 2000
RATES = (3300.0, 1700.0)  # Hz
PSP = 0.5  # mV


@numba.njit(cache=True)
def _minimal(n, t_end, tau, e, th, re, tref, nu_e, nu_i, a):  # pragma: no cover - compiled
    """Event-driven LIF with fixed excitatory and inhibitory jumps; returns the spike count."""
    spikes = 0
    for _ in range(n):
        t, u = 0.0, re
        te = np.random.exponential(1.0 / nu_e)
        ti = np.random.exponential(1.0 / nu_i)
        while True:
            tn = te if te < ti else ti
            if tn > t_end:
                break
            u = e + (u - e) * math.exp(-(tn - t) / tau)
            t = tn
            if te <= ti:
                u += a
                te += np.random.exponential(1.0 / nu_e)
                if u >= th:
                    spikes += 1
                    u = re
                    t += tref
                    while te < t:
                        te += np.random.exponential(1.0 / nu_e)
                    while ti < t:
                        ti += np.random.exponential(1.0 / nu_i)
            else:
                u -= a
                ti += np.random.exponential(1.0 / nu_i)
    return spikes


def main() -> None:
    nrn = popdens.LIF(20.0, 20.0, 10.0, 2.0)
    pop = popdens.Population(nrn, popdens.ShotNoise(RATES[0], PSP, RATES[1], PSP))
    popdens.montecarlo(pop, 0.0, 1.0, n=10, burn_in=0.0, progress=False)  # compile / load the caches
    _minimal(10, 1.0, 20.0, 0.0, 20.0, 10.0, 2.0, 3.3, 1.7, PSP)

    w_twin, c_twin, mc = _best(lambda: popdens.montecarlo(pop, 0.0, T_END, n=N, burn_in=0.0, seed=1,
                                                          progress=False))
    w_min, c_min, count = _best(lambda: _minimal(N, T_END, 20.0, 0.0, 20.0, 10.0, 2.0, RATES[0] * 1e-3,
                                                 RATES[1] * 1e-3, PSP))
    events = N * T_END * (RATES[0] + RATES[1]) * 1e-3
    print(f"shot-noise twin: LIF, fixed PSPs {PSP} mV, {RATES[0]:g} + {RATES[1]:g} Hz input, {N} neurons x "
          f"{T_END:g} ms ({events:.3g} input spikes)")
    print(f"  twin            : wall {w_twin:.3f} s, CPU {c_twin:.3f} s ({1e9 * c_twin / events:.1f} ns per input)")
    print(f"  minimal loop    : wall {w_min:.3f} s, CPU {c_min:.3f} s ({1e9 * c_min / events:.1f} ns per input)")
    print(f"  ratio twin/min  : {c_twin / c_min:.2f} (CPU), {w_twin / w_min:.2f} (wall)")
    print(f"  rates           : twin {float(np.nansum(mc.rate[1:]) / (mc.rate.size - 1)):.3f} Hz, "
          f"minimal {1e3 * count / (N * T_END):.3f} Hz")

    expo = popdens.Population(nrn, popdens.ShotNoise(2050.0, 0.5, 450.0, 0.5, "exponential"))
    w, c, r = _best(lambda: popdens.gain(expo, 0.0))
    print(f"  exact rate (exponential PSPs): {float(r):.4f} Hz in wall {1e3 * w:.1f} ms, CPU {1e3 * c:.1f} ms")
    w, c, r = _best(lambda: popdens.gain(pop, 0.0))
    print(f"  jump-density rate (fixed PSPs, 3 grids): {float(r):.4f} Hz in wall {1e3 * w:.0f} ms, "
          f"CPU {1e3 * c:.0f} ms")
    w, c, res = _best(lambda: popdens.simulate(pop, 0.0, 50.0, dt=0.1, error_control="off", progress=False), 1)
    print(f"  jump-density solver: {1e3 * c / 500:.2f} ms CPU per step (two grids of "
          f"{res.diagnostics['n_cells']} and {2 * res.diagnostics['n_cells']} cells; wall {1e3 * w / 500:.2f} ms)")
    _varying_rates(pop)
    for name, p in (("fixed", pop), ("exponential", expo)):
        w, c, _ = _best(lambda p=p: popdens.transfer(p, 0.0, [10.0, 100.0]), 1)
        print(f"  transfer ({name} PSPs, 3 grids): CPU {c / 2:.2f} s per frequency (wall {w / 2:.2f} s)")
        w, c, st = _best(lambda p=p: popdens.stationary(p, 0.0), 1)
        print(f"  stationary ({name} PSPs: ISI CV {st.cv:.3f}, density on {st.isi_t.size} times): CPU {c:.2f} s "
              f"(wall {w:.2f} s)")


def _varying_rates(pop, steps: int = 200) -> None:
    """The solver with input rates that change every step (network cohorts): defect correction
    preconditioned by a nearby factorisation against the straightforward refactorisation every step."""
    from ..solvers import jump_density

    t = np.arange(steps + 1) * 0.1
    ne = RATES[0] * (1.0 + 0.1 * np.sin(2.0 * np.pi * t / 20.0))  # +-10 % at 50 Hz
    ni = RATES[1] * (1.0 + 0.1 * np.cos(2.0 * np.pi * t / 20.0))
    runs = {}
    keep = jump_density.MAX_CORRECTIONS
    for label, corrections in (("defect correction", keep), ("refactorise every step", 0)):
        jump_density.MAX_CORRECTIONS = corrections
        try:
            def run():
                s = jump_density.JumpDensitySolver(pop, 0.1)
                s.initialize(0.0, None)
                return s, s.advance_rates(np.zeros(steps + 1), ne, ni)[0]
            runs[label] = _best(run, 1)
        finally:
            jump_density.MAX_CORRECTIONS = keep
    (w1, c1, (s1, r1)), (w0, c0, (s0, r0)) = runs.values()
    print(f"  time-varying input rates (+-10 % at 50 Hz, {steps} steps, grids of {s1.levels[0].grid.n} and "
          f"{s1.levels[1].grid.n} cells):")
    print(f"    defect correction     : {1e3 * c1 / steps:.2f} ms CPU per step (wall {1e3 * w1 / steps:.2f}), "
          f"{s1.factorisations()} factorisations, {s1.diagnostics()['solves']} solves")
    print(f"    refactorise every step: {1e3 * c0 / steps:.2f} ms CPU per step (wall {1e3 * w0 / steps:.2f}), "
          f"{s0.factorisations()} factorisations")
    print(f"    ratio refactorise/defect correction: {c0 / c1:.2f} (CPU), {w0 / w1:.2f} (wall); "
          f"largest rate difference {float(np.max(np.abs(r1 - r0))):.1e} Hz")


if __name__ == "__main__":
    main()
