"""Benchmark: cost of one stability-map point of a two-cohort network.

The sparse excitatory-inhibitory LIF network of Brunel 2000 (J. Comput. Neurosci. 8:183; model A,
the circuit of ``popdens bench continuation``) at the 5 x 5 points of a map over relative
inhibition g in [3, 8] and external rate nu_ext in [5, 40] Hz.  Every point is what
:func:`popdens.network.stability_map` does there: :func:`fixed_points` in the default rate box,
then :func:`stability` at each fixed point (search up to 600 Hz).  Prints, per point, the CPU
and wall time of both parts and the verdict, then the mean and the largest time per point
(target: 0.2 s), and the load average (these machines are shared; CPU time is the figure).

Run:  popdens bench stability_map
"""

from __future__ import annotations

import os
import time

import numpy as np

from popdens.benchmarks.continuation import G_SPAN, NU_SPAN, circuit
from popdens.exceptions import ConvergenceError
from popdens.network import fixed_points, stability

#: Points per axis.
POINTS = 5
#: Rate box (Hz) and highest frequency (Hz) searched, as in the continuation benchmark.
RATE_RANGE = (0.0, 500.0)
MAX_FREQUENCY = 600.0


def _clock():
    return time.perf_counter(), time.process_time()


def main() -> None:
    gs = np.linspace(*G_SPAN, POINTS)
    nus = np.linspace(*NU_SPAN, POINTS)
    warm = circuit(5.0, 20.0)  # compile / load the kernels outside the timings
    stability(warm, fixed_points(warm, RATE_RANGE)[0], max_frequency=MAX_FREQUENCY)
    load0 = os.getloadavg()
    rows = []
    for nu in nus:
        for g in gs:
            c = circuit(g, nu)
            w0, c0 = _clock()
            fps = fixed_points(c, RATE_RANGE)
            w1, c1 = _clock()
            verdicts = []
            for fp in fps:
                try:
                    st = stability(c, fp, max_frequency=MAX_FREQUENCY)
                except ConvergenceError:
                    verdicts.append("no root")
                    continue
                word = "marginal" if st.marginal else ("stable" if st.stable else "unstable")
                verdicts.append(f"{fp.rates[0]:.3g} Hz {word} ({st.growth_rate:.4g}/s at {st.frequency:.4g} Hz)")
            w2, c2 = _clock()
            rows.append((c1 - c0, c2 - c1, w2 - w0))
            print(f"  g = {g:.2f}, nu_ext = {nu:5.2f} Hz: fixed points {c1 - c0:.3f} s CPU, stability "
                  f"{c2 - c1:.3f} s CPU, {w2 - w0:.3f} s wall; " + "; ".join(verdicts))
    load1 = os.getloadavg()
    t = np.array(rows)
    cpu = t[:, 0] + t[:, 1]
    print(f"stability map point, two cohorts (Brunel 2000 model A), {len(rows)} points: mean {cpu.mean():.3f} s CPU "
          f"({t[:, 2].mean():.3f} s wall), of which fixed points {t[:, 0].mean():.3f} s and stability "
          f"{t[:, 1].mean():.3f} s; largest {cpu.max():.3f} s CPU; target <= 0.2 s")
    print(f"load average (1 min) before/after: {load0[0]:.2f} / {load1[0]:.2f} on {os.cpu_count()} cores")


if __name__ == "__main__":
    main()
