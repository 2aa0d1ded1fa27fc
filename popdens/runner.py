"""Run a scenario and write its outputs (one function serves the CLI, tests and scripts)."""

from __future__ import annotations

import json
import shutil
import tempfile
from pathlib import Path

import numpy as np

from . import __version__
from .montecarlo import montecarlo
from .result import _jsonable
from .scenario import Scenario
from .simulate import simulate

__all__ = ["run_scenario"]


def run_scenario(scenario: Scenario, output: str | Path | None = None, *, overwrite: bool = False,
                 progress: bool | None = None) -> dict:
    """Run ``scenario``: the time-domain prediction (and Monte Carlo twin) and the analyses it names.

    Outputs go to a temporary folder next to the destination, which is renamed
    into place only when complete, so an interrupted run leaves no partial
    output.  An existing folder is replaced only with ``overwrite=True``.

    Returns
    -------
    dict
        The summary written to ``summary.json``.
    """
    dest = Path(output) if output is not None else scenario.source.parent / scenario.output
    if dest.exists() and not overwrite:
        raise FileExistsError(f"output folder {dest} exists; choose another or pass overwrite")
    dest.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{dest.name}.", dir=dest.parent))
    try:
        header = {"scenario": str(scenario.source.name), "scenario_sha256_16": scenario.digest,
                  "popdens_version": __version__}
        summary = {
            "title": scenario.title,
            "scenario": str(scenario.source),
            "scenario_sha256_16": scenario.digest,
            "version": __version__,
            "caution": "model predictions for a research tool; not for clinical or safety decisions",
        }
        figures = []  # (file name, caption) pairs for the report
        if scenario.runs_in_time:
            figures += _time_domain(scenario, tmp, header, summary, progress)
        for name, analysis in scenario.analyses:
            summary[name] = analysis.write(scenario.population, tmp, header)
            png = next(f for f in summary[name]["figures"] if f.endswith(".png"))
            figures.append((png, CAPTIONS[name]))
        summary["files"] = sorted(p.name for p in tmp.iterdir()) + ["report.html", "summary.json"]
        (tmp / "summary.json").write_text(json.dumps(_jsonable(summary), indent=2, sort_keys=True) + "\n")
        (tmp / "report.html").write_text(_html_report(scenario, summary, tmp, figures), encoding="utf-8")
        if dest.exists():
            shutil.rmtree(dest)
        tmp.rename(dest)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    summary["output"] = str(dest)
    return summary


#: Report captions of the analysis figures.
CAPTIONS = {"gain": "Gain function: stationary rate against mean drive",
            "stationary": "Stationary interspike-interval densities",
            "transfer": "Transfer function: magnitude and phase against frequency"}


def _time_domain(scenario: Scenario, tmp: Path, header: dict, summary: dict, progress) -> list:
    """The density prediction, and the Monte Carlo twin if requested; returns the report figures."""
    pred = simulate(scenario.population, scenario.drive, scenario.t_end, scenario.dt,
                    record_interval=scenario.record_interval, snapshot_interval=scenario.snapshot_interval,
                    progress=progress)
    header = {**header, "units": "t ms, rate Hz, u mV, drive mV"}
    pred.to_csv(tmp / "prediction.csv", header_extra=header)
    summary["prediction"] = {"method": pred.method, "status": pred.status, "message": pred.message,
                             "peak_rate_hz": float(np.max(pred.rate)), "final_rate_hz": float(pred.rate[-1]),
                             "diagnostics": pred.diagnostics}
    mc = None
    if scenario.montecarlo_neurons:
        mc = montecarlo(scenario.population, scenario.drive, scenario.t_end, scenario.montecarlo_neurons,
                        dt=pred.dt, seed=scenario.seed, record_interval=scenario.record_interval,
                        progress=progress)
        mc.to_csv(tmp / "montecarlo.csv", header_extra=header)
        se = mc.rate_standard_error()[1:]
        z = np.abs(mc.rate[1:] - pred.rate[1:]) / np.maximum(se, 1e-12)
        summary["montecarlo"] = {"n_neurons": mc.n_neurons, "seed": scenario.seed,
                                 "fraction_within_4_se": float(np.mean(z <= 4.0)),
                                 "diagnostics": mc.diagnostics}
    return _figures(pred, mc, tmp)


def _figures(pred, mc, folder: Path) -> list:
    import matplotlib.pyplot as plt

    from .plotting import plot_comparison, plot_density_map, plot_rate

    if mc is not None:
        fig = plot_comparison(pred, mc)
    else:
        ax = plot_rate(pred)
        fig = ax.figure
    for ext in ("png", "svg"):
        fig.savefig(folder / f"rate.{ext}", dpi=150)
    plt.close(fig)
    out = [("rate.png", "Population rate over time, with the drive beneath"
            + (" (solver against the Monte Carlo twin)" if mc is not None else ""))]
    if pred.snapshots is not None and len(pred.snapshot_t) >= 2:
        ax = plot_density_map(pred)
        for ext in ("png", "svg"):
            ax.figure.savefig(folder / f"density.{ext}", dpi=150)
        plt.close(ax.figure)
        out.append(("density.png", f"Density over time ({pred.axis_name})"))
    return out


def _html_report(scenario: Scenario, summary: dict, folder: Path, figures: list) -> str:
    """A self-contained HTML page: figures embedded, parameters, settings, diagnostics, caution."""
    import base64
    import html

    pop = scenario.population
    sections = []
    for name, caption in figures:
        png = base64.b64encode((folder / name).read_bytes()).decode("ascii")
        sections.append(f"<h2>{html.escape(caption)}</h2>\n<img alt=\"{html.escape(caption)}\" "
                        f"src=\"data:image/png;base64,{png}\" style=\"max-width:100%\">")
    tables = [f for f in summary["files"] if f.endswith(".csv")]

    def table(rows):
        body = "".join(f"<tr><th>{html.escape(str(k))}</th><td>{html.escape(str(v))}</td></tr>" for k, v in rows)
        return f"<table>{body}</table>"

    neuron_rows = [("model", type(pop.neuron).__name__), *pop.neuron.parameters().items()]
    noise = pop.noise
    noise_rows = [("noise", type(noise).__name__)]
    if hasattr(noise, "hazard"):
        noise_rows += [("escape function", type(noise.hazard).__name__), *noise.hazard.parameters().items()]
    else:
        noise_rows += [("sigma (mV)", noise.sigma)]
    run_rows, diag_rows = [], []
    if "prediction" in summary:
        run_rows = [("t_end (ms)", scenario.t_end), ("dt (ms)", summary["prediction"]["diagnostics"]["dt_ms"]),
                    ("record interval (ms)", scenario.record_interval or "every step"),
                    ("Monte Carlo neurons", scenario.montecarlo_neurons), ("seed", scenario.seed)]
        diag_rows = [(f"prediction: {k}", v) for k, v in summary["prediction"]["diagnostics"].items()]
    for name, _ in scenario.analyses:
        run_rows += [(f"{name}: {k}", v) for k, v in summary[name].items() if k not in ("figures", "states")]
        for st in summary[name].get("states", []):
            run_rows.append((f"{name}: mu = {st['mu_mV']:g} mV",
                             f"rate {st['rate_hz']:.6g} Hz, CV {st['cv']:.4g}, mean u {st['mean_u_mV']:.4g} mV"))
    if "montecarlo" in summary:
        diag_rows += [("Monte Carlo: bins within 4 SE", f"{100 * summary['montecarlo']['fraction_within_4_se']:.1f}%")]
        diag_rows += [(f"Monte Carlo: {k}", v) for k, v in summary["montecarlo"]["diagnostics"].items()]
    title = html.escape(scenario.title)
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>{title}</title>
<style>body{{font-family:sans-serif;max-width:60em;margin:2em auto;color:#222}}
table{{border-collapse:collapse;margin:0.5em 0 1.5em}}th,td{{border:1px solid #ccc;padding:0.2em 0.6em;text-align:left}}
.caution{{background:#fff4e0;border-left:4px solid #e0a000;padding:0.6em}}</style></head>
<body><h1>{title}</h1>
<p>Scenario <code>{html.escape(str(scenario.source.name))}</code> (hash {scenario.digest}), popdens {__version__}.</p>
<p class="caution">These are predictions of a model of neurons, from a research tool. They are not a basis for
clinical or safety decisions.</p>
{chr(10).join(sections)}
<p>Units: time ms, rate Hz, potentials and drive mV, frequency Hz. Tables:
{", ".join(f"<code>{html.escape(t)}</code>" for t in tables)} (their header lines state the units of each column).</p>
<h2>Neuron</h2>{table(neuron_rows)}
<h2>Noise</h2>{table(noise_rows)}
<h2>Numerical settings and analyses</h2>{table(run_rows)}
{"<h2>Diagnostics</h2>" + table(diag_rows) if diag_rows else ""}
</body></html>
"""
