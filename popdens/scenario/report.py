"""The HTML report of a scenario run: one self-contained page with every figure, parameter and diagnostic."""

from __future__ import annotations

import base64
import html
from pathlib import Path

from .._version import __version__

__all__ = ["html_report"]


def html_report(scenario, summary: dict, folder: Path, figures: list) -> str:
    """A self-contained HTML page: figures embedded, parameters, settings, diagnostics, caution.

    ``scenario`` is a single-population or a network scenario, ``summary`` the
    run's summary, ``figures`` ``(file name in folder, caption)`` pairs.
    """
    sections = []
    for name, caption in figures:
        png = base64.b64encode((folder / name).read_bytes()).decode("ascii")
        sections.append(f"<h2>{html.escape(caption)}</h2>\n<img alt=\"{html.escape(caption)}\" "
                        f"src=\"data:image/png;base64,{png}\" style=\"max-width:100%\">")
    tables = [f for f in summary["files"] if f.endswith(".csv")]

    def table(rows):
        body = "".join(f"<tr><th>{html.escape(str(k))}</th><td>{html.escape(str(v))}</td></tr>" for k, v in rows)
        return f"<table>{body}</table>"

    def population_rows(pop):
        rows = [("neuron model", type(pop.neuron).__name__), *pop.neuron.parameters().items()]
        noise = pop.noise
        rows.append(("noise", type(noise).__name__))
        if hasattr(noise, "hazard"):
            rows += [("escape function", type(noise.hazard).__name__), *noise.hazard.parameters().items()]
        else:
            rows += [("sigma (mV)", noise.sigma)]
        return rows

    if hasattr(scenario, "circuit"):
        model_tables = []
        for a in scenario.circuit.cohorts:
            rows = [("size (spiking twin)", a.size), ("external drive (mV)", a.drive),
                    ("external sigma (mV)", a.sigma_ext), ("Poisson background", a.background)]
            model_tables.append((f"Cohort {a.name}", rows + population_rows(a.population)))
        model_tables.append(("Pathways", [(p.label, f"J = {p.weight:g} mV, C = {p.in_degree}, delay "
                                          f"{p.delay:g} ms, tau_syn {p.tau_syn:g} ms")
                                         for p in scenario.circuit.pathways]))
    else:
        model_tables = [("Neuron and noise", population_rows(scenario.population))]
    run_rows, diag_rows = [], []
    if hasattr(scenario, "circuit"):
        run_rows = [(k, v) for k, v in summary["settings"].items()]
        for i, fp in enumerate(summary.get("fixed_points", [])):
            run_rows.append((f"fixed point {i}", ", ".join(f"{k}: {v}" for k, v in fp.items())))
        if "bifurcation" in summary:
            bif = summary["bifurcation"]
            run_rows.append(("bifurcation diagram", f"{bif['parameter']} from {bif['span'][0]:g} to {bif['span'][1]:g}: "
                                                    f"{bif['branches']} branch(es)"))
            for p in bif["points"]:
                what = "fold" if p["kind"] == "fold" else f"oscillation onset at {p['frequency_hz']:.4g} Hz"
                run_rows.append((f"{what} (branch {p['branch']})",
                                 f"{bif['parameter']} = {p['parameter']:.8g}; rates "
                                 + ", ".join(f"{k} {v:.4g} Hz" for k, v in p["rates_hz"].items())
                                 + ("; stability lost or gained" if p["loses_stability"] else "")))
        if "montecarlo" in summary:
            m = summary["montecarlo"]
            run_rows.append(("spiking twin: mean rates, second half (Hz)", m["mean_rates_second_half_hz"]))
            run_rows.append(("mean field: mean rates, second half (Hz)", m["mean_field_second_half_hz"]))
    elif "prediction" in summary:
        run_rows = [("t_end (ms)", scenario.t_end), ("dt (ms)", summary["prediction"]["diagnostics"]["dt_ms"]),
                    ("record interval (ms)", scenario.record_interval or "every step"),
                    ("Monte Carlo neurons", scenario.montecarlo_neurons), ("seed", scenario.seed)]
        diag_rows = [(f"prediction: {k}", v) for k, v in summary["prediction"]["diagnostics"].items()]
    for name, _ in getattr(scenario, "analyses", ()):
        run_rows += [(f"{name}: {k}", v) for k, v in summary[name].items() if k not in ("figures", "states")]
        for st in summary[name].get("states", []):
            run_rows.append((f"{name}: mu = {st['mu_mV']:g} mV",
                             f"rate {st['rate_hz']:.6g} Hz, CV {st['cv']:.4g}, mean u {st['mean_u_mV']:.4g} mV"))
    if "montecarlo" in summary and "fraction_within_4_se" in summary["montecarlo"]:
        frac = summary["montecarlo"]["fraction_within_4_se"]
        diag_rows += [("Monte Carlo: bins within 4 SE", "n/a" if frac is None else f"{100 * frac:.1f}%")]
        diag_rows += [(f"Monte Carlo: {k}", v) for k, v in summary["montecarlo"]["diagnostics"].items()]
    verdict = ""
    agreement = summary.get("montecarlo", {}).get("agreement")
    if agreement:
        cls = "agrees" if agreement["agrees"] else "disagrees"
        verdict = f'<p class="{cls}"><b>Check:</b> {html.escape(agreement["verdict"])}.</p>'
        m = agreement.get("modulation")
        rows = [("significance level", agreement["alpha"]),
                ("chi-square over bins (pooled to >= 5 expected spikes)",
                 f"{agreement['chi2']:.2f} on {agreement['dof']} bins, p = {agreement['p_value']:.3g}"
                 if agreement["dof"] else "n/a")]
        if agreement.get("mean_p_value") is not None:
            rows.append(("mean rate, twin / prediction - 1",
                         f"{100 * agreement['rate_excess']:+.2f} %, p = {agreement['mean_p_value']:.3g}"))
        if m:
            rows += [("modulation frequency (Hz)", m["frequency_hz"]),
                     ("modulation amplitude (Hz): twin [CI] / predicted",
                      f"{m['amplitude_hz']:.4g} [{m['amplitude_ci_hz'][0]:.4g}, {m['amplitude_ci_hz'][1]:.4g}] / "
                      f"{m['predicted_amplitude_hz']:.4g}"),
                     ("modulation phase (degrees): twin [CI] / predicted",
                      f"{m['phase_deg']:.1f} [{m['phase_ci_deg'][0]:.1f}, {m['phase_ci_deg'][1]:.1f}] / "
                      f"{m['predicted_phase_deg']:.1f}"),
                     ("modulation p-value", f"{m['p_value']:.3g}")]
        model_check = [("Monte Carlo check", rows)]
    else:
        model_check = []
    title = html.escape(scenario.title)
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>{title}</title>
<style>body{{font-family:sans-serif;max-width:60em;margin:2em auto;color:#222}}
table{{border-collapse:collapse;margin:0.5em 0 1.5em}}th,td{{border:1px solid #ccc;padding:0.2em 0.6em;text-align:left}}
.caution{{background:#fff4e0;border-left:4px solid #e0a000;padding:0.6em}}
.agrees{{background:#e8f6e8;border-left:4px solid #2a8a2a;padding:0.6em}}
.disagrees{{background:#fbe6e6;border-left:4px solid #b02020;padding:0.6em}}</style></head>
<body><h1>{title}</h1>
<p>Scenario <code>{html.escape(str(scenario.source.name))}</code> (hash {scenario.digest}), popdens {__version__}.</p>
<p class="caution">These are predictions of a model of neurons, from a research tool. They are not a basis for
clinical or safety decisions.</p>
{verdict}
{chr(10).join(sections)}
<p>Units: time ms, rate Hz, potentials and drive mV, frequency Hz. Tables:
{", ".join(f"<code>{html.escape(t)}</code>" for t in tables)} (their header lines state the units of each column).</p>
{chr(10).join(f"<h2>{html.escape(h)}</h2>{table(rows)}" for h, rows in model_check + model_tables)}
<h2>Numerical settings and analyses</h2>{table(run_rows)}
{"<h2>Diagnostics</h2>" + table(diag_rows) if diag_rows else ""}
</body></html>
"""
