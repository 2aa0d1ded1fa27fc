"""A minimal progress reporter for long computations.

It writes a single updating line to ``stderr`` and stays silent when
``stderr`` is not a terminal (unless forced), so logs and CI output stay clean.
"""

from __future__ import annotations

import sys
import time

__all__ = ["Progress"]

#: Seconds between redraws.
REDRAW_INTERVAL = 0.25
#: Computations shorter than this (s) never show a bar in automatic mode.
QUIET_BELOW = 1.0


class Progress:
    """Report ``done / total`` with rate and time left.

    Parameters
    ----------
    total : int
        Units of work (steps, points).
    label : str
        Shown before the bar.
    enabled : bool or None
        True forces output, False silences it, None (default) shows it only
        on a terminal and only after :data:`QUIET_BELOW` seconds.
    stream : file, optional
        Defaults to ``sys.stderr``.
    """

    def __init__(self, total: int, label: str = "", enabled: bool | None = None, stream=None):
        self.total = max(int(total), 1)
        self.label = label
        self.stream = stream if stream is not None else sys.stderr
        if enabled is None:
            enabled = bool(getattr(self.stream, "isatty", lambda: False)())
            self._auto = True
        else:
            self._auto = False
        self.enabled = enabled
        self.start = time.perf_counter()
        self._last = 0.0
        self._shown = False

    def update(self, done: int) -> None:
        if not self.enabled:
            return
        now = time.perf_counter()
        elapsed = now - self.start
        if self._auto and elapsed < QUIET_BELOW:
            return
        if now - self._last < REDRAW_INTERVAL and done < self.total:
            return
        self._last = now
        frac = min(done / self.total, 1.0)
        left = elapsed * (1.0 - frac) / frac if frac > 0 else float("nan")
        width = 30
        bar = "#" * int(frac * width) + "-" * (width - int(frac * width))
        self.stream.write(f"\r{self.label} [{bar}] {100 * frac:5.1f}%  {elapsed:6.1f} s, ~{left:6.1f} s left")
        self.stream.flush()
        self._shown = True

    def close(self) -> None:
        if self._shown:
            self.stream.write("\n")
            self.stream.flush()
