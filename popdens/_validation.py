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


#: Largest share of the available memory one run may plan to allocate.
MEMORY_SHARE = 0.8


def available_memory() -> float | None:
    """Bytes of memory available to a new allocation (Linux ``MemAvailable``; else free pages), or None."""
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return float(line.split()[1]) * 1024.0
    except (OSError, ValueError, IndexError):
        pass
    try:
        import os

        return float(os.sysconf("SC_AVPHYS_PAGES")) * float(os.sysconf("SC_PAGE_SIZE"))
    except (AttributeError, ValueError, OSError):
        return None


def _gb(nbytes: float) -> str:
    return f"{nbytes / 1e9:.3g} GB"


def check_memory(name: str, value: Any, nbytes: float, what: str) -> None:
    """Raise ``ValueError`` naming ``name`` if allocating ``nbytes`` for ``what`` would not fit in memory.

    Checked before anything is allocated, so a too-large request is a clear error instead of a
    ``MemoryError`` or a machine that starts swapping.
    """
    avail = available_memory()
    if avail is None:
        avail = float(2**46)  # unknown: refuse only the absurd (64 TiB)
    if nbytes > MEMORY_SHARE * avail:
        raise ValueError(f"`{name}` = {value!r}: {what} needs about {_gb(nbytes)} of memory, but only "
                         f"{_gb(avail)} is available (at most {MEMORY_SHARE:.0%} of it is used); "
                         "reduce it")
