"""Shared argument checks.

Every message names the parameter in backticks, shows the bad value and the
allowed range, so that a user can fix the call without reading the source.
"""

from __future__ import annotations

import math
import numbers
import warnings
from typing import Any

import numpy as np


def as_finite_float(name: str, value: Any) -> float:
    """Return ``value`` as a finite float or raise ``ValueError``."""
    if isinstance(value, bool) or not isinstance(value, (numbers.Real, np.floating, np.integer)):
        raise ValueError(f"`{name}` must be a real number, got {value!r}")
    x = float(value)
    if not math.isfinite(x):
        raise ValueError(f"`{name}` must be finite, got {value!r}")
    return x


def positive(name: str, value: Any) -> float:
    x = as_finite_float(name, value)
    if x <= 0.0:
        raise ValueError(f"`{name}` must be > 0, got {value!r}")
    return x


def non_negative(name: str, value: Any) -> float:
    x = as_finite_float(name, value)
    if x < 0.0:
        raise ValueError(f"`{name}` must be >= 0, got {value!r}")
    return x


def less_than(name: str, value: float, other_name: str, other: float) -> None:
    if not value < other:
        raise ValueError(
            f"`{name}` must be < `{other_name}` ({other!r}), got {value!r}"
        )


def positive_int(name: str, value: Any) -> int:
    if isinstance(value, bool) or not isinstance(value, (numbers.Integral, np.integer)):
        if isinstance(value, (float, np.floating)) and float(value).is_integer() and value > 0:
            return int(value)
        raise ValueError(f"`{name}` must be a positive integer, got {value!r}")
    if value <= 0:
        raise ValueError(f"`{name}` must be a positive integer, got {value!r}")
    return int(value)


def finite_array(name: str, value: Any) -> np.ndarray:
    arr = np.asarray(value, dtype=float)
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"`{name}` must contain only finite values")
    return arr


def n_steps_for(t_end: float, dt: float, *, name_t: str = "t_end", name_dt: str = "dt") -> int:
    """Number of steps of size ``dt`` in ``[0, t_end]``; ``dt`` must divide ``t_end``."""
    n = t_end / dt
    if not math.isfinite(n):
        raise ValueError(f"`{name_t}` = {t_end!r} ms / `{name_dt}` = {dt!r} ms is not a finite number of steps")
    n_int = int(round(n))
    if n_int < 1 or abs(n - n_int) > 1e-9 * max(1.0, n):
        raise ValueError(
            f"`{name_dt}` = {dt!r} ms must divide `{name_t}` = {t_end!r} ms into a whole "
            f"number of steps (got {n:.6g}); choose e.g. {name_dt} = {t_end / max(1, round(n)):.6g}"
        )
    return n_int


def warn_ignored(option: str, reason: str) -> None:
    """Warn that an option has no effect for the chosen method."""
    warnings.warn(f"option `{option}` is ignored: {reason}", UserWarning, stacklevel=3)
