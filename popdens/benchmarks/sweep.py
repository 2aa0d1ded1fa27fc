"""Sweep benchmark: a 400-point transfer-function map, serial vs a local process pool vs Dask,
and the per-point overhead of each backend.

Prints, from one run:

* wall time of a 20 x 20 map (drive 23-32 mV x escape width 1.5-4 mV, 10 frequencies, LIF with
  exponential escape) serially, on a 2-process pool and on a 2-worker local Dask cluster, the
  speed-ups, and that all three give identical numbers;
* a control: the same speed-up for pure-Python CPU work, which shows whether a second core was
  actually free during the run (on a shared machine it often is not);
* per-point overhead: wall time per point of a 400-point sweep whose analysis does no work
  (the cost of scheduling, pickling and the durable per-point file), per backend.

The machine is shared: report the load average printed at the start and the end.
Run:  popdens bench sweep
"""

from __future__ import annotations

import itertools
import os
import shutil
import tempfile
import time
import tomllib
from pathlib import Path

import numpy as np

from popdens.scenario import parse_scenario
from popdens.sweeps import sweep
from popdens.scenario.sweep import plan_sweep

SCENARIO = """
[neuron]
model = "LIF"
tau_m = 10.0
threshold = 20.0
reset = 0.0
refractory = 2.0
[noise]
kind = "escape"
[noise.hazard]
shape = "exponential"
rate = 20.0
width = 2.0
[input]
shape = "constant"
mu = 25.0
[run]
t_end = 10.0
[sweep]
analysis = "transfer"
frequencies = [0.0, 1.0, 2.0, 5.0, 10.0, 20.0, 50.0, 100.0, 200.0, 500.0]
"input.mu" = { start = 23.0, stop = 32.0, count = 20 }
"noise.hazard.width" = { start = 1.5, stop = 4.0, count = 20 }
"""
N_TRIVIAL = 400
N_BLOCKS = 4


def nothing(params, seed):
    """An analysis that does no work: measures the sweep machinery alone."""
    return {"x": params["x"]}


def burn(params, seed):
    """Pure-Python CPU work, no memory traffic: the control for how many cores are free right now."""
    s = 0
    for i in range(3_000_000):
        s += i % 7
    return {"s": float(s)}


def timed(label, fn):
    t0 = time.perf_counter()
    res = fn()
    wall = time.perf_counter() - t0
    assert res.complete and not res.failed, label
    print(f"  {label:34s} {wall:8.2f} s")
    return res, wall


def outputs(res):
    return [(r["outputs"], r["curves"]) for r in res.records]


def main():
    print(f"load average at start: {os.getloadavg()[0]:.2f} {os.getloadavg()[1]:.2f} {os.getloadavg()[2]:.2f}"
          f" on {os.cpu_count()} cores")
    plan = plan_sweep(parse_scenario(tomllib.loads(SCENARIO), "bench.toml"))
    tmp = Path(tempfile.mkdtemp(prefix="bench-sweep-"))
    try:
        # warm the compiled kernels (on-disk cache) in this process
        plan.point({k: v[0] for k, v in plan.points.items()}, np.random.SeedSequence(0))
        print(f"{plan.n_points}-point transfer map (10 frequencies), in {N_BLOCKS} blocks alternating serial "
              "and pool so that a change of load hits both alike:")
        points = [dict(zip(plan.points, vals)) for vals in itertools.product(*plan.points.values())]
        size = len(points) // N_BLOCKS
        t_ser = t_pool = 0.0
        ser_out, pool_out = [], []
        for b in range(N_BLOCKS):
            block = points[b * size:(b + 1) * size]
            res, t = timed(f"block {b}: serial", lambda: sweep(plan.point, block, tmp / f"s{b}", backend="serial",
                                                                 figures=False))
            t_ser += t
            ser_out += outputs(res)
            res, t = timed(f"block {b}: process pool, 2 workers", lambda: sweep(
                plan.point, block, tmp / f"p{b}", backend="processes", workers=2, figures=False))
            t_pool += t
            pool_out += outputs(res)
        print(f"  {'total serial':34s} {t_ser:8.2f} s")
        print(f"  {'total process pool':34s} {t_pool:8.2f} s")
        ctl = [{"x": float(i)} for i in range(16)]
        print("control, 16 points of pure-Python CPU work:")
        _, c_ser = timed("serial", lambda: sweep(burn, ctl, backend="serial", figures=False))
        _, c_pool = timed("process pool, 2 workers", lambda: sweep(burn, ctl, backend="processes", workers=2,
                                                                   figures=False))
        pts = [{"x": float(i)} for i in range(N_TRIVIAL)]
        print(f"{N_TRIVIAL}-point sweep of an analysis that does no work (per-point overhead):")
        _, o_ser = timed("serial", lambda: sweep(nothing, pts, tmp / "ns", backend="serial", figures=False))
        _, o_pool = timed("process pool, 2 workers", lambda: sweep(nothing, pts, tmp / "np", backend="processes",
                                                                   workers=2, figures=False))

        import distributed

        t0 = time.perf_counter()
        cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                           dashboard_address=None)
        t_start = time.perf_counter() - t0
        try:
            addr = cluster.scheduler_address
            # fresh workers import popdens and load the compiled kernels from the on-disk cache
            t0 = time.perf_counter()
            sweep(nothing, pts[:20], scheduler=addr, figures=False)
            sweep(plan.point, points[:4], scheduler=addr, figures=False)
            t_warm = time.perf_counter() - t0
            print(f"local Dask cluster (2 workers) started in {t_start:.2f} s, warmed up (imports, compiled "
                  f"kernels) in {t_warm:.2f} s; neither is counted below")
            _, o_dask = timed("Dask, 2 workers (no-work points)", lambda: sweep(
                nothing, pts, tmp / "nd", scheduler=addr, figures=False))
            dask, t_dask = timed("Dask, 2 workers (transfer map)", lambda: sweep(
                plan.point, points, tmp / "d", scheduler=addr, figures=False))
        finally:
            cluster.close()
        same = ser_out == pool_out == outputs(dask)
        print("results:")
        print(f"  identical numbers on all three backends: {same}")
        print(f"  transfer map speed-up, process pool / serial: {t_ser / t_pool:.2f}x (target >= 1.7x)")
        print(f"  control speed-up (pure CPU work), pool / serial: {c_ser / c_pool:.2f}x: about 2 when a second "
              "core is free; near 1 means other work holds it")
        print(f"  transfer map speed-up, Dask / serial:         {t_ser / t_dask:.2f}x (Dask run after the others)")
        print(f"  mean work per point (serial): {1e3 * t_ser / plan.n_points:.1f} ms")
        for name, t in (("serial", o_ser), ("process pool", o_pool), ("Dask", o_dask)):
            print(f"  overhead per point, {name:12s}: {1e3 * t / N_TRIVIAL:.2f} ms "
                  "(scheduling + pickling + one fsync-ed file)")
        print(f"load average at end: {os.getloadavg()[0]:.2f} {os.getloadavg()[1]:.2f} {os.getloadavg()[2]:.2f}")
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
