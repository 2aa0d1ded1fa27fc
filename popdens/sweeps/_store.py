"""On-disk layout of a sweep: one small file per finished point, a manifest, tidy tables.

Layout of a sweep folder::

    sweep.json          the manifest: points, seed, fingerprint (written before any point runs)
    points/000017.json  one record per finished point (``ok`` or ``failed``), written atomically
    results.csv         tidy table, one row per point and output value (rebuilt at the end)
    failures.csv        failed points with their error (only when some failed)
    figures/            heat maps and families of curves
    summary.json        counts and timings (written last)

Every file is written to a temporary name in the same folder, flushed and
``fsync``-ed, then renamed into place, so a killed process leaves either the
whole file or none of it; stale temporary files are removed on resume.
"""

from __future__ import annotations

import csv
import io
import json
import os
import tempfile
from pathlib import Path

from .._files import csv_with_metadata, remove_stale_temporaries, temp_prefix

__all__: list[str] = []

MANIFEST = "sweep.json"
POINTS = "points"
RESULTS = "results.csv"
FAILURES = "failures.csv"
SUMMARY = "summary.json"
FIGURES = "figures"
#: Version of the folder layout, stored in the manifest.
LAYOUT_VERSION = 1


def durable_write(path: Path, text: str) -> None:
    """Write ``text`` to ``path`` atomically and durably (temp file, fsync, rename, fsync folder)."""
    path = Path(path)
    remove_stale_temporaries(path)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=temp_prefix(path.name), suffix=".part")
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(text.encode("utf-8"))
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    try:  # make the rename itself durable (POSIX); not available everywhere
        dfd = os.open(path.parent, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(dfd)
    except OSError:
        pass
    finally:
        os.close(dfd)


def point_path(folder: Path, index: int) -> Path:
    return Path(folder) / POINTS / f"{index:06d}.json"


def write_manifest(folder: Path, manifest: dict) -> None:
    Path(folder, POINTS).mkdir(parents=True, exist_ok=True)
    durable_write(Path(folder) / MANIFEST, json.dumps(manifest, indent=1, sort_keys=True) + "\n")


def read_manifest(folder: Path) -> dict | None:
    p = Path(folder) / MANIFEST
    if not p.is_file():
        return None
    try:
        return json.loads(p.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise FileExistsError(f"{p} exists but cannot be read as a sweep manifest ({exc})") from None


def write_point(folder: Path, record: dict) -> None:
    durable_write(point_path(folder, record["index"]), json.dumps(record) + "\n")  # keeps output order


def read_points(folder: Path, n_points: int) -> dict[int, dict]:
    """Records on disk, by point index; removes stale temporary files; ignores unreadable ones."""
    out = {}
    pdir = Path(folder) / POINTS
    if not pdir.is_dir():
        return out
    for f in pdir.iterdir():
        if f.name.startswith(".") and f.name.endswith(".part"):
            f.unlink(missing_ok=True)  # left by a killed writer; never renamed, so never valid
            continue
        if f.suffix != ".json" or not f.stem.isdigit():
            continue
        try:
            rec = json.loads(f.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            continue  # cannot happen with atomic writes; recompute the point if it does
        idx = rec.get("index")
        if isinstance(idx, int) and 0 <= idx < n_points and idx == int(f.stem):
            out[idx] = rec
    return out


def _fmt(x) -> str:
    if isinstance(x, float):
        return repr(x)  # shortest text that reads back to the same double
    return str(x)


def tidy_rows(points: list[dict], records: list[dict | None]) -> tuple[list[str], list[list[str]]]:
    """Header and rows of the tidy table: one row per point and output value."""
    keys = list(points[0]) if points else []
    header = ["point", *keys, "output", "x_name", "x", "value"]
    rows = []
    for i, rec in enumerate(records):
        if rec is None or rec["status"] != "ok":
            continue
        base = [str(i), *(_fmt(points[i][k]) for k in keys)]
        for name, val in rec["outputs"].items():
            rows.append([*base, name, "", "", _fmt(val)])
        for name, c in rec["curves"].items():
            for x, y in zip(c["x"], c["y"]):
                rows.append([*base, name, c["x_name"], _fmt(x), _fmt(y)])
    return header, rows


def csv_text(header: list[str], rows: list[list[str]], comment: str | None = None) -> str:
    head = io.StringIO()
    csv.writer(head, lineterminator="").writerow(header)
    buf = io.StringIO()
    csv.writer(buf, lineterminator="\n").writerows(rows)
    return csv_with_metadata(head.getvalue(), [comment] if comment else [], buf.getvalue())


def failure_rows(points: list[dict], records: list[dict | None]):
    keys = list(points[0]) if points else []
    header = ["point", *keys, "attempts", "error"]
    rows = [[str(i), *(_fmt(points[i][k]) for k in keys), str(rec["attempts"]), rec["error"]]
            for i, rec in enumerate(records) if rec is not None and rec["status"] != "ok"]
    return header, rows
