"""The HTML report of a scenario run: one self-contained page with every figure, parameter and diagnostic."""

from __future__ import annotations

import base64
import html
from pathlib import Path

from .._version import __version__
from .analyses import noise_fields

__all__ = ["html_report"]


def _plain(value, unit: str = "") -> str:
    """A value as people read it: numbers with their unit, drives as their parameters, ``None`` as
    ``n/a`` (never a Python repr such as ``Constant(mu=1.0)``)."""
    if value is None:
        return "n/a"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, (int, float)):
        return f"{value:g}{' ' + unit if unit else ''}"
    if hasattr(value, "parameters") and callable(value.parameters):  # a drive, escape function...
        from ..plotting import KEY_UNITS

        parts = []
        for k, v in value.parameters().items():
            u = KEY_UNITS.get(k, "")
            parts.append(f"{k} = {_plain(v, '' if u == '1' else u)}" if not isinstance(v, (list, dict)) else
                         f"{k} = ({len(v)} values)")
        name = type(value).__name__
        return name if not parts else (parts[0].split(" = ")[1] if name == "Constant" and len(parts) == 1
                                       else f"{name}: {', '.join(parts)}")
    if isinstance(value, dict):
        return ", ".join(f"{k} {_plain(v, unit)}" for k, v in value.items())
    if isinstance(value, (list, tuple)):
        return ", ".join(_plain(v, unit) for v in value) if value else "none"
    return str(value)


def _unit_rows(params: dict) -> list:
    """``(name (unit), value)`` rows of a model's parameters, units from the key names."""
    from ..plotting import KEY_UNITS

    rows = []
    for k, v in params.items():
        u = KEY_UNITS.get(k, "")
        rows.append((f"{k} ({u})" if u and u != "1" else k, _plain(v)))
    return rows


def _setting_label(key: str) -> str:
    """``t_end_ms`` -> ``t_end (ms)``: the unit suffix of a summary key as a unit in brackets."""
    from ..plotting import axis_label

    return axis_label(key)


def _hz(rates: dict) -> str:
    """``{'E': 16.1...}`` as ``E 16.1, I 16.2`` (no Python reprs in the report)."""
    return ", ".join(f"{k} {v:.4g}" for k, v in rates.items())


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
        body = "".join(f"<tr><th>{html.escape(str(k))}</th><td>{html.escape(_plain(v))}</td></tr>"
                       for k, v in rows)
        return f"<table>{body}</table>"

    def population_rows(pop):
        params = {k: v for k, v in pop.neuron.parameters().items() if k != "adaptation"}
        rows = [("neuron model", type(pop.neuron).__name__), *_unit_rows(params)]
        for a in getattr(pop.neuron, "adaptation", ()) or ():
            rows.append(("adaptation", _plain(a)))
        noise = pop.noise
        rows.append(("noise", type(noise).__name__))
        if hasattr(noise, "hazard"):
            rows += [("escape function", type(noise.hazard).__name__), *_unit_rows(noise.hazard.parameters())]
        else:  # white, coloured or shot noise: its fields, units from their names
            rows += _unit_rows(noise_fields(noise))
        return rows

    if hasattr(scenario, "circuit"):
        model_tables = []
        for a in scenario.circuit.cohorts:
            rows = [("size (spiking twin)", a.size), ("external drive (mV)", _plain(a.drive, "mV")),
                    ("external sigma (mV)", _plain(a.sigma_ext, "mV")), ("Poisson background", _plain(a.background))]
            model_tables.append((f"Cohort {a.name}", rows + population_rows(a.population)))
        model_tables.append(("Pathways", [(p.label, f"J = {p.weight:g} mV, C = {p.in_degree}, delay "
                                          f"{p.delay:g} ms, tau_syn {p.tau_syn:g} ms")
                                         for p in scenario.circuit.pathways]))
    else:
        model_tables = [("Neuron and noise", population_rows(scenario.population))]
        if getattr(scenario, "runs_in_time", False):
            model_tables.append(("Input", [("shape", type(scenario.drive).__name__),
                                           *_unit_rows(scenario.drive.parameters())]))
    run_rows, diag_rows = [], []
    if hasattr(scenario, "circuit"):
        run_rows = [(_setting_label(k), _plain(v)) for k, v in summary["settings"].items()]
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
            run_rows.append(("spiking twin: mean rates, second half (Hz)", _hz(m["mean_rates_second_half_hz"])))
            run_rows.append(("mean field: mean rates, second half (Hz)", _hz(m["mean_field_second_half_hz"])))
            for k, fl in m.get("fluctuations", {}).items():
                if isinstance(fl, dict):
                    run_rows.append((f"spiking twin {k}: rate s.d. / independent neurons / spectral peak",
                                     f"{fl['sd_hz']:.3g} Hz / {fl['sd_independent_neurons_hz']:.3g} Hz / "
                                     f"{fl['spectral_peak_hz']:.3g} Hz"))
    elif "prediction" in summary:
        run_rows = [("t_end (ms)", scenario.t_end), ("dt (ms)", summary["prediction"]["diagnostics"]["dt_ms"]),
                    ("record interval (ms)", scenario.record_interval or "every step"),
                    ("Monte Carlo neurons", scenario.montecarlo_neurons), ("seed", scenario.seed)]
        diag_rows = [(f"prediction: {_setting_label(k)}", v) for k, v in summary["prediction"]["diagnostics"].items()]
    for name, _ in getattr(scenario, "analyses", ()):
        run_rows += [(f"{name}: {_setting_label(k)}", v) for k, v in summary[name].items()
                     if k not in ("figures", "states")]
        for st in summary[name].get("states", []):
            run_rows.append((f"{name}: mu = {st['mu_mV']:g} mV",
                             f"rate {st['rate_hz']:.6g} Hz, CV {st['cv']:.4g}, mean u {st['mean_u_mV']:.4g} mV"))
    if "montecarlo" in summary and "fraction_within_4_se" in summary["montecarlo"]:
        frac = summary["montecarlo"]["fraction_within_4_se"]
        diag_rows += [("Monte Carlo: bins within 4 SE", "n/a" if frac is None else f"{100 * frac:.1f}%")]
        diag_rows += [(f"Monte Carlo: {_setting_label(k)}", v) for k, v in summary["montecarlo"]["diagnostics"].items()]
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
    notes = "".join(f'<p class="caution"><b>Note:</b> {html.escape(n)}</p>' for n in summary.get("notes", []))
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
{notes}
{chr(10).join(sections)}
<p>Units: time ms, rate Hz, potentials and drive mV, frequency Hz. Tables:
{", ".join(f"<code>{html.escape(t)}</code>" for t in tables)} (their header lines state the units of each column).</p>
{chr(10).join(f"<h2>{html.escape(h)}</h2>{table(rows)}" for h, rows in model_check + model_tables)}
<h2>Numerical settings and analyses</h2>{table(run_rows)}
{"<h2>Diagnostics</h2>" + table(diag_rows) if diag_rows else ""}
</body></html>
"""
