"""Point functions for the sweep tests, in an importable module so worker processes can unpickle them."""

from __future__ import annotations

import os
import time

import numpy as np

from popdens.sweeps import Curve

#: When set, `seeded_point` sleeps this many seconds (the interrupted-sweep test).
SLOW_ENV = "POPDENS_TEST_SWEEP_SLEEP"


def seeded_point(params, seed):
    """A deterministic function of the point and its seed sequence."""
    delay = float(os.environ.get(SLOW_ENV, "0"))
    if delay:
        time.sleep(delay)
    return _outputs(params, seed)


def _outputs(params, seed):
    rng = np.random.default_rng(seed)
    return {"y": params["x"] ** 2 + params.get("z", 0.0), "draw": rng.normal(),
            "walk": Curve("step", np.arange(4.0), np.cumsum(rng.normal(size=4)))}


def busy_point(params, seed):
    """`seeded_point` after spending `SLOW_ENV` seconds of CPU time (not sleeping: the default
    backend judges the work by CPU time)."""
    t0 = time.thread_time()
    while time.thread_time() - t0 < float(os.environ.get(SLOW_ENV, "0")):
        pass
    return _outputs(params, seed)


def refuses_three(params, seed):
    if params["x"] == 3:
        raise ValueError("x = 3 is refused")
    return seeded_point(params, seed)


def dies_at_two(params, seed):
    if params["x"] == 2:
        os._exit(3)  # the worker process disappears without a word
    return seeded_point(params, seed)


def returns_text(params, seed):
    return {"y": "not a number"}


def dies_at_thirty(params, seed):
    """Like `dies_at_two`, late enough in a sweep that its point travels in a chunk with others."""
    if params["x"] == 30:
        os._exit(3)
    return seeded_point(params, seed)
