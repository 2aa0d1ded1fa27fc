"""Command line: ``popdens run``, ``popdens check``, ``popdens catalogue``.

Exit codes: 0 success, 2 bad input (no traceback), 1 numerical or internal failure,
130 interrupted by the user (Ctrl-C; no partial output is kept).
"""

from __future__ import annotations

import argparse
import logging
import sys
import warnings

from . import __version__
from .exceptions import AccuracyWarning, ScenarioError

__all__ = ["main"]

#: Exit code after Ctrl-C (128 + SIGINT, the shell convention).
EXIT_INTERRUPTED = 130


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
        print("# t_ms rate_hz mean_u_mv drive_mv")
        for row in zip(res.t, res.rate, res.mean_u, res.drive):
            print(" ".join(f"{x:.6g}" for x in row))
    return 0 if res.success else 1


def _show_warning(message, category, filename, lineno, file=None, line=None):
    print(f"popdens: warning: {message}", file=sys.stderr)


def main(argv: list[str] | None = None) -> int:
    """Entry point; returns the exit code."""
    args = _parser().parse_args(argv)
    logging.basicConfig(level=logging.WARNING, format="popdens: %(message)s")
    with warnings.catch_warnings():
        # accuracy warnings are shown once each, as one plain line, never raised
        warnings.simplefilter("always", AccuracyWarning)
        warnings.showwarning = _show_warning
        return _main(args)


def _main(args) -> int:
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
        sc = load_scenario(args.scenario)
        if args.command == "check":
            print(f"{args.scenario}: OK ({sc.title}; {type(sc.population.neuron).__name__}, "
                  f"{type(sc.population.noise).__name__}, {sc.t_end:g} ms)")
            return 0
        from .runner import run_scenario

        summary = run_scenario(sc, args.out, overwrite=args.overwrite, progress=False if args.quiet else None)
        print(f"wrote {summary['output']}: prediction.csv, rate.png, rate.svg, summary.json, report.html"
              + (", montecarlo.csv" if "montecarlo" in summary else ""))
        p = summary["prediction"]
        timing = summary["timing"]
        if p["status"] != 0:
            print(f"popdens: error: the prediction failed: {p['message']} (outputs kept for inspection)",
                  file=sys.stderr)
            return 1
        print(f"  {p['method']}: peak {p['peak_rate_hz']:.4g} Hz, final {p['final_rate_hz']:.4g} Hz "
              f"({timing['prediction_s']:.3g} s)")
        for msg in p["diagnostics"].get("accuracy_warnings", []):
            print(f"  accuracy warning: {msg}")
        if "montecarlo" in summary:
            m = summary["montecarlo"]
            if m["status"] != 0:
                print(f"popdens: error: the Monte Carlo run failed: {m['message']}", file=sys.stderr)
                return 1
            print(f"  Monte Carlo N={m['n_neurons']}: {100 * m['fraction_within_4_se']:.1f}% of bins within "
                  f"4 standard errors ({timing['montecarlo_s']:.3g} s)")
        print("  (model predictions from a research tool; not a basis for clinical or safety decisions)")
        return 0
    except (ScenarioError, FileExistsError) as exc:
        print(f"popdens: error: {exc}", file=sys.stderr)
        return 2
    except ValueError as exc:  # misuse found by the library after loading (message names the setting)
        print(f"popdens: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("popdens: interrupted by the user; no partial output was kept", file=sys.stderr)
        return EXIT_INTERRUPTED
    except Exception as exc:  # internal failure: report briefly, keep the traceback for developers
        logging.getLogger(__name__).exception("internal error: %s", exc)
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
