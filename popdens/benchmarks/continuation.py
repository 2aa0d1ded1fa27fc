"""Benchmark: stability boundaries by continuation against a 50 x 50 stability map.

The sparse excitatory-inhibitory LIF network of Brunel 2000 (J. Comput.
Neurosci. 8:183; N_E = 10^4, N_I = 2500, C_E = 1000, C_I = 250, J = 0.1 mV,
D = 1.5 ms, external Poisson input on C_E synapses per neuron) over relative
inhibition g in [3, 8] and external rate nu_ext in [5, 40] Hz (0.5 to 4 times
nu_thr = 10 Hz).  Prints the wall and CPU time of :func:`boundary_curves` at
resolution 50 (steps of at most 1/50 of the rectangle: the resolution of a
50 x 50 map), the cost of the 50 x 50 :func:`stability_map` estimated from a
sample of its points timed in the same run (every point costs a fixed-point
search and a root search with its argument-principle count; running all 2500
takes about an hour here), and their ratio.  Set ``POPDENS_BENCH_FULL_MAP=1``
to time the whole map instead of the sample.

Run:  popdens bench continuation
"""

from __future__ import annotations

import os
import time

import numpy as np

import popdens
from popdens.network import Cohort, Circuit, Pathway, PoissonBackground, boundary_curves, stability_map

G_SPAN = (3.0, 8.0)
NU_SPAN = (5.0, 40.0)  # Hz
RESOLUTION = 50
#: Map points timed (a 5 x 5 sub-grid of the 50 x 50 map, every tenth row and column).
SAMPLE_STEP = 10


def circuit(g=1.0, nu_ext=20.0):
    """Brunel 2000's model A; inhibitory weights -g J (g = 1 here: the `inhibition` factor is g)."""
    j, c_e, c_i = 0.1, 1000, 250
    pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(1.0))
    bg = PoissonBackground(nu_ext, j, c_e)
    cohorts = [Cohort("E", pop, size=10000, sigma_ext=0.0, background=bg),
               Cohort("I", pop, size=2500, sigma_ext=0.0, background=bg)]
    pathways = [Pathway("E", "E", j, c_e, 1.5), Pathway("E", "I", j, c_e, 1.5),
                Pathway("I", "E", -g * j, c_i, 1.5), Pathway("I", "I", -g * j, c_i, 1.5)]
    return Circuit(cohorts, pathways)


def _timed(fn):
    w0, c0 = time.perf_counter(), time.process_time()
    out = fn()
    return out, time.perf_counter() - w0, time.process_time() - c0


def main() -> None:
    base = circuit()
    gs = np.linspace(*G_SPAN, RESOLUTION)
    nus = np.linspace(*NU_SPAN, RESOLUTION)
    full = os.environ.get("POPDENS_BENCH_FULL_MAP") == "1"

    def build(g, nu):
        return circuit(g, nu)

    # warm up the compiled kernels outside the timings
    stability_map(build, [5.0], [20.0], max_frequency=600.0, rate_range=(0.0, 500.0))
    load0 = os.getloadavg()
    curves, t_curves, c_curves = _timed(lambda: boundary_curves(
        base, "inhibition", "cohort.*.background.rate", G_SPAN, NU_SPAN, resolution=RESOLUTION,
        max_frequency=600.0, rate_range=(0.0, 500.0)))
    sub_g, sub_nu = (gs, nus) if full else (gs[::SAMPLE_STEP], nus[::SAMPLE_STEP])
    smap, t_map, c_map = _timed(lambda: stability_map(build, sub_g, sub_nu, max_frequency=600.0,
                                                      rate_range=(0.0, 500.0)))
    load1 = os.getloadavg()
    n_sample = sub_g.size * sub_nu.size
    scale = RESOLUTION ** 2 / n_sample
    print(f"network: Brunel 2000 model A (12500 LIF neurons, C_E = 1000, C_I = 250, D = 1.5 ms); "
          f"g in {G_SPAN}, nu_ext in {NU_SPAN} Hz")
    print(f"boundary curves (resolution {RESOLUTION}): {t_curves:.1f} s wall, {c_curves:.1f} s CPU; "
          + ", ".join(f"{c.kind} {len(c)} points ({c.frequency.min():.0f}-{c.frequency.max():.0f} Hz)"
                      for c in curves.curves))
    what = "all" if full else f"a sample of {n_sample} (every {SAMPLE_STEP}th row and column)"
    print(f"stability map {RESOLUTION} x {RESOLUTION}: timed {what} points: {t_map:.1f} s wall, {c_map:.1f} s CPU "
          f"({t_map / n_sample:.2f} s per point); the whole map: {t_map * scale:.0f} s wall, "
          f"{c_map * scale:.0f} s CPU" + ("" if full else " (extrapolated)"))
    print(f"ratio curves / map: {t_curves / (t_map * scale):.3f} wall, {c_curves / (c_map * scale):.3f} CPU "
          f"(target <= 0.1)")
    print(f"load average (1 min) before/after: {load0[0]:.2f} / {load1[0]:.2f} on {os.cpu_count()} cores")


if __name__ == "__main__":
    main()
