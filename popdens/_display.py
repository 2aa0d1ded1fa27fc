"""Rich display of results in notebooks (``_repr_html_``, ``_repr_markdown_``) and their tables.

Every result type builds its summary as ``(quantity, value with unit)`` rows with
:func:`summary_rows`-style lists and hands them to :func:`html_card` / :func:`markdown_card`, so all
of them look alike.  ``to_dataframe`` methods use :func:`dataframe`, which imports pandas only when
called (an optional extra: ``pip install "popdens[notebook]"``).
"""

from __future__ import annotations

import html
import math
from typing import Iterable, Mapping

import numpy as np

__all__ = ["Displayable", "html_card", "markdown_card", "dataframe", "fmt", "rate_range"]


def fmt(x, unit: str = "", digits: int = 4) -> str:
    """A number (or array summary) with its unit, as people write it: ``16.1 Hz``, ``n/a``."""
    if x is None:
        return "n/a"
    if isinstance(x, (bool, np.bool_)):
        return "yes" if x else "no"
    if isinstance(x, (int, np.integer)):
        return f"{int(x):,}{' ' + unit if unit else ''}".replace(",", " ")
    try:
        f = float(x)
    except (TypeError, ValueError):
        return str(x)
    if not math.isfinite(f):
        return "n/a" if math.isnan(f) else str(f)
    return f"{f:.{digits}g}{' ' + unit if unit else ''}"


def rate_range(rate) -> str:
    """``min to max Hz (mean m Hz)`` of a rate array, NaNs ignored."""
    r = np.asarray(rate, dtype=float)
    r = r[np.isfinite(r)]
    if r.size == 0:
        return "n/a"
    return f"{r.min():.4g} to {r.max():.4g} Hz (mean {r.mean():.4g} Hz)"


def html_card(title: str, rows: Iterable[tuple[str, str]], status: str | None = None) -> str:
    """A small self-contained HTML table: title, one row per quantity, and a status line."""
    body = "".join(f"<tr><th style='text-align:left;padding-right:1em'>{html.escape(str(k))}</th>"
                   f"<td style='text-align:left'>{html.escape(str(v))}</td></tr>" for k, v in rows)
    foot = f"<div style='margin-top:0.3em'>{html.escape(status)}</div>" if status else ""
    return (f"<div class='popdens-result'><strong>{html.escape(title)}</strong>"
            f"<table style='border-collapse:collapse;margin-top:0.3em'>{body}</table>{foot}</div>")


def markdown_card(title: str, rows: Iterable[tuple[str, str]], status: str | None = None) -> str:
    """The same summary as Markdown (for front ends that render Markdown, not HTML)."""
    lines = [f"**{title}**", "", "| quantity | value |", "|---|---|"]
    lines += [f"| {k} | {str(v).replace('|', '/')} |" for k, v in rows]
    if status:
        lines += ["", status]
    return "\n".join(lines)


def dataframe(columns: Mapping[str, Iterable]):
    """A pandas DataFrame of ``columns`` (name -> values); pandas is imported here, on demand."""
    try:
        import pandas as pd
    except ImportError:
        raise ImportError("to_dataframe() needs pandas: pip install 'popdens[notebook]' (or pandas)") from None
    return pd.DataFrame({k: np.asarray(v) for k, v in columns.items()})


class Displayable:
    """Mixin: ``_repr_html_`` and ``_repr_markdown_`` from the class's ``_card()``, which returns
    ``(title, rows, status)`` with every value formatted with its unit."""

    def _card(self):  # pragma: no cover - every subclass defines it
        raise NotImplementedError

    def _repr_html_(self) -> str:
        return html_card(*self._card())

    def _repr_markdown_(self) -> str:
        return markdown_card(*self._card())
