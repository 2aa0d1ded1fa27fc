"""Timing shared by the benchmarks: best of a few runs, wall and CPU time measured together."""

from __future__ import annotations

import math
import time

__all__ = ["best_of"]


def best_of(fn, repeats=3):
    """Smallest wall and CPU time (s) of ``repeats`` calls of ``fn``, and its last result."""
    wall, cpu, out = math.inf, math.inf, None
    for _ in range(repeats):
        w0, c0 = time.perf_counter(), time.process_time()
        out = fn()
        wall = min(wall, time.perf_counter() - w0)
        cpu = min(cpu, time.process_time() - c0)
    return wall, cpu, out
