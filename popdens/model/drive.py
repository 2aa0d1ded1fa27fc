"""Input drives: the mean input ``mu(t)`` in mV as a function of time in ms.

Every drive is a small immutable object; calling it on an array of times
(ms) returns the drive (mV) with the same shape.  Drives add with ``+``.
A drive that jumps (``Step``, ``Pulse``) lists its jumps in
:meth:`Drive.jump_times` (and its value just before each in
:meth:`Drive.left_limit`); the time-domain front ends end a compiled block at
each jump and take the value before the jump at the end of the last step
before it, so no response precedes its cause.

Examples
--------
>>> d = Constant(10.0) + Pulse(t=50.0, duration=20.0, base=0.0, amplitude=5.0)
>>> d([0.0, 60.0]).tolist()
[10.0, 15.0]
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .. import _validation as v
from .._files import read_regular_file

__all__ = ["Drive", "Constant", "Step", "Pulse", "Ramp", "Sine", "Trace", "Sum", "as_drive"]


class Drive:
    """Base class: a function of time (ms) returning mV, vectorised."""

    def __call__(self, t):
        t = np.asarray(t, dtype=float)
        out = np.asarray(self._evaluate(np.atleast_1d(t)), dtype=float)
        return out.reshape(t.shape) if t.ndim else float(out.reshape(-1)[0])

    def _evaluate(self, t: np.ndarray) -> np.ndarray:  # pragma: no cover - abstract
        raise NotImplementedError

    def __add__(self, other):
        other = as_drive(other)
        left = self.terms if isinstance(self, Sum) else (self,)
        right = other.terms if isinstance(other, Sum) else (other,)
        return Sum(left + right)

    __radd__ = __add__

    @property
    def is_constant(self) -> bool:
        return False

    def jump_times(self, t0: float, t1: float) -> np.ndarray:
        """Times (ms) in ``[t0, t1]`` where the drive jumps, sorted; none for a continuous drive.

        At a jump time ``t`` the drive takes its value after the jump
        (right-continuous); :meth:`left_limit` gives the value just before it.
        """
        return np.empty(0)

    def left_limit(self, t) -> np.ndarray | float:
        """The drive (mV) just before times ``t`` (ms): differs from ``self(t)`` only at a jump."""
        t = np.asarray(t, dtype=float)
        out = np.asarray(self._left(np.atleast_1d(t)), dtype=float)
        return out.reshape(t.shape) if t.ndim else float(out.reshape(-1)[0])

    def _left(self, t: np.ndarray) -> np.ndarray:
        return self._evaluate(t)

    def parameters(self) -> dict:
        return {k: getattr(self, k) for k in getattr(self, "__dataclass_fields__", {})}


def _within(times, t0: float, t1: float) -> np.ndarray:
    x = np.asarray(times, dtype=float)
    return np.sort(x[(x >= t0) & (x <= t1)])


@dataclass(frozen=True)
class Constant(Drive):
    """Constant drive ``mu`` (mV)."""

    mu: float

    def __post_init__(self):
        object.__setattr__(self, "mu", v.as_finite_float("mu", self.mu))

    def _evaluate(self, t):
        return np.full(t.shape, self.mu)

    @property
    def is_constant(self) -> bool:
        return True


@dataclass(frozen=True)
class Step(Drive):
    """``before`` (mV) until time ``t`` (ms), ``after`` (mV) from then on."""

    t: float
    before: float
    after: float

    def __post_init__(self):
        for k in ("t", "before", "after"):
            object.__setattr__(self, k, v.as_finite_float(k, getattr(self, k)))

    def _evaluate(self, t):
        return np.where(t >= self.t, self.after, self.before)

    def jump_times(self, t0, t1):
        return _within([self.t], t0, t1) if self.after != self.before else np.empty(0)

    def _left(self, t):
        return np.where(t > self.t, self.after, self.before)


@dataclass(frozen=True)
class Pulse(Drive):
    """``base`` (mV), plus ``amplitude`` (mV) during ``[t, t + duration)`` (ms)."""

    t: float
    duration: float
    base: float
    amplitude: float

    def __post_init__(self):
        for k in ("t", "duration", "base", "amplitude"):
            object.__setattr__(self, k, v.as_finite_float(k, getattr(self, k)))
        v.positive("duration", self.duration)

    def _evaluate(self, t):
        on = (t >= self.t) & (t < self.t + self.duration)
        return self.base + np.where(on, self.amplitude, 0.0)

    def jump_times(self, t0, t1):
        return _within([self.t, self.t + self.duration], t0, t1) if self.amplitude != 0.0 else np.empty(0)

    def _left(self, t):
        on = (t > self.t) & (t <= self.t + self.duration)
        return self.base + np.where(on, self.amplitude, 0.0)


@dataclass(frozen=True)
class Ramp(Drive):
    """``start`` (mV) until ``t_start``, linear to ``stop`` at ``t_stop`` (ms), then ``stop``."""

    t_start: float
    t_stop: float
    start: float
    stop: float

    def __post_init__(self):
        for k in ("t_start", "t_stop", "start", "stop"):
            object.__setattr__(self, k, v.as_finite_float(k, getattr(self, k)))
        v.less_than("t_start", self.t_start, "t_stop", self.t_stop)

    def _evaluate(self, t):
        frac = np.clip((t - self.t_start) / (self.t_stop - self.t_start), 0.0, 1.0)
        return self.start + frac * (self.stop - self.start)


@dataclass(frozen=True)
class Sine(Drive):
    """``mean + amplitude * sin(2 pi frequency t / 1000 + phase)``.

    Parameters
    ----------
    mean, amplitude : float
        mV.
    frequency : float
        Hz (t is in ms), >= 0.
    phase : float, optional
        rad, default 0.
    """

    mean: float
    amplitude: float
    frequency: float
    phase: float = 0.0

    def __post_init__(self):
        for k in ("mean", "amplitude", "frequency", "phase"):
            object.__setattr__(self, k, v.as_finite_float(k, getattr(self, k)))
        v.non_negative("frequency", self.frequency)

    def _evaluate(self, t):
        return self.mean + self.amplitude * np.sin(2.0 * math.pi * self.frequency * t * 1e-3 + self.phase)


#: Largest trace file read (bytes): about 10^7 samples; guards against a wrong file (a device, a log).
MAX_TRACE_BYTES = 200_000_000


@dataclass(frozen=True, eq=False)
class Trace(Drive):
    """A sampled drive, linearly interpolated; constant beyond the ends.

    Parameters
    ----------
    times : array_like
        Sample times (ms), strictly increasing.
    values : array_like
        Drive (mV) at those times.
    """

    times: np.ndarray
    values: np.ndarray

    def __post_init__(self):
        t = v.finite_array("times", self.times).ravel()
        y = v.finite_array("values", self.values).ravel()
        if t.size < 1 or t.size != y.size:
            raise ValueError(f"`times` and `values` must have the same non-zero length, got {t.size} and {y.size}")
        if np.any(np.diff(t) <= 0):
            raise ValueError("`times` must be strictly increasing")
        t.setflags(write=False)
        y.setflags(write=False)
        object.__setattr__(self, "times", t)
        object.__setattr__(self, "values", y)

    @classmethod
    def from_csv(cls, path: str | Path) -> "Trace":
        """Read a two-column CSV file: time (ms), drive (mV).  A header line is allowed; a FIFO, a
        device or a file over ``MAX_TRACE_BYTES`` is refused (``ValueError``)."""
        rows: list[tuple[float, float]] = []
        path = Path(path)
        try:
            text = read_regular_file(path, MAX_TRACE_BYTES, "trace file").decode("utf-8")
        except UnicodeDecodeError:
            raise ValueError(f"{path}: not UTF-8 text") from None
        for i, row in enumerate(csv.reader(io.StringIO(text, newline=""))):
            if not row or row[0].lstrip().startswith("#"):
                continue
            if len(row) < 2:
                raise ValueError(f"{path}:{i + 1}: expected two columns (ms, mV), got {row!r}")
            try:
                rows.append((float(row[0]), float(row[1])))
            except ValueError:
                if rows:
                    raise ValueError(f"{path}:{i + 1}: not numbers: {row!r}") from None
                continue  # header line
        if not rows:
            raise ValueError(f"{path}: no data rows")
        arr = np.asarray(rows)
        return cls(arr[:, 0], arr[:, 1])

    def _evaluate(self, t):
        return np.interp(t, self.times, self.values)

    def parameters(self):
        return {"times": self.times.tolist(), "values": self.values.tolist()}


@dataclass(frozen=True)
class Sum(Drive):
    """Sum of several drives."""

    terms: tuple

    def __post_init__(self):
        terms = tuple(as_drive(x) for x in self.terms)
        if not terms:
            raise ValueError("`terms` must contain at least one drive")
        object.__setattr__(self, "terms", terms)

    def _evaluate(self, t):
        out = np.zeros(t.shape)
        with np.errstate(over="ignore", invalid="ignore"):  # non-finite drives are reported by the solvers
            for d in self.terms:
                out = out + d._evaluate(t)
        return out

    def _left(self, t):
        out = np.zeros(t.shape)
        with np.errstate(over="ignore", invalid="ignore"):
            for d in self.terms:
                out = out + d._left(t)
        return out

    def jump_times(self, t0, t1):
        return np.unique(np.concatenate([np.empty(0), *(d.jump_times(t0, t1) for d in self.terms)]))

    @property
    def is_constant(self) -> bool:
        return all(d.is_constant for d in self.terms)

    def parameters(self):
        return {"terms": [{"type": type(d).__name__, **d.parameters()} for d in self.terms]}


def as_drive(x) -> Drive:
    """A drive from a drive or a plain number (constant, mV)."""
    if isinstance(x, Drive):
        return x
    if isinstance(x, (int, float, np.integer, np.floating)) and not isinstance(x, bool):
        return Constant(float(x))
    raise ValueError(f"`drive` must be a popdens drive or a number (mV), got {x!r}")
