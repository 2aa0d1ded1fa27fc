"""Schema helpers shared by every scenario table: key checks, numbers, object construction, messages.

Every error is a :class:`~popdens.exceptions.ScenarioError` naming the file, the
table and the key, with the offending value (shortened) and what was expected.
"""

from __future__ import annotations

import difflib
import math
import reprlib
from pathlib import Path
from typing import Any

from ..exceptions import ExpressionError, ScenarioError

__all__ = ["SCENARIO_KEYS", "build", "check_keys", "err", "flatten", "model_params", "number", "parse_meta",
           "select"]

SCENARIO_KEYS = {"title", "output", "notes"}


#: Longest folder name of an output (bytes): file systems allow 255, and the hidden temporary folder
#: beside it adds about 30 characters (``.NAME.pPID.xxxxxxxx`` plus ``.old``).
MAX_NAME_BYTES = 200
#: Deepest output folder below the scenario's folder.
MAX_OUTPUT_DEPTH = 16
#: Deepest nesting of tables accepted in a scenario file (real scenarios use 3).
MAX_TABLE_DEPTH = 12


def table_depth(data) -> int:
    """Nesting depth of tables and arrays in ``data`` (iterative: no recursion limit)."""
    depth, stack = 0, [(data, 1)]
    while stack:
        node, d = stack.pop()
        depth = max(depth, d)
        if isinstance(node, dict):
            stack.extend((v, d + 1) for v in node.values() if isinstance(v, (dict, list)))
        elif isinstance(node, list):
            stack.extend((v, d + 1) for v in node if isinstance(v, (dict, list)))
    return depth


def short(text: str) -> str:
    """A key or value shortened for messages (a 5000-part dotted key is not worth 10 kB of output)."""
    if isinstance(text, str):
        return _REPR.repr(text)[1:-1]
    if isinstance(text, dict) and len(text) <= _REPR.maxdict:  # keep the order (reprlib sorts keys)
        return "{" + ", ".join(f"{_REPR.repr(k)}: {_REPR.repr(v)}" for k, v in text.items()) + "}"
    return _REPR.repr(text)


def err(src, table, key, value, expected) -> ScenarioError:
    where = _where(table)
    k = f" key `{key}`" if key else ""
    return ScenarioError(f"{src}: {where}{k} = {_REPR.repr(value)}: expected {expected}")


_REPR = reprlib.Repr()
_REPR.maxstring, _REPR.maxother, _REPR.maxlevel, _REPR.maxlist, _REPR.maxdict = 80, 80, 3, 8, 8


def _where(table: str) -> str:
    return f"[{table}]" if table else "top level"


def check_keys(src, table, data: dict, allowed: set, required: set = frozenset()):
    if not isinstance(data, dict):
        raise err(src, table, None, data, "a table")
    for key in data:
        if key not in allowed:
            near = difflib.get_close_matches(str(key), sorted(allowed), n=1)
            hint = f"; did you mean `{near[0]}`?" if near else f"; valid keys: {sorted(allowed)}"
            shown = key if isinstance(key, str) and key.strip() and key.isprintable() and "`" not in key \
                else _REPR.repr(key)
            raise ScenarioError(f"{src}: {_where(table)} unknown key `{shown}`{hint}")
    for key in sorted(required):
        if key not in data:
            raise ScenarioError(f"{src}: {_where(table)} missing key `{key}`")


def number(src, table, key, value) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise err(src, table, key, value, "a finite number")
    try:
        x = float(value)  # a TOML integer has no size limit: float() may overflow
    except OverflowError:
        x = math.inf
    if not math.isfinite(x):
        raise err(src, table, key, value, "a finite number")
    return x


def build(src, table, cls, params: dict, text_key: str | None = None):
    try:
        return cls(**params)
    except ExpressionError as exc:
        key = f" key `{text_key}`:" if text_key and text_key in params else ""
        raise ScenarioError(f"{src}: [{table}]{key} {exc}") from None
    except (ValueError, TypeError) as exc:
        raise ScenarioError(f"{src}: [{table}] {exc}") from None


def select(src, table, value, selector: str, registry: dict):
    """Copy of a table without its selector key, the selected name and its registry entry."""
    if not isinstance(value, dict):
        raise err(src, table, None, value, "a table")
    items = dict(value)
    name = items.pop(selector, None)
    if not isinstance(name, str) or name not in registry:
        raise err(src, table, selector, name, f"one of {sorted(registry)}")
    return items, name, registry[name]


def model_params(src, table, items: dict, text_key: str) -> dict:
    """Numbers, one expression string (``text_key``) and a ``parameters`` table of named numbers."""
    params = {}
    for k, val in items.items():
        if k == text_key:
            if not isinstance(val, str):
                raise err(src, table, k, val, "an expression string")
            params[k] = val
        elif k == "parameters":
            if not isinstance(val, dict):
                raise err(src, table, k, val, "a table of named numbers")
            params[k] = {str(pk): number(src, f"{table}.parameters", pk, pv) for pk, pv in val.items()}
        else:
            params[k] = number(src, table, k, val)
    return params


def parse_meta(src, data: dict) -> tuple[str, Path]:
    """The ``[scenario]`` table → (title, output folder), the folder checked by :func:`output_folder`."""
    meta = data.get("scenario", {})
    check_keys(src, "scenario", meta, SCENARIO_KEYS)
    title = meta.get("title", Path(src).stem)
    if not isinstance(title, str):
        raise err(src, "scenario", "title", title, "a string")
    out = meta.get("output", f"{Path(src).stem}-output")
    if not isinstance(out, str) or not out.strip():
        raise err(src, "scenario", "output", out, "a folder name")
    return title, output_folder(src, out)


def output_folder(src, out: str) -> Path:
    """The scenario's ``output``: a plain relative folder below the scenario's folder.

    Rule (documented in DEVELOPERS.md, "Guarantees"): not absolute, no ``..``, not the
    scenario's folder itself (``.``), no control characters.  Only ``--out`` on the
    command line (or ``output=`` in :func:`popdens.scenario.run_scenario`) may point
    elsewhere.  Symbolic links that lead outside are refused when the run starts.
    """
    expected = "a relative folder below the scenario's folder (no `..`, not absolute, not `.`)"
    if any(ord(c) < 32 or ord(c) == 127 for c in out):
        raise err(src, "scenario", "output", out, expected + ", without control characters")
    path = Path(out)
    if path.is_absolute() or path.drive or ".." in path.parts or not path.parts or "\\" in out:
        raise err(src, "scenario", "output", out, expected)
    if any(len(part.encode("utf-8")) > MAX_NAME_BYTES for part in path.parts) or len(path.parts) > MAX_OUTPUT_DEPTH:
        raise err(src, "scenario", "output", out, f"{expected}, each name at most {MAX_NAME_BYTES} bytes and "
                                                  f"at most {MAX_OUTPUT_DEPTH} folders deep")
    return path


def flatten(d: Any, prefix=""):
    if isinstance(d, dict):
        for k, v in d.items():
            yield from flatten(v, f"{prefix}.{k}")
    else:
        yield (prefix, repr(d))
