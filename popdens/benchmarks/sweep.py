"""Sweep benchmark: a 400-point transfer-function map, serial vs a local process pool vs Dask,
and the per-point overhead of each backend.

Prints, from one run:

* wall time of a 20 x 20 map (drive 23-32 mV x escape width 1.5-4 mV, 10 frequencies, LIF with
  exponential escape) serially, on a 2-process pool and on a 2-worker local Dask cluster, the
  speed-ups, and that all three give identical numbers;
* a control: the same speed-up for pure-Python CPU work, which shows whether a second core was
  actually free during the run (on a shared machine it often is not);
* per-point overhead: wall time per point of a 400-point sweep whose analysis does no work
  (the cost of scheduling, pickling and the durable per-point file), per backend;
* the default backend against serial, each in a fresh process as a user's command would run (imports
  and compiled-kernel loading included), for 40 short points (a gain curve each, ~5 ms) and 40 long
  ones (a transfer function each), wall and CPU time (the CPU of the worker processes included).

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


#: Fresh-process comparison: points per sweep, and the analyses of short and long points.
N_FRESH = 40


def _fresh_point(params, seed):  # module level: picklable for the pool
    import popdens
    from popdens import hazard

    pop = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0),
                             popdens.EscapeNoise(hazard.Exponential(20.0, params["width"])))
    if params["kind"] == "short":
        return {"rate": float(popdens.gain(pop, 25.0))}
    chi = popdens.transfer(pop, 25.0, np.geomspace(1.0, 1000.0, 200))
    return {"gain_1kHz": float(abs(chi[-1]))}


def _fresh(kind: str, backend: str) -> None:
    """One sweep in this (fresh) process; prints wall and CPU time (children included)."""
    t0, c0 = time.perf_counter(), os.times()
    res = sweep(_fresh_point, [{"kind": kind, "width": 1.5 + 0.05 * i} for i in range(N_FRESH)],
                backend=None if backend == "default" else backend, workers=2, figures=False)
    c1 = os.times()
    cpu = (c1.user - c0.user) + (c1.system - c0.system) + (c1.children_user - c0.children_user) \
        + (c1.children_system - c0.children_system)
    print(f"{time.perf_counter() - t0:.3f} {cpu:.3f} {res.diagnostics['backend']}")


def _fresh_comparison() -> None:
    import subprocess
    import sys

    print(f"default backend vs serial, {N_FRESH} points, each sweep in a fresh process (imports and kernel "
          "loading included; best of 3):")
    for kind in ("short", "long"):
        row = {}
        for backend in ("serial", "default", "processes"):
            best = None
            for _ in range(3):
                out = subprocess.run([sys.executable, "-c", f"from popdens.benchmarks.sweep import _fresh; "
                                      f"_fresh({kind!r}, {backend!r})"], capture_output=True, text=True, check=True)
                wall, cpu, ran = out.stdout.split()
                if best is None or float(wall) < best[0]:
                    best = (float(wall), float(cpu), ran)
            row[backend] = best
        ser = row["serial"][0]
        print(f"  {kind:5s} points: serial {ser:.2f} s (CPU {row['serial'][1]:.2f} s); default {row['default'][0]:.2f} s "
              f"(CPU {row['default'][1]:.2f} s, ran on: {row['default'][2]}), ratio default/serial "
              f"{row['default'][0] / ser:.2f}; always-pool {row['processes'][0]:.2f} s (CPU {row['processes'][1]:.2f} s)")


def main():
    print(f"load average at start: {os.getloadavg()[0]:.2f} {os.getloadavg()[1]:.2f} {os.getloadavg()[2]:.2f}"
          f" on {os.cpu_count()} cores")
    _fresh_comparison()
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
                                           dashboard_address=":0")
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
