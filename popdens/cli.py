"""Command line: ``popdens run``, ``popdens check``, ``popdens catalogue``, ``popdens step``, ``popdens sweep``.

Exit codes: 0 success, 2 bad input (no traceback), 1 internal failure.
"""

from __future__ import annotations

import argparse
import logging
import sys

from . import __version__
from .exceptions import ScenarioError

__all__ = ["main"]


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
    sub.add_parser("catalogue", help="list neuron models, escape functions and input shapes with their parameters")
    st = sub.add_parser("step", help="one-off step response from flags, without a scenario file",
                        description="Example: popdens step --neuron model=LIF tau_m=10 threshold=20 reset=0 "
                                    "refractory=2 --noise kind=escape shape=exponential rate=20 width=2 "
                                    "--before 15 --after 20 --at 50 --t-end 200")
    st.add_argument("--neuron", nargs="+", required=True, metavar="KEY=VALUE",
                    help="neuron table entries, as in a scenario's [neuron]")
    st.add_argument("--noise", nargs="+", required=True, metavar="KEY=VALUE",
                    help="kind=escape with the [noise.hazard] entries (shape=..., ...), or kind=white sigma=...")
    st.add_argument("--before", type=float, required=True, help="drive before the step (mV)")
    st.add_argument("--after", type=float, required=True, help="drive after the step (mV)")
    st.add_argument("--at", type=float, required=True, help="time of the step (ms)")
    st.add_argument("--t-end", type=float, required=True, help="duration (ms)")
    st.add_argument("--dt", type=float, default=None, help="time step (ms)")
    st.add_argument("--every", type=float, default=1.0, help="output interval (ms), default 1")
    st.add_argument("--csv", help="write the result to this CSV file instead of printing it")
    return p


# ---------------------------------------------------------------- sweeps (popdens/sweep_scenario.py)
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
    from .scenario import load_scenario
    from .sweep_scenario import run_sweep_scenario

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
        return 1
    d = res.diagnostics
    print(f"wrote {res.output}: results.csv, summary.json, points/"
          + (", failures.csv" if res.failed else "") + ("" if args.no_figures else ", figures/"))
    print(f"  {len(res.points)} points ({d['computed_now']} computed now, {len(res.failed)} failed) on "
          f"{d['backend']} with {d['workers']} worker(s) in {d['wall_time_s']:.3g} s")
    for i, params, err in res.failed[:5]:
        print(f"  point {i} {params} failed: {err}", file=sys.stderr)
    return 0


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
    from .scenario import parse_scenario
    from .simulate import simulate

    neuron = _key_values(args.neuron, "--neuron")
    noise = _key_values(args.noise, "--noise")
    if noise.get("kind") == "escape":
        noise = {"kind": "escape", "hazard": {k: v for k, v in noise.items() if k != "kind"}}
    data = {"neuron": neuron, "noise": noise,
            "input": {"shape": "step", "t": args.at, "before": args.before, "after": args.after},
            "run": {"t_end": args.t_end, "record_interval": args.every, **({"dt": args.dt} if args.dt else {})}}
    sc = parse_scenario(data, "command line")
    try:
        res = simulate(sc.population, sc.drive, sc.t_end, sc.dt, record_interval=sc.record_interval)
    except ValueError as exc:
        from .exceptions import ScenarioError

        raise ScenarioError(f"command line: {exc}") from None
    if args.csv:
        res.to_csv(args.csv)
        print(f"wrote {args.csv}")
    else:
        print("# t_ms rate_hz mean_u_mv drive_mv")
        for row in zip(res.t, res.rate, res.mean_u, res.drive):
            print(" ".join(f"{x:.6g}" for x in row))
    return 0 if res.success else 1


def main(argv: list[str] | None = None) -> int:
    """Entry point; returns the exit code."""
    args = _parser().parse_args(argv)
    logging.basicConfig(level=logging.WARNING, format="popdens: %(message)s")
    from .scenario import HAZARDS, INPUTS, NEURON_MODELS, load_scenario

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
            return 0
        if args.command == "step":
            return _step_command(args)
        if args.command == "sweep":
            return _sweep_command(args)
        sc = load_scenario(args.scenario)
        if "sweep" in sc.raw:
            if args.command == "run":
                return _sweep_command(args, sc)
            from .sweep_scenario import plan_sweep

            plan = plan_sweep(sc)
        if args.command == "check":
            print(f"{args.scenario}: OK ({sc.title}; {type(sc.population.neuron).__name__}, "
                  f"{type(sc.population.noise).__name__}, {sc.t_end:g} ms)")
            if "sweep" in sc.raw:
                print(f"  sweep: {plan.n_points} points, analysis `{plan.point.analysis}`")
            return 0
        from .runner import run_scenario

        summary = run_scenario(sc, args.out, overwrite=args.overwrite, progress=False if args.quiet else None)
        print(f"wrote {summary['output']}: prediction.csv, rate.png, rate.svg, summary.json, report.html"
              + (", montecarlo.csv" if "montecarlo" in summary else ""))
        p = summary["prediction"]
        print(f"  {p['method']}: peak {p['peak_rate_hz']:.4g} Hz, final {p['final_rate_hz']:.4g} Hz "
              f"({p['diagnostics']['wall_time_s']:.3g} s)")
        if "montecarlo" in summary:
            m = summary["montecarlo"]
            print(f"  Monte Carlo N={m['n_neurons']}: {100 * m['fraction_within_4_se']:.1f}% of bins within "
                  f"4 standard errors ({m['diagnostics']['wall_time_s']:.3g} s)")
        print("  (model predictions from a research tool; not a basis for clinical or safety decisions)")
        return 0
    except (ScenarioError, FileExistsError) as exc:
        print(f"popdens: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("popdens: interrupted; no partial output was kept", file=sys.stderr)
        return 1
    except Exception as exc:  # internal failure: report briefly, keep the traceback for developers
        logging.getLogger(__name__).exception("internal error: %s", exc)
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
