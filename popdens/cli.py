"""Command line: ``popdens run``, ``popdens check``, ``popdens catalogue``.

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
    sub.add_parser("catalogue", help="list neuron models, escape functions and input shapes with their parameters")
    return p


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
