"""Command line: ``popdens run``, ``check``, ``catalogue``, ``sweep``, ``bench``, and the one-off
analyses ``step``, ``gain``, ``stationary`` and ``transfer``.

Exit codes: 0 success, 2 bad input (no traceback), 1 numerical or internal failure,
130 interrupted by the user (Ctrl-C; no partial output is kept).
"""

from __future__ import annotations

import argparse
import logging
import os
import sys
import threading
import warnings

from ._version import __version__
from .exceptions import AccuracyWarning, ScenarioError

__all__ = ["main"]

#: Exit code after Ctrl-C (128 + SIGINT, the shell convention).
EXIT_INTERRUPTED = 130
#: Exit code after SIGTERM (128 + SIGTERM).
EXIT_TERMINATED = 143
_TERMINATED = [False]


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="popdens", description="Population-density predictions for noisy spiking neurons.")
    p.add_argument("--version", action="version", version=f"popdens {__version__}")
    sub = p.add_subparsers(dest="command", required=True)
    r = sub.add_parser("run", help="run a scenario file and write its outputs")
    r.add_argument("scenario", help="scenario file (TOML)")
    r.add_argument("--out", help="output folder (default: the scenario's [scenario] output)")
    r.add_argument("--overwrite", action="store_true", help="replace an existing output folder")
    r.add_argument("--quiet", action="store_true", help="no progress output")
    c = sub.add_parser("check", help="validate a scenario file without running it")
    c.add_argument("scenario")
    _add_sweep_parser(sub)
    cp = sub.add_parser("compile", help="compile every inner loop now (once per installation; otherwise the "
                                        "first use of each waits for it)")
    cp.add_argument("--jobs", type=int, default=None, help="processes to use (default: every core)")
    sub.add_parser("catalogue", help="list neuron models, escape functions and input shapes with their parameters")
    b = sub.add_parser("bench", help="run benchmarks (speed against the Monte Carlo twin, printed ratios)")
    b.add_argument("names", nargs="*", metavar="NAME", help="benchmarks to run (default: list them)")
    st = sub.add_parser("step", help="one-off step response from flags, without a scenario file",
                        description="Example: popdens step --neuron model=LIF tau_m=10 threshold=20 reset=0 "
                                    "refractory=2 --noise kind=escape shape=exponential rate=20 width=2 "
                                    "--before 15 --after 20 --at 50 --t-end 200")
    _population_flags(st)
    st.add_argument("--before", type=float, required=True, help="drive before the step (mV)")
    st.add_argument("--after", type=float, required=True, help="drive after the step (mV)")
    st.add_argument("--at", type=float, required=True, help="time of the step (ms)")
    st.add_argument("--t-end", type=float, required=True, help="duration (ms)")
    st.add_argument("--dt", type=float, default=None, help="time step (ms)")
    st.add_argument("--every", type=float, default=1.0, help="output interval (ms), default 1")
    st.add_argument("--csv", help="write the result to this CSV file instead of printing it")

    g = sub.add_parser("gain", help="one-off gain curve (stationary rate against mean drive)",
                       description="Example: popdens gain --neuron model=LIF tau_m=20 threshold=20 reset=10 "
                                   "refractory=2 --noise kind=white sigma=4 --mu 5:30:26 --sigma 2 4 6")
    _population_flags(g)
    g.add_argument("--mu", required=True, metavar="START:STOP:POINTS",
                   help="mean drives (mV): a range START:STOP:POINTS (evenly spaced; START:STOP:POINTS:log "
                        "for log spacing) or a comma list")
    g.add_argument("--sigma", nargs="+", type=float, metavar="MV",
                   help="white noise only: one curve per noise level (mV)")
    _output_flags(g, "gain curve")

    sa = sub.add_parser("stationary", help="one-off stationary statistics: rate, ISI CV, mean potential",
                        description="Example: popdens stationary --neuron model=LIF tau_m=10 threshold=20 "
                                    "reset=0 refractory=2 --noise kind=escape shape=exponential rate=20 "
                                    "width=2 --mu 15,18,21")
    _population_flags(sa)
    sa.add_argument("--mu", required=True, metavar="LIST", help="mean drive(s) (mV): a number or a comma list")
    _output_flags(sa, "ISI densities")

    tr = sub.add_parser("transfer", help="one-off transfer function (rate response per unit input modulation)",
                        description="Example: popdens transfer --neuron model=LIF tau_m=20 threshold=20 "
                                    "reset=10 refractory=2 --noise kind=white sigma=4 --mu 18 "
                                    "--freq 1:1000:40:log")
    _population_flags(tr)
    tr.add_argument("--mu", required=True, type=float, help="stationary mean drive (mV)")
    tr.add_argument("--freq", required=True, metavar="START:STOP:POINTS",
                    help="frequencies (Hz): a range START:STOP:POINTS (evenly spaced) or "
                         "START:STOP:POINTS:log (log-spaced), or a comma list")
    tr.add_argument("--modulate", choices=("mean", "noise", "sigma"), default="mean",
                    help="modulated input: the mean drive (default, Hz/mV), the noise variance sigma^2 "
                         "(Hz/mV^2) or the noise amplitude sigma (Hz/mV); the last two for white noise")
    _output_flags(tr, "transfer function")
    return p


def _population_flags(p) -> None:
    p.add_argument("--neuron", nargs="+", required=True, metavar="KEY=VALUE",
                   help="neuron table entries, as in a scenario's [neuron] (see `popdens catalogue`)")
    p.add_argument("--noise", nargs="+", required=True, metavar="KEY=VALUE",
                   help="kind=escape with the [noise.hazard] entries (shape=..., ...), or kind=white sigma=...")


def _output_flags(p, what: str) -> None:
    p.add_argument("--csv", help="write the table to this CSV file instead of printing it")
    p.add_argument("--plot", metavar="FILE", help=f"save a figure of the {what} (.png, .svg or .pdf)")


def _values(text: str, flag: str) -> "np.ndarray":
    """``START:STOP:POINTS[:log]`` (linear unless ``:log``, the same rule for every flag) or a comma
    list → array."""
    import numpy as np

    from .scenario.analyses import MAX_POINTS

    spacing = "linear"
    try:
        if ":" in text:
            parts = text.split(":")
            if len(parts) == 4 and parts[3] in ("log", "lin"):
                spacing = "log" if parts.pop() == "log" else "linear"
            lo, hi, n = parts
            lo, hi, n = float(lo), float(hi), int(n)
            if not 1 <= n <= MAX_POINTS:
                raise ValueError
            if spacing == "log":
                if lo <= 0 or hi <= 0:
                    raise ValueError
                return np.geomspace(lo, hi, n)
            return np.linspace(lo, hi, n)
        out = np.array([float(x) for x in text.split(",")])
    except ValueError:
        raise ScenarioError(f"{flag} {text!r}: expected START:STOP:POINTS (evenly spaced; add :log for "
                            f"log spacing, positive bounds; 1 to {MAX_POINTS} points) or a comma-separated "
                            "list of numbers") from None
    if not np.all(np.isfinite(out)):
        raise ScenarioError(f"{flag} {text!r}: values must be finite")
    return out


def _flag_population(args):
    """The validated population described by ``--neuron`` and ``--noise``."""
    from .scenario.loader import parse_scenario

    neuron = _key_values(args.neuron, "--neuron")
    noise = _key_values(args.noise, "--noise")
    if noise.get("kind") == "escape":
        noise = {"kind": "escape", "hazard": {k: v for k, v in noise.items() if k != "kind"}}
    # validated through the scenario schema, so flags and files accept the same entries
    sc = parse_scenario({"neuron": neuron, "noise": noise, "stationary": {"mu": 0.0}}, "command line")
    return sc.population


def _emit(args, columns: dict, header: dict, fig=None) -> None:
    import matplotlib.pyplot as plt

    from .scenario.analyses import describe_population, write_table

    if args.csv:
        write_table(args.csv, columns, {**header, "population": describe_population(args.population),
                                        "popdens_version": __version__})
        print(f"wrote {args.csv}")
    else:
        print("# " + " ".join(columns))
        for row in zip(*columns.values()):
            print(" ".join(f"{x:.6g}" for x in row))
    if fig is not None:
        if args.plot:
            fig.savefig(args.plot, dpi=150)
            print(f"wrote {args.plot}")
        plt.close(fig)


def _analysis_command(args) -> int:
    import numpy as np

    from .scenario.analyses import GainCurve, StationaryStats, TransferCurve

    args.population = pop = _flag_population(args)
    white = hasattr(pop.noise, "sigma")
    try:
        if args.command == "gain":
            if args.sigma and not white:
                raise ScenarioError("--sigma applies to white noise only (--noise kind=white)")
            if args.sigma and min(args.sigma) <= 0:
                raise ScenarioError(f"--sigma {args.sigma}: noise levels must be positive (mV)")
            curve = GainCurve(_values(args.mu, "--mu"), tuple(args.sigma) if args.sigma else (None,))
            rates = curve.compute(pop)
            cols = {"mu_mV": curve.mu}
            for s, row in zip(curve.sigmas, rates):
                cols["rate_Hz" if s is None else f"rate_Hz_sigma_{s:g}mV"] = row
            fig = None
            if args.plot:
                from .plotting import plot_gain

                labels = None if curve.sigmas == (None,) else [f"sigma = {s:g} mV" for s in curve.sigmas]
                fig = plot_gain(curve.mu, rates, labels=labels).figure
            _emit(args, cols, {"units": "mu mV, rate Hz"}, fig)
        elif args.command == "stationary":
            st = StationaryStats(_values(args.mu, "--mu"))
            states = st.compute(pop)
            cols = {"mu_mV": st.mu, "rate_Hz": np.array([s.rate for s in states]),
                    "cv": np.array([s.cv for s in states]), "mean_u_mV": np.array([s.mean_u for s in states])}
            fig = None
            if args.plot:
                from .plotting import _axes, plot_isi

                ax = _axes(None)
                for m, s in zip(st.mu, states):
                    plot_isi(s.isi_t, s.isi_density, ax=ax, label=f"mu = {m:g} mV")
                ax.legend(frameon=False)
                fig = ax.figure
            _emit(args, cols, {"units": "mu mV, rate Hz, cv 1, mean_u mV"}, fig)
        else:
            if args.modulate != "mean" and not white:
                raise ScenarioError(f"--modulate {args.modulate} needs white noise (--noise kind=white)")
            tc = TransferCurve(args.mu, _values(args.freq, "--freq"), args.modulate)
            if np.any(tc.freqs < 0):
                raise ScenarioError(f"--freq {args.freq!r}: frequencies must be >= 0 (Hz)")
            chi = tc.compute(pop)
            cols = {"frequency_Hz": tc.freqs, "abs": np.abs(chi), "phase_rad": np.angle(chi),
                    "real": chi.real, "imag": chi.imag}
            fig = None
            if args.plot:
                from .plotting import plot_transfer

                fig = plot_transfer(tc.freqs, chi, unit=tc.unit)
            _emit(args, cols, {"units": f"frequency Hz, transfer {tc.unit} ({tc.modulate} modulation)",
                               "stationary_drive_mV": args.mu}, fig)
    except ValueError as exc:  # out-of-domain values found by the numerical modules
        raise ScenarioError(f"command line: {exc}") from None
    return 0


# ---------------------------------------------------------------- sweeps (popdens/scenario/sweep.py)
def _add_sweep_parser(sub) -> None:
    sw = sub.add_parser("sweep", help="run a scenario's [sweep] table: many points, in parallel, resumable")
    sw.add_argument("scenario", help="scenario file (TOML) with a [sweep] table")
    sw.add_argument("--out", help="output folder (default: the scenario's [scenario] output)")
    sw.add_argument("--workers", type=int, default=None,
                    help="worker processes (default: every core; 1 = in this process)")
    sw.add_argument("--scheduler", metavar="ADDRESS", help="run on the Dask scheduler at ADDRESS")
    sw.add_argument("--dask-local", action="store_true",
                    help="start a local Dask cluster of --workers processes for this sweep")
    grp = sw.add_mutually_exclusive_group()
    grp.add_argument("--resume", action="store_true", help="continue an interrupted sweep in the output folder")
    grp.add_argument("--overwrite", action="store_true", help="delete an existing output folder first")
    sw.add_argument("--retry-failed", action="store_true", help="with --resume, compute failed points again")
    sw.add_argument("--no-figures", action="store_true", help="skip heat maps and curve families")
    sw.add_argument("--quiet", action="store_true", help="no progress output")


def _sweep_command(args, sc=None) -> int:
    """``popdens sweep``; also ``popdens run`` on a scenario with a [sweep] table (default settings)."""
    from .scenario.loader import load_scenario
    from .scenario.sweep import run_sweep_scenario

    for name, default in (("workers", None), ("scheduler", None), ("dask_local", False), ("resume", False),
                          ("retry_failed", False), ("no_figures", False)):
        if not hasattr(args, name):
            setattr(args, name, default)
    sc = sc if sc is not None else load_scenario(args.scenario)
    if "sweep" not in sc.raw:
        raise ScenarioError(f"{args.scenario}: no [sweep] table; run it with `popdens run`")
    if args.workers is not None and args.workers < 1:
        raise ScenarioError(f"--workers must be >= 1, got {args.workers}")
    if args.scheduler and args.dask_local:
        raise ScenarioError("give --scheduler or --dask-local, not both")
    if args.retry_failed and not args.resume:
        raise ScenarioError("--retry-failed needs --resume")
    backend = "dask" if (args.scheduler or args.dask_local) else None
    try:
        res = run_sweep_scenario(sc, args.out, backend=backend, workers=args.workers, scheduler=args.scheduler,
                                 resume=args.resume, overwrite=args.overwrite, retry_failed=args.retry_failed,
                                 figures=not args.no_figures, progress=False if args.quiet else None)
    except (ImportError, ConnectionError) as exc:  # no Dask installed, or no scheduler at the address
        raise ScenarioError(str(exc)) from None
    except KeyboardInterrupt:
        print("popdens: interrupted; finished points are saved: continue with `popdens sweep "
              f"{args.scenario} --resume`", file=sys.stderr)
        return EXIT_INTERRUPTED
    d = res.diagnostics
    print(f"wrote {res.output}: results.csv, summary.json, points/"
          + (", failures.csv" if res.failed else "") + ("" if args.no_figures else ", figures/"))
    print(f"  {len(res.points)} points ({d['computed_now']} computed now, {len(res.failed)} failed) on "
          f"{d['backend']} with {d['workers']} worker(s) in {d['wall_time_s']:.3g} s")
    for i, params, err in res.failed[:5]:
        print(f"  point {i} {params} failed: {err}", file=sys.stderr)
    return 0


def _network_command(args, sc) -> int:
    """``popdens check`` / ``popdens run`` of a network scenario."""
    c = sc.circuit
    if args.command == "check":
        parts = (["fixed points"] if sc.fixed_points else []) + (["stability"] if sc.stability else [])
        parts += [f"{sc.t_end:g} ms mean-field run"] if sc.t_end > 0 else []
        parts += ["spiking twin"] if sc.montecarlo else []
        print(f"{args.scenario}: OK ({sc.title}; network of {len(c.cohorts)} cohorts "
              f"({', '.join(c.names)}), {len(c.pathways)} pathways; {', '.join(parts)})")
        return 0
    from .scenario.runner import run_scenario

    summary = run_scenario(sc, args.out, overwrite=args.overwrite, progress=False if args.quiet else None)
    print(f"wrote {summary['output']}: {', '.join(summary['files'])}")
    _print_compile_time(summary["timing"])
    for i, fp in enumerate(summary.get("fixed_points", [])):
        rates = ", ".join(f"{k} {v:.4g} Hz" for k, v in fp["rates_hz"].items())
        verdict = ""
        if "stable" in fp:
            verdict = ("; stable" if fp["stable"] else "; UNSTABLE") + (
                f" (leading root: growth {fp['leading_growth_rate_per_s']:.4g}/s at "
                f"{fp['leading_frequency_hz']:.4g} Hz)")
        print(f"  fixed point {i}: {rates}{verdict}")
    if "prediction" in summary and summary["prediction"]["status"] != 0:
        print(f"popdens: error: the mean-field run failed: {summary['prediction']['message']}", file=sys.stderr)
        return 1
    if "montecarlo" in summary:
        m = summary["montecarlo"]
        if m["status"] != 0:
            print(f"popdens: error: the spiking twin failed: {m['message']}", file=sys.stderr)
            return 1
        both = ", ".join(f"{k} {m['mean_field_second_half_hz'][k]:.4g} / {v:.4g} Hz"
                         for k, v in m["mean_rates_second_half_hz"].items())
        print(f"  mean rates over the second half, mean field / spiking twin: {both}")
        fl = m.get("fluctuations")
        if fl:
            per = "; ".join(f"{k} s.d. {v['sd_hz']:.3g} Hz (independent neurons {v['sd_independent_neurons_hz']:.3g} Hz), "
                            f"peak {v['spectral_peak_hz']:.3g} Hz" for k, v in fl.items() if isinstance(v, dict))
            mode = fl.get("predicted_mode_hz")
            print(f"  rate fluctuations of the spiking twin: {per}"
                  + (f"; least damped predicted mode {mode:.3g} Hz" if mode else ""))
    for note in summary.get("notes", []):
        print(f"  note: {note}")
    print("  (model predictions from a research tool; not a basis for clinical or safety decisions)")
    return 0


#: Compilation shorter than this (s) is not worth a line in the run's report.
SHOW_COMPILE_ABOVE = 0.5


def _print_compile_time(timing: dict) -> None:
    """One line when this run compiled kernels (first use on this installation); run times exclude it."""
    if timing.get("compile_s", 0.0) > SHOW_COMPILE_ABOVE:
        print(f"  compiled the inner loops in {timing['compile_s']:.3g} s (once per installation; "
              "not included in the times below)")


def _key_values(items, flag):
    from .exceptions import ScenarioError

    out = {}
    for item in items:
        if "=" not in item:
            raise ScenarioError(f"{flag}: expected KEY=VALUE, got {item!r}")
        k, val = item.split("=", 1)
        try:
            out[k] = int(val) if val.lstrip("-").isdigit() else float(val)
        except ValueError:
            out[k] = val
    return out


def _step_command(args) -> int:
    from .scenario.loader import parse_scenario
    from .solvers.frontend import simulate

    neuron = _key_values(args.neuron, "--neuron")
    noise = _key_values(args.noise, "--noise")
    if noise.get("kind") == "escape":
        noise = {"kind": "escape", "hazard": {k: v for k, v in noise.items() if k != "kind"}}
    data = {"neuron": neuron, "noise": noise,
            "input": {"shape": "step", "t": args.at, "before": args.before, "after": args.after},
            "run": {"t_end": args.t_end, "record_interval": args.every, **({"dt": args.dt} if args.dt else {})}}
    from .result import STATUS_INTERRUPTED

    sc = parse_scenario(data, "command line")
    try:
        res = simulate(sc.population, sc.drive, sc.t_end, sc.dt, record_interval=sc.record_interval)
    except ValueError as exc:
        from .exceptions import ScenarioError

        raise ScenarioError(f"command line: {exc}") from None
    if res.status == STATUS_INTERRUPTED:
        raise KeyboardInterrupt(res.message)
    if not res.success:
        print(f"popdens: error: {res.message}", file=sys.stderr)
    if args.csv:
        res.to_csv(args.csv)
        print(f"wrote {args.csv}")
    else:
        print("# t_ms rate_Hz mean_u_mV drive_mV")
        for row in zip(res.t, res.rate, res.mean_u, res.drive):
            print(" ".join(f"{x:.6g}" for x in row))
    return 0 if res.success else 1


def _compile_command(args) -> int:
    """``popdens compile``: every kernel compiled (or found in the cache), with the time each group took."""
    import json
    import os
    import time

    from ._warm_up import compile_all

    jobs = args.jobs if args.jobs is not None else (os.cpu_count() or 1)
    if jobs < 1:
        raise ScenarioError(f"--jobs must be >= 1, got {jobs}")

    class _Lines:
        def write(self, text):
            for line in text.splitlines():
                if line.strip():
                    (name, seconds), = json.loads(line).items()
                    print(f"  {name:14s} {'compiled in %.1f s' % seconds if seconds > 0.05 else 'already compiled'}",
                          flush=True)

        def flush(self):
            pass

    print(f"popdens: compiling the inner loops on {jobs} process(es); each is compiled once per installation")
    t0 = time.perf_counter()
    compile_all(jobs, stream=_Lines())
    print(f"done in {time.perf_counter() - t0:.1f} s")
    return 0


def _show_warning(message, category, filename, lineno, file=None, line=None):
    print(f"popdens: warning: {message}", file=sys.stderr)


class _Terminated(KeyboardInterrupt):
    """SIGTERM, handled exactly like Ctrl-C (same clean-up), exit code 143."""


def _compiling() -> bool:
    """True while numba compiles in this process (never imports numba itself)."""
    jit = sys.modules.get("popdens.model._jit")
    return jit is not None and jit.busy()


_EXITING = threading.Lock()


def _exit_now(signum: int) -> None:
    """End the process at once on Ctrl-C or SIGTERM during a compilation.

    An exception raised into numba while it compiles can be dropped (numba runs Python callbacks
    from inside LLVM, where exceptions are printed and ignored: the signal was lost and the run went
    on for minutes) or leave it half-made (a ``RuntimeError`` traceback, exit 1), and a long LLVM
    pass runs no Python signal handler until it returns.  So the temporary output is removed here
    and the process exits with the interrupted status; kernels compiled before stay cached (numba
    writes each cache file by rename, so none is left half-written).
    """
    import signal

    if not _EXITING.acquire(blocking=False):
        return
    terminated = signum == signal.SIGTERM
    try:
        files = sys.modules.get("popdens._files")
        if files is not None:
            files.remove_live_temporaries()
        why = "terminated (SIGTERM)" if terminated else "interrupted by the user"
        sys.stderr.write(f"\npopdens: {why} while compiling; no partial output was kept (kernels compiled "
                         "so far stay cached)\n")
        sys.stderr.flush()
    finally:
        os._exit(EXIT_TERMINATED if terminated else EXIT_INTERRUPTED)


def _on_signal(signum, frame):
    import signal

    if signum == signal.SIGTERM:
        _TERMINATED[0] = True
    if _compiling():
        _exit_now(signum)
    if signum == signal.SIGTERM:
        raise _Terminated("terminated (SIGTERM)")
    raise KeyboardInterrupt


def _watch_signals(fd: int) -> None:
    """Acts on Ctrl-C and SIGTERM while the main thread is inside a compilation.

    The C-level signal handler writes each signal's number to ``fd`` at once (``signal.set_wakeup_fd``),
    even while the main thread runs a long LLVM pass that releases the GIL; outside compilations the
    Python handler in the main thread does the usual clean-up, so nothing is done here.
    """
    import signal

    wanted = {int(signal.SIGINT), int(signal.SIGTERM)}
    while True:
        try:
            data = os.read(fd, 64)
        except OSError:
            return
        if not data:
            os.close(fd)
            return
        for signum in data:
            if signum in wanted and _compiling():
                _exit_now(signum)


class _SignalGuard:
    """Installs the command's SIGINT/SIGTERM handling for one ``main`` call (main thread only)."""

    def __enter__(self):
        import signal

        self.active = threading.current_thread() is threading.main_thread()
        if not self.active:
            return self
        self.previous = {s: signal.signal(s, _on_signal) for s in (signal.SIGINT, signal.SIGTERM)}
        read_fd, self.write_fd = os.pipe()
        os.set_blocking(self.write_fd, False)
        try:
            self.previous_fd = signal.set_wakeup_fd(self.write_fd, warn_on_full_buffer=False)
        except ValueError:  # not allowed here
            os.close(read_fd)
            os.close(self.write_fd)
            self.write_fd = None
        else:
            threading.Thread(target=_watch_signals, args=(read_fd,), daemon=True, name="popdens-signals").start()
        return self

    def __exit__(self, *exc):
        import signal

        if not self.active:
            return False
        if self.write_fd is not None:
            signal.set_wakeup_fd(self.previous_fd)
            os.close(self.write_fd)  # the watcher reads end of file and stops
        for s, handler in self.previous.items():
            signal.signal(s, handler)
        return False


def main(argv: list[str] | None = None) -> int:
    """Entry point; returns the exit code."""
    args = _parser().parse_args(argv)
    logging.basicConfig(level=logging.WARNING, format="popdens: %(message)s")
    # SIGTERM (kill, a batch scheduler's time limit) takes the Ctrl-C path: temporary output removed,
    # a folder being replaced kept, finished sweep points saved; during a compilation both end the
    # process at once (_exit_now)
    _TERMINATED[0] = False
    try:
        with _SignalGuard(), warnings.catch_warnings():
            # accuracy warnings are shown once each, as one plain line, never raised
            warnings.simplefilter("always", AccuracyWarning)
            warnings.showwarning = _show_warning
            code = _main(args)
    except _Terminated:
        code = EXIT_INTERRUPTED
    if _TERMINATED[0] and code == EXIT_INTERRUPTED:
        return EXIT_TERMINATED
    return code


def _main(args) -> int:
    from .scenario.loader import load_scenario
    from .scenario.single import HAZARDS, INPUTS, NEURON_MODELS

    try:
        if args.command == "catalogue":
            print("neuron models ([neuron] model = ...; potentials mV, times ms):")
            for name, (_, keys, optional) in NEURON_MODELS.items():
                print(f"  {name:8s} {', '.join(sorted(keys - optional))}" + (f"  [optional: {', '.join(sorted(optional))}]" if optional else ""))
            print("escape functions ([noise.hazard] shape = ...; rates Hz):")
            for name, (_, keys) in HAZARDS.items():
                print(f"  {name:18s} {', '.join(sorted(keys))}")
            print("noise: kind = 'escape' (with [noise.hazard]) or 'white' (sigma, mV)")
            print("input shapes ([input] shape = ...; mV, ms, Hz):")
            for name, (_, keys) in INPUTS.items():
                print(f"  {name:9s} {', '.join(sorted(keys))}")
            print("analysis tables (beside or instead of [input] and [run]):")
            print("  [gain]        mu (mV: list or {start, stop, count, spacing}), sigma (mV, white noise)")
            print("  [stationary]  mu (mV)")
            print("  [transfer]    mu (mV), frequencies (Hz), modulate = mean | noise | sigma")
            print("  [sweep]       analysis = summary | gain | transfer, mode = grid | list, dotted keys to vary")
            from .scenario.network import BIFURCATION_KEYS, COHORT_KEYS, MAP_KEYS, NETWORK_KEYS, PATHWAY_KEYS

            print("network scenarios (mV, ms, Hz):")
            for table, keys in (("[[cohort]]", COHORT_KEYS), ("[[pathway]]", PATHWAY_KEYS),
                                ("[network]", NETWORK_KEYS), ("[network.stability_map]", MAP_KEYS),
                                ("[network.bifurcation]", BIFURCATION_KEYS)):
                print(f"  {table:13s} {', '.join(sorted(keys))}")
            print("  parameter paths: drive, inhibition, cohort.NAME.FIELD, pathway.SOURCE->TARGET.FIELD "
                  "(NAME may be *; see popdens.network.parameters)")
            return 0
        if args.command == "compile":
            return _compile_command(args)
        if args.command == "bench":
            from . import benchmarks

            names = benchmarks.available()
            if not args.names:
                print("benchmarks (run with `popdens bench NAME`): " + ", ".join(names))
                return 0
            unknown = [n for n in args.names if n not in names]
            if unknown:
                raise ScenarioError(f"unknown benchmark {unknown[0]!r}; available: {', '.join(names)}")
            for n in args.names:
                print(f"== {n}")
                benchmarks.run(n)
            return 0
        if args.command == "step":
            return _step_command(args)
        if args.command in ("gain", "stationary", "transfer"):
            return _analysis_command(args)
        if args.command == "sweep":
            return _sweep_command(args)
        sc = load_scenario(args.scenario)
        if hasattr(sc, "circuit"):  # a network scenario
            return _network_command(args, sc)
        if "sweep" in sc.raw:
            if args.command == "run":
                return _sweep_command(args, sc)
            from .scenario.sweep import plan_sweep

            plan = plan_sweep(sc)
        if args.command == "check":
            parts = [f"{sc.t_end:g} ms run"] if sc.runs_in_time else []
            parts += [f"[{name}]" for name, _ in sc.analyses]
            print(f"{args.scenario}: OK ({sc.title}; {type(sc.population.neuron).__name__}, "
                  f"{type(sc.population.noise).__name__}; {', '.join(parts)})")
            if "sweep" in sc.raw:
                print(f"  sweep: {plan.n_points} points, analysis `{plan.point.analysis}`")
            return 0
        from .scenario.runner import run_scenario

        summary = run_scenario(sc, args.out, overwrite=args.overwrite, progress=False if args.quiet else None)
        print(f"wrote {summary['output']}: {', '.join(summary['files'])}")
        timing = summary["timing"]
        _print_compile_time(timing)
        if "prediction" in summary:
            p = summary["prediction"]
            if p["status"] != 0:
                print(f"popdens: error: the prediction failed: {p['message']} (outputs kept for inspection)",
                      file=sys.stderr)
                return 1
            print(f"  {p['method']}: peak {p['peak_rate_hz']:.4g} Hz, final {p['final_rate_hz']:.4g} Hz "
                  f"({timing['prediction_s']:.3g} s)")
            for msg in p["diagnostics"].get("accuracy_warnings", []):
                print(f"  accuracy warning: {msg}")
        if "gain" in summary:
            g = summary["gain"]
            print(f"  gain: {g['points']} drives, rates {g['min_rate_hz']:.4g} to {g['max_rate_hz']:.4g} Hz")
        for st in summary.get("stationary", {}).get("states", []):
            print(f"  stationary at mu = {st['mu_mV']:g} mV: {st['rate_hz']:.6g} Hz, ISI CV {st['cv']:.4g}")
        if "transfer" in summary:
            print(f"  transfer: {summary['transfer']['frequencies']} frequencies ({summary['transfer']['modulate']} "
                  "modulation)")
        if "montecarlo" in summary:
            m = summary["montecarlo"]
            if m["status"] != 0:
                print(f"popdens: error: the Monte Carlo run failed: {m['message']}", file=sys.stderr)
                return 1
            print(f"  Monte Carlo N={m['n_neurons']} ({timing['montecarlo_s']:.3g} s): "
                  f"{m['agreement']['verdict']}")
        print("  (model predictions from a research tool; not a basis for clinical or safety decisions)")
        return 0
    except (ScenarioError, FileExistsError) as exc:
        print(f"popdens: error: {exc}", file=sys.stderr)
        return 2
    except ValueError as exc:  # misuse found by the library after loading (message names the setting)
        print(f"popdens: error: {exc}", file=sys.stderr)
        return 2
    except OSError as exc:  # the file system refused (a name too long, no space, no permission)
        where = f"{exc.filename}: " if exc.filename else ""
        print(f"popdens: error: {where}{exc.strerror or exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        why = "terminated (SIGTERM)" if _TERMINATED[0] else "interrupted by the user"
        print(f"popdens: {why}; no partial output was kept", file=sys.stderr)
        return EXIT_INTERRUPTED
    except Exception as exc:  # internal failure: report briefly, keep the traceback for developers
        logging.getLogger(__name__).exception("internal error: %s", exc)
        return 1


def run() -> None:
    """The ``popdens`` command: :func:`main`, then the exit.

    An interrupted run (Ctrl-C, SIGTERM) ends with ``os._exit`` once ``main`` has cleaned up (output
    removed, sweep workers stopped, streams flushed), skipping the interpreter's shutdown: after an
    interruption inside a long run that shutdown was once seen to end in a segmentation fault
    instead of exit 130 (one CI run in dozens; not reproduced in 26 local attempts), and an
    interrupted run has nothing left to finish.
    """
    code = main()
    if code in (EXIT_INTERRUPTED, EXIT_TERMINATED):
        for stream in (sys.stdout, sys.stderr):
            try:
                stream.flush()
            except (OSError, ValueError):  # a closed pipe: nothing more can be said
                pass
        os._exit(code)
    sys.exit(code)


if __name__ == "__main__":  # pragma: no cover
    run()
