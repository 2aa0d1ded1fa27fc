"""``popdens compile``: compile every numba kernel ahead of time, for a new installation.

numba compiles a kernel on its first call and caches the machine code on disk beside the
sources, so each kernel is compiled once per installation.  This module runs one tiny problem
through each public entry point, which compiles (or loads) every kernel with the argument types
the library uses; ``--jobs N`` spreads the problems over N processes (the cache is shared and
written atomically).  :func:`uncompiled_kernels` lists the kernels a warm-up left untouched, so a
new kernel that no task reaches is caught by the tests.
"""

from __future__ import annotations

import importlib
import json
import os
import pkgutil
import subprocess
import sys
import warnings
from typing import Callable

__all__ = ["TASKS", "compile_all", "uncompiled_kernels"]


def _populations():
    import popdens
    from popdens import hazard

    lif = popdens.LIF(tau_m=10.0, threshold=20.0, reset=0.0, refractory=2.0)
    eif = popdens.EIF(tau_m=10.0, soft_threshold=15.0, slope_factor=2.0, cutoff=30.0, reset=0.0, refractory=2.0)
    escape = popdens.EscapeNoise(hazard.Exponential(rate=20.0, width=2.0))
    return (popdens.Population(lif, escape), popdens.Population(lif, popdens.WhiteNoise(sigma=4.0)),
            popdens.Population(eif, popdens.WhiteNoise(sigma=4.0)), popdens.Population(eif, escape))


def _escape_solver():
    import popdens

    esc, *_ = _populations()
    popdens.simulate(esc, 16.0, t_end=1.0, dt=0.1, progress=False)


def _white_solver():
    import popdens

    _, white, *_ = _populations()
    popdens.simulate(white, 16.0, t_end=1.0, dt=0.1, progress=False)


def _escape_twin():
    import popdens

    esc, *_ = _populations()
    popdens.montecarlo(esc, 16.0, t_end=1.0, n=10, dt=0.1, seed=1, progress=False)


def _white_twin():
    import popdens

    _, white, *_ = _populations()
    popdens.montecarlo(white, 16.0, t_end=1.0, n=10, dt=0.1, seed=1, progress=False)


def _escape_theory():
    import popdens

    esc, _, _, esc_eif = _populations()
    popdens.gain(esc, [16.0, 18.0])
    popdens.stationary(esc, 18.0)
    popdens.stationary(esc_eif, 18.0)
    popdens.transfer(esc, 18.0, [10.0])


def _white_theory():
    import popdens

    _, white, eif, _ = _populations()
    popdens.stationary(white, 18.0)
    popdens.gain(eif, [16.0, 18.0])
    popdens.stationary(eif, 18.0)
    popdens.transfer(eif, 18.0, [10.0])


def _adapting():
    import popdens

    esc, white, *_ = _populations()
    cell = popdens.LIF(tau_m=10.0, threshold=20.0, reset=0.0, refractory=2.0,
                       adaptation=[popdens.Adaptation(tau=50.0, jump=0.5), popdens.MovingThreshold(tau=30.0, jump=0.5)])
    current = popdens.LIF(tau_m=10.0, threshold=20.0, reset=0.0, refractory=2.0,
                          adaptation=[popdens.Adaptation(tau=50.0, jump=0.5)])
    popdens.simulate(popdens.Population(cell, esc.noise), 16.0, t_end=1.0, dt=0.1, progress=False)
    for pop in (popdens.Population(cell, esc.noise), popdens.Population(current, white.noise)):
        popdens.montecarlo(pop, 16.0, t_end=1.0, n=10, dt=0.1, seed=1, progress=False)
    adapting_white = popdens.Population(current, white.noise)
    popdens.simulate(adapting_white, 16.0, t_end=1.0, dt=0.1, progress=False)
    adapting_escape = popdens.Population(current, esc.noise)
    popdens.gain(adapting_escape, [20.0])
    popdens.stationary(adapting_escape, 20.0)
    popdens.transfer(adapting_escape, 20.0, [10.0])


def _synaptic():
    import popdens

    _, white, *_ = _populations()
    coloured = popdens.Population(white.neuron, popdens.ColouredNoise(sigma=4.0, tau_syn=2.0))
    popdens.montecarlo(coloured, 16.0, t_end=1.0, n=10, dt=0.1, seed=1, progress=False)
    shot = popdens.Population(white.neuron, popdens.ShotNoise(exc_rate=1000.0, exc_psp=0.5))
    popdens.montecarlo(shot, 16.0, t_end=1.0, n=10, dt=0.1, seed=1, progress=False)
    conductance = popdens.Population(white.neuron, popdens.ConductanceNoise(
        exc_rate=5000.0, exc_weight=0.05, exc_tau=2.0, exc_reversal=70.0))
    popdens.montecarlo(conductance, 16.0, t_end=1.0, n=10, dt=0.1, seed=1, progress=False)
    popdens.gain(conductance, [10.0])


def _network():
    import popdens

    cell = popdens.LIF(tau_m=20.0, threshold=20.0, reset=10.0, refractory=2.0)
    esc, white, *_ = _populations()
    cohorts = [popdens.Cohort("E", popdens.Population(cell, white.noise), size=20, drive=24.0, sigma_ext=5.0),
               popdens.Cohort("X", esc, size=20, drive=16.0)]
    paths = [popdens.Pathway(s, t, weight=0.1, in_degree=2, delay=1.0) for s in ("E", "X") for t in ("E", "X")]
    net = popdens.Circuit(cohorts, paths)
    popdens.simulate_network(net, t_end=2.0, dt=0.1, progress=False)
    popdens.montecarlo_network(net, t_end=2.0, dt=0.1, seed=1, progress=False)
    bg = popdens.PoissonBackground(rate=10.0, weight=0.02, count=100, tau_syn=1.0, synapse="conductance",
                                   reversal=70.0)
    cond = popdens.Circuit([popdens.Cohort("C", popdens.Population(cell, white.noise), size=20, drive=10.0,
                                           sigma_ext=0.0, background=bg)],
                           [popdens.Pathway("C", "C", weight=0.05, in_degree=2, delay=1.0, tau_syn=1.0,
                                            synapse="conductance", reversal=70.0)])
    popdens.montecarlo_network(cond, t_end=2.0, dt=0.1, seed=1, progress=False)
    popdens.simulate_network(cond, t_end=2.0, dt=0.1, progress=False)


def _finite_size():
    import popdens

    esc, *_ = _populations()
    popdens.simulate(esc, 16.0, t_end=1.0, dt=0.1, n=10, seed=1, burn_in=0.0, progress=False)


def _fitting():
    import popdens
    from popdens.fitting import isi_loglik, psth_loglik

    esc, white, *_ = _populations()
    trains = popdens.SpikeTrains([[1.0, 30.0, 70.0]], duration=100.0)
    psth_loglik(esc, trains, 16.0, dt=0.1)
    adapting = popdens.Population(popdens.LIF(tau_m=10.0, threshold=20.0, reset=10.0, refractory=2.0,
                                              adaptation=[popdens.Adaptation(tau=50.0, jump=1.0)]), esc.noise)
    psth_loglik(adapting, trains, 16.0, dt=0.1, history=0.0)
    isi_loglik(white, [20.0 + k for k in range(10)], mu=18.0)


#: Warm-up problems by name, each reaching a group of kernels (tiny sizes: their run time is negligible).
TASKS: dict[str, Callable[[], None]] = {
    "adapting": _adapting,
    "escape solver": _escape_solver,
    "escape theory": _escape_theory,
    "escape twin": _escape_twin,
    "finite size": _finite_size,
    "fitting": _fitting,
    "network": _network,
    "synaptic input": _synaptic,
    "white solver": _white_solver,
    "white theory": _white_theory,
    "white twin": _white_twin,
}


def _run_here(names, stream) -> dict[str, float]:
    from .model._jit import compile_seconds, quiet_compilation

    out = {}
    for name in names:
        before = compile_seconds()
        with quiet_compilation(), warnings.catch_warnings():
            warnings.simplefilter("ignore")  # tiny problems may trip accuracy guards; only compilation matters
            TASKS[name]()
        out[name] = compile_seconds() - before
        print(json.dumps({name: out[name]}), file=stream, flush=True)
    return out


def compile_all(jobs: int = 1, names=None, stream=None) -> dict[str, float]:
    """Compile (or load from the disk cache) every kernel; returns compile seconds per task.

    Parameters
    ----------
    jobs : int
        Processes to spread the tasks over (1: in this process).
    names : iterable of str, optional
        Tasks to run (default: all of :data:`TASKS`).
    stream : file, optional
        Where each finished task is reported (one JSON line); default ``sys.stdout``.
    """
    stream = sys.stdout if stream is None else stream
    names = list(TASKS) if names is None else list(names)
    unknown = [n for n in names if n not in TASKS]
    if unknown:
        raise ValueError(f"unknown warm-up task {unknown[0]!r}; known: {sorted(TASKS)}")
    if jobs <= 1 or len(names) <= 1:
        return _run_here(names, stream)
    groups = [names[i::jobs] for i in range(min(jobs, len(names)))]
    # the workers must import this very copy of popdens (not one in the current folder)
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(filter(None, [root, os.environ.get("PYTHONPATH")]))}
    procs = [subprocess.Popen([sys.executable, "-m", __name__, *g], stdout=subprocess.PIPE, text=True, env=env,
                              cwd=root) for g in groups]
    out = {}
    failed = []
    for p, g in zip(procs, groups):
        text, _ = p.communicate()
        for line in text.splitlines():
            out.update(json.loads(line))
            print(line, file=stream, flush=True)
        if p.returncode:
            failed += g
    if failed:
        raise RuntimeError(f"compiling failed in the warm-up task(s) {failed}")
    return out


#: Kernels called only from other kernels (never from Python), beside the inlined helpers
#: (``forceinline``): a caller loaded from the disk cache carries them without compiling them.
CALLED_FROM_KERNELS_ONLY = frozenset({"popdens.model._kernels.evaluate_program",
                                      "popdens.solvers.fokker_planck._solve",
                                      "popdens.twins._coloured.ou_step_moments",
                                      "popdens.twins._coloured._hermite_max"})


def uncompiled_kernels(package=None) -> list[str]:
    """Kernels called from Python (numba dispatchers in the package's modules, except inlined helpers and
    :data:`CALLED_FROM_KERNELS_ONLY`) with no compiled version in this process."""
    import numba.core.registry

    if package is None:
        import popdens as package

    missing = []
    for info in pkgutil.walk_packages(package.__path__, package.__name__ + "."):
        if ".benchmarks" in info.name or info.name.endswith(("__main__", "_warm_up")):
            continue
        module = importlib.import_module(info.name)
        for attr, obj in vars(module).items():
            if (isinstance(obj, numba.core.registry.CPUDispatcher) and obj.py_func.__module__ == info.name
                    and not obj.signatures and not obj.targetoptions.get("forceinline")
                    and f"{info.name}.{attr}" not in CALLED_FROM_KERNELS_ONLY):
                missing.append(f"{info.name}.{attr}")
    return sorted(missing)


if __name__ == "__main__":  # a worker of compile_all(jobs > 1)
    os.environ.setdefault("POPDENS_QUIET_COMPILE", "1")
    _run_here(sys.argv[1:], sys.stdout)
