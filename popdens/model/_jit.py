"""Compilation of the numba kernels: announced on stderr, timed apart from the run, done ahead of time on request.

numba compiles a kernel the first time it is called with new argument types and keeps the
machine code in a cache on disk (``cache=True``), so only the first use on a new installation
pays; every later process loads it in milliseconds.  This module listens to numba's
``numba:compile`` event, which fires only for a real compilation (never for a cache load), and

* says so on stderr before the wait starts, naming the kernel and the time it usually takes,
  with an elapsed-time counter updating in place on a terminal;
* adds the time spent to :func:`compile_seconds`, which the front ends subtract from their run
  times and report as ``diagnostics["compile_time_s"]``.

``popdens compile`` (``popdens._warm_up``) compiles every kernel ahead of time.

Expected times (:data:`EXPECTED_SECONDS`) were measured from a cold cache on a 2-core
machine; machines differ up to 8x in speed, so the message gives them as a rough guide.
"""

from __future__ import annotations

import os
import sys
import threading
import time

from numba.core import event

from ..progress import interactive

__all__ = ["busy", "compile_seconds", "EXPECTED_SECONDS", "quiet_compilation", "Stopwatch"]

#: Cold compile time (s) of each kernel called from Python, including the helpers compiled with it,
#: measured on a fast 2-core machine under load (DEVELOPERS.md, "Compiled loops").  Kernels taking
#: under a second are not listed and are announced without a time.
EXPECTED_SECONDS = {
    "refractory._advance": 2.5,
    "refractory._trajectory": 1.2,
    "_refractory_adapting.advance_adapting": 4.0,
    "_refractory_adapting.stationary_profile": 11.0,
    "mesoscopic._advance_finite": 10.0,
    "_escape.run_escape": 2.1,
    "_escape.run_escape_adapting": 2.2,
    "_diffusive.run_diffusive": 1.1,
    "_diffusive.run_diffusive_adapting": 2.6,
    "fokker_planck._advance": 2.7,
    "_renewal.renewal_rates": 8.4,
    "_renewal.renewal_moments": 5.1,
    "_renewal_response._renewal_sweep": 1.9,
    "_threshold.stationary_sweep": 1.4,
    "_threshold.rates_for_drives": 1.1,
    "_network.run_network": 5.5,
    "fokker_planck._advance_adapting": 3.0,
    "fokker_planck._advance_varying": 3.0,
    "_renewal_adapting.adapted_renewal": 6.0,
    "_isi_markov._density": 2.0,
    "_shot.run_shot": 2.5,
    "_inputs.block_inputs": 0.6,
    "_conductance.run_conductance": 2.0,
    "_conductance.conductance_sweep_rates": 2.4,
}

#: Environment variable that silences the compilation notices (the messages, not the timing).
QUIET_ENV = "POPDENS_QUIET_COMPILE"

_state = threading.local()
_total = [0.0]
_lock = threading.Lock()


def compile_seconds() -> float:
    """Seconds spent compiling kernels in this process so far (cache loads excluded)."""
    return _total[0]


class Stopwatch:
    """Wall time of a computation with the compilation inside it counted apart.

    ``times()`` gives ``{"wall_time_s": run time without compilation, "compile_time_s": compilation}``
    (s), the two diagnostics every front end reports.
    """

    def __init__(self):
        self.wall0 = time.perf_counter()
        self.compile0 = compile_seconds()

    def times(self) -> dict:
        comp = compile_seconds() - self.compile0
        return {"wall_time_s": max(time.perf_counter() - self.wall0 - comp, 0.0), "compile_time_s": comp}


def _kernel_name(dispatcher) -> str:
    func = getattr(dispatcher, "py_func", None)
    if func is None:
        return str(dispatcher)
    module = func.__module__.rpartition(".")[2]
    return f"{module}.{func.__qualname__}"


class _Ticker(threading.Thread):
    """Redraws ``compiling NAME ... N s`` in place on a terminal while a compilation runs."""

    def __init__(self, stream, text):
        super().__init__(daemon=True)
        self.stream, self.text = stream, text
        self.stop = threading.Event()
        self.t0 = time.perf_counter()

    def run(self):
        while not self.stop.wait(1.0):
            self.stream.write(f"\r{self.text} {time.perf_counter() - self.t0:4.0f} s")
            self.stream.flush()


class _Listener(event.Listener):
    """Announces and times the outermost compilation (a kernel compiles its helpers inside it)."""

    def on_start(self, ev):
        depth = getattr(_state, "depth", 0)
        _state.depth = depth + 1
        if depth:
            return
        _state.t0 = time.perf_counter()
        _state.ticker = None
        if os.environ.get(QUIET_ENV) or getattr(_state, "quiet", False):
            return
        stream = sys.stderr
        name = _kernel_name(ev.data["dispatcher"])
        expected = EXPECTED_SECONDS.get(name)
        about = f", about {expected:g} s on a fast machine" if expected else ""
        text = (f"popdens: compiling {name} (once per installation{about}; "
                "`popdens compile` does it ahead of time)")
        if interactive(stream):
            stream.write(text + " ...")
            stream.flush()
            _state.ticker = _Ticker(stream, text + " ...")
            _state.ticker.start()
        else:
            print(text, file=stream, flush=True)

    def on_end(self, ev):
        _state.depth = getattr(_state, "depth", 1) - 1
        if _state.depth:
            return
        spent = time.perf_counter() - getattr(_state, "t0", time.perf_counter())
        with _lock:
            _total[0] += spent
        ticker = getattr(_state, "ticker", None)
        if ticker is not None:
            ticker.stop.set()
            ticker.join()
            ticker.stream.write(f"\r{ticker.text} done in {spent:.1f} s\n")
            ticker.stream.flush()
            _state.ticker = None
        elif not (os.environ.get(QUIET_ENV) or getattr(_state, "quiet", False)):
            print(f"popdens: compiled {_kernel_name(ev.data['dispatcher'])} in {spent:.1f} s", file=sys.stderr,
                  flush=True)


class quiet_compilation:
    """Context manager: no compilation notices in this thread (timing continues)."""

    def __enter__(self):
        self._before = getattr(_state, "quiet", False)
        _state.quiet = True
        return self

    def __exit__(self, *exc):
        _state.quiet = self._before
        return False


class _LockListener(event.Listener):
    """Counts holders of numba's compiler lock, which covers a compilation and the writing of its
    cache entry (the object code is emitted then, outside the ``numba:compile`` event)."""

    def on_start(self, ev):
        with _lock:
            _busy[0] += 1

    def on_end(self, ev):
        with _lock:
            _busy[0] -= 1


_busy = [0]


def busy() -> bool:
    """True while numba compiles (or loads or saves a cache entry) in any thread of this process.

    Raising an exception into numba then can be lost (numba runs Python callbacks from inside
    LLVM, where exceptions are printed and dropped) or leave its state half-made, so the command
    line acts on Ctrl-C and SIGTERM in another way while this is true (``popdens.cli``).
    """
    return _busy[0] > 0


_LISTENER = _Listener()
event.register("numba:compile", _LISTENER)
event.register("numba:compiler_lock", _LockListener())
