"""Responsiveness benchmark: start-up time, Ctrl-C latency of long runs, and (on request) the
first-run wait of a new installation.

Prints, from one run, each measured in fresh processes of the command line:

* ``import popdens`` and ``popdens --help``: median of 5 starts, wall and CPU time, beside a bare
  ``python -c pass`` (the interpreter's own start-up) as the control;
* Ctrl-C (SIGINT) latency of ``popdens run`` with a Monte Carlo twin of 10^6 and 10^7 escape-noise
  neurons: seconds from the signal to the process's exit (exit code 130, no output left), sent
  ``WAIT_S`` seconds after the run started writing (well inside the twin);
* Ctrl-C latency while a kernel compiles for the first time (an empty numba cache);
* with ``POPDENS_BENCH_COLD=1`` also ``popdens compile`` from an empty cache (wall and CPU time):
  the wait a new installation pays once (minutes; hence opt-in).

The machine is shared: the load average is printed at the start and the end; quote CPU time beside
wall time.
Run:  popdens bench responsiveness
"""

from __future__ import annotations

import os
import resource
import shutil
import signal
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

#: Seconds between the run's first output folder and the signal (the prediction takes ~0.1 s).
WAIT_S = 3.0
N_STARTS = 5

SCENARIO = """
[scenario]
title = "responsiveness"
output = "out"
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
mu = 15.0
[run]
t_end = 2000.0
dt = 0.1
montecarlo_neurons = {n}
seed = 1
"""


def _env(**extra) -> dict:
    root = str(Path(__file__).resolve().parents[2])
    env = {**os.environ, **extra}
    env["PYTHONPATH"] = root + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    return env


def _children_cpu() -> float:
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


def _timed(cmd: list[str], env: dict) -> tuple[float, float]:
    """(wall, CPU) seconds of one run of ``cmd``."""
    c0, t0 = _children_cpu(), time.perf_counter()
    subprocess.run(cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=True)
    return time.perf_counter() - t0, _children_cpu() - c0


def _starts(label: str, cmd: list[str], env: dict) -> None:
    runs = [_timed(cmd, env) for _ in range(N_STARTS)]
    wall = statistics.median(r[0] for r in runs)
    cpu = statistics.median(r[1] for r in runs)
    print(f"  {label:<22} {wall:6.3f} s wall  {cpu:6.3f} s CPU  (median of {N_STARTS})")


def _hidden(folder: Path) -> bool:
    return any(p.name.startswith(".out.") for p in folder.iterdir())


def _interrupt(n: int, env: dict, on_compile: bool = False) -> str:
    """Start a run of ``n`` neurons, send SIGINT, and describe the latency."""
    folder = Path(tempfile.mkdtemp(prefix="popdens-bench-"))
    try:
        (folder / "s.toml").write_text(SCENARIO.format(n=n), encoding="utf-8")
        proc = subprocess.Popen([sys.executable, "-m", "popdens", "run", str(folder / "s.toml"), "--quiet"],
                                env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
        if on_compile:  # signal inside the longest compilation of this run
            seen = ""
            while "compiling refractory._advance" not in seen:
                line = proc.stderr.readline()
                if not line:
                    proc.kill()
                    return f"no compilation seen ({seen.strip()!r})"
                seen += line
            time.sleep(0.1)
        else:
            t0 = time.monotonic()
            while not _hidden(folder) and proc.poll() is None and time.monotonic() - t0 < 300:
                time.sleep(0.02)
            time.sleep(WAIT_S)
        if proc.poll() is not None:
            return f"ended before the signal (exit {proc.returncode})"
        t0 = time.perf_counter()
        proc.send_signal(signal.SIGINT)
        _, err = proc.communicate(timeout=600)
        latency = time.perf_counter() - t0
        left = sorted(p.name for p in folder.iterdir() if p.name != "s.toml")
        return (f"{latency:6.2f} s to exit, exit code {proc.returncode}, left behind: {left or 'nothing'}")
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def main() -> None:
    print(f"load average at start: {os.getloadavg()}")
    env = _env()
    print("start-up (fresh interpreter each time):")
    _starts("python -c pass", [sys.executable, "-c", "pass"], env)
    _starts("import popdens", [sys.executable, "-c", "import popdens"], env)
    _starts("popdens --help", [sys.executable, "-m", "popdens", "--help"], env)
    print("Ctrl-C during a Monte Carlo run (escape noise, popdens run):")
    for n in (10**6, 10**7):
        print(f"  n = {n:.0e}: {_interrupt(n, env)}")
    cold = tempfile.mkdtemp(prefix="popdens-cold-cache-")
    try:
        print(f"Ctrl-C during a first compilation: {_interrupt(1000, _env(NUMBA_CACHE_DIR=cold), True)}")
        if os.environ.get("POPDENS_BENCH_COLD"):
            shutil.rmtree(cold, ignore_errors=True)
            wall, cpu = _timed([sys.executable, "-m", "popdens", "compile"], _env(NUMBA_CACHE_DIR=cold))
            print(f"popdens compile from an empty cache: {wall:.1f} s wall, {cpu:.1f} s CPU (all processes)")
    finally:
        shutil.rmtree(cold, ignore_errors=True)
    print(f"load average at end: {os.getloadavg()}")


if __name__ == "__main__":
    main()
