"""The HTML report of a sweep: one self-contained page with the swept parameters, every output's
range with its unit, the figures, the failures and the caution."""

from __future__ import annotations

import base64
import html
from pathlib import Path

import numpy as np

from .._version import __version__

__all__ = ["sweep_report"]


def _table(head, rows) -> str:
    th = "".join(f"<th>{html.escape(str(h))}</th>" for h in head)
    body = "".join("<tr>" + "".join(f"<td>{html.escape(str(c))}</td>" for c in r) + "</tr>" for r in rows)
    return f"<table><tr>{th}</tr>{body}</table>"


def _value(x) -> str:
    return f"{x:g}" if isinstance(x, float) else str(x)


def sweep_report(res, folder: Path, figures: list, title: str | None = None) -> str:
    """HTML text of the report of ``res`` (a SweepResult written to ``folder``); ``figures`` are
    ``(file in folder/figures, caption)`` pairs.  No dates or wall times: reruns give the same page."""
    from ..plotting import axis_label

    folder = Path(folder)
    keys = list(res.axes) if res.axes is not None else (list(res.points[0]) if res.points else [])
    param_rows = []
    for k in keys:
        vals = list(res.axes[k]) if res.axes is not None else [p[k] for p in res.points]
        shown = ", ".join(_value(v) for v in vals[:12]) + (f" ... ({len(vals)} values)" if len(vals) > 12 else "")
        param_rows.append((k, axis_label(k), shown))
    scalars, curves = res.output_names()
    out_rows = []
    for name in scalars:
        v = res.values(name)
        ok = v[np.isfinite(v)]
        out_rows.append((name, axis_label(name), f"{ok.min():.6g} to {ok.max():.6g}" if ok.size else "n/a"))
    for name in curves:
        out_rows.append((name, axis_label(name), "one curve per point (points/ and results.csv)"))
    sections = []
    for name, caption in figures:
        png = base64.b64encode((folder / "figures" / name).read_bytes()).decode("ascii")
        sections.append(f"<h2>{html.escape(caption)}</h2><img alt=\"{html.escape(caption)}\" "
                        f"src=\"data:image/png;base64,{png}\" style=\"max-width:100%\">")
    fails = [(i, ", ".join(f"{k}={_value(p[k])}" for k in p), err) for i, p, err in res.failed]
    done = sum(r is not None for r in res.records)
    d = res.diagnostics
    name = html.escape(title or f"Sweep in {folder.name}")
    mode = "grid (every combination)" if res.axes is not None else "list of points"
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>{name}</title>
<style>body{{font-family:sans-serif;max-width:60em;margin:2em auto;color:#222}}
table{{border-collapse:collapse;margin:0.5em 0 1.5em}}th,td{{border:1px solid #ccc;padding:0.2em 0.6em;text-align:left}}
.caution{{background:#fff4e0;border-left:4px solid #e0a000;padding:0.6em}}</style></head>
<body><h1>{name}</h1>
<p>{len(res.points)} points ({mode}), {done} computed, {len(res.failed)} failed; seed {res.seed};
backend {html.escape(str(d.get("backend")))}; popdens {__version__}.</p>
<p class="caution">These are predictions of a model of neurons, from a research tool. They are not a basis for
clinical or safety decisions.</p>
<h2>Swept parameters</h2>{_table(("key", "quantity (unit)", "values"), param_rows)}
<h2>Outputs</h2>{_table(("name", "quantity (unit)", "range over the points"), out_rows)}
<p>Tables: <code>results.csv</code> (one row per point and output value; read with
<code>pandas.read_csv(path, comment="#")</code> or <code>numpy.genfromtxt(path, delimiter=",", names=True,
dtype=None)</code>){", <code>failures.csv</code>" if fails else ""}.</p>
{chr(10).join(sections)}
{"<h2>Failed points</h2>" + _table(("point", "parameters", "error"), fails) if fails else ""}
</body></html>
"""
