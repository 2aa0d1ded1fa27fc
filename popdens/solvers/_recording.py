"""Time grids and recording shared by the density solvers and the Monte Carlo twins."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .. import _validation as v

#: Most steps advanced per compiled call between progress updates / interrupts.
BLOCK_STEPS = 5000
#: Work per compiled call, in unit-steps (neurons, age bins or cells times steps).  Ctrl-C is
#: handled between calls; at the measured 10-30 ns per unit-step (escape twin, white-noise twin,
#: solvers, uncontended; up to ~150 ns under load with large ensembles) a call takes 0.02-0.3 s, so an
#: interrupt acts within a second.
WORK_PER_CALL = 2_000_000


def steps_per_call(units: int, cap: int = BLOCK_STEPS) -> int:
    """Steps per compiled call for ``units`` neurons (or bins, cells): at most ``cap``, at least 1.

    Depends only on the problem size, never on timing, so results stay reproducible."""
    return int(max(1, min(cap, WORK_PER_CALL // max(int(units), 1))))


#: A jump of the drive closer than this to a step boundary (in units of dt) lies on it; the
#: slack covers the round-off of k * dt (about 1e-16 k dt), with a wide margin.
JUMP_TOL = 1e-6


@dataclass(frozen=True)
class TimeGrid:
    """Internal steps and recording schedule.

    ``n_steps`` steps of ``dt`` ms cover ``[0, t_end]``; outputs every
    ``every`` steps; snapshots every ``snap_every`` steps (0 = none).
    """

    t_end: float
    dt: float
    n_steps: int
    every: int
    snap_every: int

    @property
    def output_times(self) -> np.ndarray:
        return np.arange(self.n_steps // self.every + 1) * self.every * self.dt

    def step_times(self, k0: int, k1: int) -> np.ndarray:
        """Times (ms) of the step boundaries k0..k1 (inclusive)."""
        return np.arange(k0, k1 + 1) * self.dt


def make_grid(t_end, dt, record_interval=None, snapshot_interval=None) -> TimeGrid:
    t_end = v.positive("t_end", t_end)
    dt = v.positive("dt", dt)
    n = v.n_steps_for(t_end, dt)
    every = 1
    if record_interval is not None:
        record_interval = v.positive("record_interval", record_interval)
        every = v.n_steps_for(record_interval, dt, name_t="record_interval")
        if n % every:
            raise ValueError(
                f"`record_interval` = {record_interval!r} ms must divide `t_end` = {t_end!r} ms"
            )
    snap = 0
    if snapshot_interval is not None:
        snapshot_interval = v.positive("snapshot_interval", snapshot_interval)
        snap = v.n_steps_for(snapshot_interval, dt, name_t="snapshot_interval")
    return TimeGrid(t_end, dt, n, every, snap)


def block_ends(grid: TimeGrid, block: int = BLOCK_STEPS):
    """Step indices at which compiled blocks end (snapshot steps included), in increasing order."""
    block = max(int(block), 1)
    snap = grid.snap_every
    k = 0
    while k < grid.n_steps:
        nxt = min(k + block - (k % block), grid.n_steps)
        if snap:
            nxt = min(nxt, k + snap - (k % snap))
        yield nxt
        k = nxt


class BoundarySamples:
    """A drive sampled at the step boundaries of ``grid``, one-sided at its jumps.

    The solvers and twins interpolate the drive linearly within a step, so a
    jump sampled at a step boundary would ramp the drive up over the step
    before it: a response one step ahead of its cause.  Here a jump that
    falls on a boundary ends a compiled block (:meth:`split`): the block
    before it ends with the value just before the jump, the block after it
    starts with the value after it.  A jump inside a step (not on a
    boundary) is spread over that step.

    Parameters
    ----------
    drive : Drive
    grid : TimeGrid
    """

    def __init__(self, drive, grid: TimeGrid):
        self.drive = drive
        self.grid = grid
        ts = np.asarray(drive.jump_times(0.0, grid.t_end + JUMP_TOL * grid.dt), dtype=float)
        j = np.rint(ts / grid.dt)
        on = np.abs(ts - j * grid.dt) <= JUMP_TOL * grid.dt
        #: step-boundary index -> jump time (ms)
        self.jumps = {int(a): float(b) for a, b in zip(j[on], ts[on]) if 0 <= a <= grid.n_steps}

    def values(self, k0: int, k1: int, left_end: bool = True) -> np.ndarray:
        """Drive at the boundaries k0..k1 (inclusive): after each jump, except at the end
        ``k1 > k0`` (with ``left_end``), where a block before a jump ends with the value before it."""
        out = np.array(self.drive(self.grid.step_times(k0, k1)), dtype=float)
        for j, ts in self.jumps.items():
            if k0 <= j <= k1:
                out[j - k0] = self.drive(ts)
        if left_end and k1 > k0 and k1 in self.jumps:
            out[-1] = self.drive.left_limit(self.jumps[k1])
        return out

    def sides(self, j: int) -> tuple[float, float]:
        """Values just before and just after the jump at boundary ``j``."""
        ts = self.jumps[j]
        return float(self.drive.left_limit(ts)), float(self.drive(ts))

    def start(self) -> float:
        """The drive at t = 0 (after a jump there)."""
        return float(self.values(0, 0)[0])


def split_at_jumps(ends, *samples):
    """Block ends (increasing) with every jump boundary of ``samples`` (BoundarySamples or None)
    added, in increasing order; lazy, so a long run of one-step blocks costs no memory up front."""
    jumps = iter(sorted({j for s in samples if s is not None for j in s.jumps if j > 0}))
    nxt = next(jumps, None)
    for end in ends:
        while nxt is not None and nxt < end:
            yield nxt
            nxt = next(jumps, None)
        if nxt == end:
            nxt = next(jumps, None)
        yield end


def downsample(grid: TimeGrid, rate0: float, rate, mean_u0, mean_u, refr0, refr, done: int):
    """Outputs at recording times from per-step arrays covering ``done`` steps.

    Rates are averaged over each recording interval (spike counts are
    preserved); potentials and refractory fractions are sampled at its end.
    """
    e = grid.every
    n_out = done // e
    r = np.asarray(rate[: n_out * e]).reshape(n_out, e).mean(axis=1) if n_out else np.empty(0)
    mu_s = np.asarray(mean_u[e - 1 : n_out * e : e])
    rf_s = np.asarray(refr[e - 1 : n_out * e : e])
    t = np.arange(n_out + 1) * e * grid.dt
    return (t, np.concatenate([[rate0], r]), np.concatenate([[mean_u0], mu_s]),
            np.concatenate([[refr0], rf_s]))



__all__ = ["TimeGrid", "make_grid", "block_ends", "downsample", "BoundarySamples", "split_at_jumps",
           "steps_per_call", "BLOCK_STEPS", "WORK_PER_CALL"]
