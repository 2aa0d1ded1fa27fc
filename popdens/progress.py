"""A minimal progress reporter for long computations.

It writes a single line to ``stderr`` that updates in place (carriage return) on a terminal and in
a Jupyter notebook, whose front ends redraw such lines in place too, and stays silent elsewhere
(unless forced), so logs and CI output stay clean.
"""

from __future__ import annotations

import sys
import time

__all__ = ["Progress", "interactive"]

#: Seconds between redraws.
REDRAW_INTERVAL = 0.25
#: Computations shorter than this (s) never show a bar in automatic mode.
QUIET_BELOW = 1.0
#: A run estimated to take longer than this (s) says so once on stderr, terminal or not.
ANNOUNCE_ABOVE = 60.0
#: Seconds of work after the first update (which may include compilation) behind the estimate.
ESTIMATE_AFTER = 1.0


def interactive(stream) -> bool:
    """True for a terminal, and for a Jupyter kernel's output stream (redraws ``\\r`` lines in place)."""
    try:
        if stream.isatty():
            return True
    except (AttributeError, ValueError):  # closed or not a file
        return False
    return "ipykernel" in sys.modules and type(stream).__name__ == "OutStream"


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
        # the run-time estimate: from the pace between the first update and ESTIMATE_AFTER s later
        self._estimate = enabled is not False
        self._first = None
        if enabled is None:
            enabled = interactive(self.stream)
            self._auto = True
        else:
            self._auto = False
        self.enabled = enabled
        self.start = time.perf_counter()
        self._last = 0.0
        self._shown = False

    def update(self, done: int) -> None:
        if self._estimate:
            self._check_estimate(done)
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

    def _check_estimate(self, done: int) -> None:
        """Say once how long a long run will take (outside a terminal too, where no bar is drawn)."""
        now = time.perf_counter()
        if self._first is None:
            self._first = (now, done)
            return
        t1, d1 = self._first
        if now - t1 < ESTIMATE_AFTER or done <= d1:
            return
        self._estimate = False
        left = (now - t1) / (done - d1) * (self.total - done)
        if left > ANNOUNCE_ABOVE:
            self.stream.write(f"{chr(10) if self._shown else ''}popdens: {self.label or 'this run'} will take about "
                              f"{_duration(left)} more (measured pace: {done - d1} of {self.total} units in "
                              f"{now - t1:.1f} s); Ctrl-C stops it\n")
            self.stream.flush()

    def close(self) -> None:
        if self._shown:
            self.stream.write("\n")
            self.stream.flush()


def _duration(seconds: float) -> str:
    if seconds < 120:
        return f"{seconds:.0f} s"
    if seconds < 7200:
        return f"{seconds / 60:.0f} min"
    return f"{seconds / 3600:.1f} h"
