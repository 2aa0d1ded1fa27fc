"""Parameter sweeps: run one analysis at many independent points, in parallel, without losing work.

A sweep is a picklable function of a point, ``func(params, seed) -> outputs``,
evaluated at a grid (every combination of the given values) or a list of
points.  ``params`` is a dict of parameter values, ``seed`` a
:class:`numpy.random.SeedSequence` derived from the sweep seed and the point
index only (``SeedSequence(seed, spawn_key=(index,))``, the same sequence as
``SeedSequence(seed).spawn(n)[index]``), so results do not depend on the
backend or on the order in which points finish.  ``outputs`` maps names to
numbers, or to a :class:`Curve` (values along a coordinate such as frequency).

Backends: ``"serial"`` (this process), ``"processes"`` (default: a local pool
of one process per core, standard library), ``"dask"`` (an existing Dask
scheduler given by address, or a local Dask cluster; optional extra
``popdens[dask]``).

With an output folder every finished point is written at once to its own
small file (atomically, fsync-ed), so an interrupted sweep -- Ctrl-C, a
killed process, a lost worker -- resumes with ``resume=True`` from what is on
disk.  A point whose function raises is retried ``retries`` times, then
recorded as failed with its error; the other points go on.  See
``popdens/_sweep_store.py`` for the folder layout.
"""

from __future__ import annotations

import itertools
import functools
import json
import logging
import math
import numbers
import os
import shutil
import socket
import time
import traceback
import uuid
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

import numpy as np

from .._display import Displayable, dataframe, fmt
from .._version import __version__
from . import _backends as backends
from . import _store as store
from .report import sweep_report
from .. import _validation as v
from ..progress import Progress

__all__ = ["Curve", "SweepResult", "grid_points", "load_sweep", "point_seed", "sweep"]

logger = logging.getLogger(__name__)

BACKENDS = ("serial", "processes", "dask")
#: Default number of extra attempts for a point whose analysis raises.
DEFAULT_RETRIES = 1
#: Largest accepted number of points (a guard against a mistyped grid).
MAX_POINTS = 10_000_000


@dataclass(frozen=True)
class Curve:
    """Output values along a coordinate, e.g. a transfer function along frequency.

    Parameters
    ----------
    x_name : str
        Name of the coordinate with its unit, e.g. ``"frequency_hz"``.
    x, y : array_like, shape (n,)
        Coordinate values and output values (real numbers).
    """

    x_name: str
    x: Any
    y: Any

    def __post_init__(self):
        x = np.asarray(self.x, dtype=float).ravel()
        y = np.asarray(self.y, dtype=float).ravel()
        if x.shape != y.shape:
            raise ValueError(f"`Curve` x and y differ in length ({x.size} and {y.size})")
        object.__setattr__(self, "x", x)
        object.__setattr__(self, "y", y)


def point_seed(seed: int, index: int) -> np.random.SeedSequence:
    """The seed sequence of point ``index`` of a sweep with seed ``seed``.

    Equal to ``SeedSequence(seed).spawn(n)[index]`` for any ``n > index``.
    """
    return np.random.SeedSequence(int(seed), spawn_key=(int(index),))


# ------------------------------------------------------------------ points
def _scalar(name: str, x):
    if isinstance(x, (bool, np.bool_)):
        return bool(x)
    if isinstance(x, (numbers.Integral, np.integer)):
        return int(x)
    if isinstance(x, (numbers.Real, np.floating)):
        xf = float(x)
        if not math.isfinite(xf):
            raise ValueError(f"sweep value of `{name}` must be finite, got {x!r}")
        return xf
    if isinstance(x, str):
        return x
    raise ValueError(f"sweep values of `{name}` must be numbers or strings, got {x!r}")


def grid_points(axes: Mapping[str, Sequence]) -> list[dict]:
    """Every combination of the values in ``axes`` (the last key varies fastest)."""
    if not isinstance(axes, Mapping) or not axes:
        raise ValueError(f"`axes` must be a non-empty mapping of name -> values, got {axes!r}")
    clean = {}
    for k, vals in axes.items():
        if not isinstance(k, str) or not k:
            raise ValueError(f"sweep parameter names must be non-empty strings, got {k!r}")
        if isinstance(vals, (str, bytes)) or not isinstance(vals, (Sequence, np.ndarray)) or len(vals) == 0:
            raise ValueError(f"sweep values of `{k}` must be a non-empty list, got {vals!r}")
        clean[k] = [_scalar(k, x) for x in vals]
    n = math.prod(len(vs) for vs in clean.values())
    if n > MAX_POINTS:
        raise ValueError(f"the grid has {n} points; at most {MAX_POINTS} are accepted")
    keys = list(clean)
    return [dict(zip(keys, combo)) for combo in itertools.product(*clean.values())]


def _list_points(points) -> list[dict]:
    if isinstance(points, (str, bytes)) or not isinstance(points, Sequence) or len(points) == 0:
        raise ValueError(f"`points` must be a mapping of axes or a non-empty list of dicts, got {points!r}")
    out = []
    keys = None
    for i, p in enumerate(points):
        if not isinstance(p, Mapping):
            raise ValueError(f"point {i} must be a dict of parameter values, got {p!r}")
        if keys is None:
            keys = list(p)
        elif set(p) != set(keys):
            raise ValueError(f"point {i} has parameters {sorted(p)}; point 0 has {sorted(keys)}")
        out.append({str(k): _scalar(str(k), p[k]) for k in keys})
    if len(out) > MAX_POINTS:
        raise ValueError(f"{len(out)} points; at most {MAX_POINTS} are accepted")
    return out


# ------------------------------------------------------------------ one point
def _normalise_outputs(out) -> tuple[dict, dict]:
    if not isinstance(out, Mapping):
        raise TypeError(f"a sweep function must return a dict of outputs, got {type(out).__name__}")
    scalars, curves = {}, {}
    for name, val in out.items():
        if not isinstance(name, str) or not name:
            raise TypeError(f"output names must be non-empty strings, got {name!r}")
        if isinstance(val, Curve):
            curves[name] = {"x_name": val.x_name, "x": val.x.tolist(), "y": val.y.tolist()}
        elif isinstance(val, (bool, np.bool_)) or not isinstance(val, (numbers.Real, np.floating, np.integer)):
            raise TypeError(f"output `{name}` must be a real number or a Curve, got {val!r}")
        else:
            scalars[name] = float(val)
    return scalars, curves


def evaluate_point(func: Callable, index: int, params: dict, entropy: int, retries: int) -> dict:
    """Run ``func`` at one point (in a worker), retrying on exceptions; returns the point's record."""
    seed = point_seed(entropy, index)
    attempts = 0
    t0 = time.perf_counter()
    error = ""
    while attempts <= retries:
        attempts += 1
        try:
            scalars, curves = _normalise_outputs(func(dict(params), seed))
        except Exception as exc:
            error = "".join(traceback.format_exception_only(exc)).strip()
            continue
        return {"index": index, "params": params, "status": "ok", "outputs": scalars, "curves": curves,
                "attempts": attempts, "error": "", "wall_time_s": time.perf_counter() - t0,
                "worker": f"{socket.gethostname()}:{os.getpid()}"}
    return {"index": index, "params": params, "status": "failed", "outputs": {}, "curves": {},
            "attempts": attempts, "error": error, "wall_time_s": time.perf_counter() - t0,
            "worker": f"{socket.gethostname()}:{os.getpid()}"}


@functools.lru_cache(maxsize=8)
def _loaded(payload: bytes) -> Callable:
    import cloudpickle

    return cloudpickle.loads(payload)


def evaluate_serialised(payload: bytes, index: int, params: dict, entropy: int, retries: int) -> dict:
    """:func:`evaluate_point` for a function sent by value (cloudpickle), in a worker process.

    A function defined in a notebook or a script's ``__main__`` cannot be imported by a worker, so
    it travels as bytes; if even that fails (a module the worker lacks), the point's record says so
    instead of the worker dying with the cause lost on its stderr."""
    try:
        func = _loaded(payload)
    except Exception as exc:
        why = "".join(traceback.format_exception_only(exc)).strip()
        return {"index": index, "params": params, "status": "failed", "outputs": {}, "curves": {},
                "attempts": 1, "error": f"the sweep function could not be loaded in the worker: {why}",
                "wall_time_s": 0.0, "worker": f"{socket.gethostname()}:{os.getpid()}"}
    return evaluate_point(func, index, params, entropy, retries)


def _serialised(func) -> bytes:
    """``func`` as bytes for worker processes (by value where it is not importable, e.g. a notebook)."""
    import cloudpickle

    try:
        return cloudpickle.dumps(func)
    except Exception as exc:
        raise ValueError(f"`func` {func!r} cannot be sent to worker processes ({exc}); "
                         "use backend='serial' or make it picklable") from None


def _fingerprint(func) -> str:
    fp = getattr(func, "fingerprint", None)
    if callable(fp):
        return str(fp())
    target = func if hasattr(func, "__qualname__") else type(func)
    return f"{getattr(target, '__module__', '?')}.{getattr(target, '__qualname__', repr(target))}"


# ------------------------------------------------------------------ result
@dataclass(frozen=True, eq=False)
class SweepResult(Displayable):
    """Outcome of a sweep: the points and one record per point (``None`` where not computed).

    Attributes
    ----------
    points : list of dict
        Parameter values of each point, in sweep order.
    records : list of dict or None
        ``status`` (``"ok"``/``"failed"``), ``outputs`` (name -> number),
        ``curves`` (name -> ``x_name``, ``x``, ``y``), ``attempts``, ``error``,
        ``wall_time_s``, ``worker``.
    axes : dict or None
        Grid axes (name -> values), or None for a list of points.
    output : Path or None
        The sweep folder.
    seed : int
    diagnostics : dict
        Backend, workers, wall time (s), points computed in this call.
    """

    points: list
    records: list
    axes: dict | None
    output: Path | None
    seed: int
    diagnostics: dict = field(default_factory=dict)

    @property
    def shape(self) -> tuple:
        """Grid shape (one entry per axis), or ``(n_points,)`` for a list."""
        if self.axes is not None:
            return tuple(len(vs) for vs in self.axes.values())
        return (len(self.points),)

    @property
    def complete(self) -> bool:
        return all(r is not None for r in self.records)

    @property
    def failed(self) -> list[tuple[int, dict, str]]:
        """``(index, params, error)`` of every failed point."""
        return [(i, self.points[i], r["error"]) for i, r in enumerate(self.records)
                if r is not None and r["status"] != "ok"]

    def output_names(self) -> tuple[list[str], list[str]]:
        """Names of scalar outputs and of curve outputs, in first-seen order."""
        sc, cu = {}, {}
        for r in self.records:
            if r is not None:
                sc.update(dict.fromkeys(r["outputs"]))
                cu.update(dict.fromkeys(r["curves"]))
        return list(sc), list(cu)

    def values(self, name: str) -> np.ndarray:
        """Scalar output ``name`` at every point, shaped like the grid (NaN where missing or failed)."""
        if name not in self.output_names()[0]:
            raise ValueError(f"no scalar output `{name}`; available: {self.output_names()[0]}")
        out = np.full(len(self.points), np.nan)
        for i, r in enumerate(self.records):
            if r is not None and name in r["outputs"]:
                out[i] = r["outputs"][name]
        return out.reshape(self.shape)

    def curves(self, name: str) -> tuple[np.ndarray, np.ndarray]:
        """Curve output ``name``: the coordinate ``x`` and ``y`` of shape ``(n_points, len(x))``
        (rows of NaN where missing or failed)."""
        if name not in self.output_names()[1]:
            raise ValueError(f"no curve output `{name}`; available: {self.output_names()[1]}")
        x = None
        for r in self.records:
            if r is not None and name in r["curves"]:
                x = np.asarray(r["curves"][name]["x"], dtype=float)
                break
        y = np.full((len(self.points), x.size), np.nan)
        for i, r in enumerate(self.records):
            if r is not None and name in r["curves"]:
                yi = np.asarray(r["curves"][name]["y"], dtype=float)
                if yi.size == x.size:
                    y[i] = yi
        return x, y

    def table_csv(self) -> str:
        """The tidy table as CSV text (one row per point and output value)."""
        header, rows = store.tidy_rows(self.points, self.records)
        return store.csv_text(header, rows)

    def _card(self):
        done = sum(r is not None for r in self.records)
        rows = [("points", f"{len(self.points)} ({done} done, {len(self.failed)} failed)")]
        if self.axes is not None:
            for name, vals in self.axes.items():
                rows.append((f"swept: {name}", ", ".join(f"{x:g}" if isinstance(x, (int, float)) else str(x)
                                                        for x in list(vals)[:8]) + (" ..." if len(vals) > 8 else "")))
        sc, cu = self.output_names()
        for name in sc:
            vals = self.values(name)
            rows.append((f"output: {name}", f"{np.nanmin(vals):.4g} to {np.nanmax(vals):.4g}"
                         if np.any(np.isfinite(vals)) else "n/a"))
        for name in cu:
            rows.append((f"curve output: {name}", "one curve per point"))
        for i, params, err in self.failed[:3]:
            rows.append((f"point {i} failed", f"{params}: {err}"))
        d = self.diagnostics
        status = (f"{d.get('backend', '?')} backend, {d.get('workers', '?')} worker(s), "
                  f"{fmt(d.get('wall_time_s'), 's', 3)}; folder {self.output}")
        return "SweepResult", rows, status

    def to_dataframe(self):
        """The tidy table (as ``results.csv``: one row per point and output value) as a pandas DataFrame."""
        header, rows = store.tidy_rows(self.points, self.records)
        return dataframe({h: [r[j] for r in rows] for j, h in enumerate(header)})

    def __repr__(self) -> str:
        done = sum(r is not None for r in self.records)
        return (f"<SweepResult {len(self.points)} points ({done} done, {len(self.failed)} failed), "
                f"shape {self.shape}, output {self.output}>")


# ------------------------------------------------------------------ progress
class _SweepProgress(Progress):
    """Progress line for sweeps: points done, points per second, time left, failures."""

    def __init__(self, total: int, already: int, enabled, stream=None):
        super().__init__(total, "sweep", enabled, stream)
        self.already = already

    def update(self, done: int, failed: int = 0) -> None:  # type: ignore[override]
        if not self.enabled:
            return
        now = time.perf_counter()
        elapsed = now - self.start
        if (self._auto and elapsed < 1.0) or (now - self._last < 0.25 and done < self.total):
            return
        self._last = now
        new = done - self.already
        rate = new / elapsed if elapsed > 0 else float("nan")
        left = (self.total - done) / rate if rate > 0 else float("nan")
        fail = f", {failed} failed" if failed else ""
        self.stream.write(f"\r{self.label}: {done}/{self.total} points{fail}, {rate:.3g} points/s, "
                          f"{elapsed:.0f} s, ~{left:.0f} s left   ")
        self.stream.flush()
        self._shown = True


# ------------------------------------------------------------------ driver
def _default_workers() -> int:
    try:
        return max(len(os.sched_getaffinity(0)), 1)
    except AttributeError:  # pragma: no cover - not Linux
        return max(os.cpu_count() or 1, 1)


def _prepare_folder(out: Path, manifest: dict, resume: bool, overwrite: bool) -> dict[int, dict]:
    """Create or reopen the sweep folder; returns the records already on disk."""
    if out.exists() and not out.is_dir():
        raise FileExistsError(f"output {out} exists and is not a folder")
    if out.exists() and overwrite:
        shutil.rmtree(out)
    if out.exists() and any(out.iterdir()):
        old = store.read_manifest(out)
        if not resume:
            done = f" ({len(store.read_points(out, len(old['points'])))} of {len(old['points'])} points done)" \
                if old else ""
            raise FileExistsError(f"output folder {out} exists{done}; resume it or overwrite it")
        if old is None:
            raise FileExistsError(f"output folder {out} exists but holds no sweep ({store.MANIFEST} missing)")
        for key in ("fingerprint", "points", "seed", "axes"):
            if old.get(key) != manifest.get(key):
                raise FileExistsError(f"output folder {out} holds a different sweep (its `{key}` differs); "
                                      "choose another folder or overwrite it")
        return store.read_points(out, len(manifest["points"]))
    out.mkdir(parents=True, exist_ok=True)
    store.write_manifest(out, manifest)
    return {}


def sweep(func: Callable, points, output: str | Path | None = None, *, seed: int = 0,
          backend: str | None = None, workers: int | None = None, scheduler: str | None = None,
          retries: int = DEFAULT_RETRIES, resume: bool = False, overwrite: bool = False,
          retry_failed: bool = False, figures: bool = True, progress: bool | None = None,
          title: str | None = None, no_worker_timeout: float | None = None) -> SweepResult:
    """Evaluate ``func`` at every point, in parallel, writing each finished point to ``output``.

    Parameters
    ----------
    func : callable
        ``func(params: dict, seed: numpy.random.SeedSequence) -> dict`` of
        outputs (numbers, or :class:`Curve`); must be picklable for the
        parallel backends (a module-level function or an object whose class
        is importable).  An object may define ``fingerprint()`` (a string)
        that identifies it when a sweep is resumed; otherwise its qualified
        name does.
    points : mapping or list of dict
        A mapping ``name -> list of values`` is a grid (every combination,
        the last name varying fastest); a list of dicts is a list of points.
    output : str or Path, optional
        Sweep folder: one file per finished point, then ``results.csv``
        (tidy: one row per point and output value), ``failures.csv``,
        ``figures/`` and ``summary.json``.  Without it results stay in memory.
    seed : int
        Sweep seed; point ``i`` gets ``point_seed(seed, i)``.
    backend : {"serial", "processes", "dask"}, optional
        Default: ``"dask"`` when ``scheduler`` is given, ``"serial"`` when
        ``workers == 1``, otherwise ``"processes"``.
    workers : int, optional
        Local worker processes (default: every core this process may use).
        With ``backend="dask"`` and no scheduler, the size of the local Dask
        cluster started for this sweep.
    scheduler : str, optional
        Address of a running Dask scheduler, e.g. ``"tcp://10.0.0.5:8786"``.
    retries : int
        Extra attempts for a point whose function raises (or whose worker
        dies) before it is recorded as failed.
    resume : bool
        Continue the sweep in ``output``: points on disk are not recomputed.
        The folder must hold the same sweep (function fingerprint, points, seed).
    overwrite : bool
        Delete an existing ``output`` folder first.
    retry_failed : bool
        With ``resume``, compute points recorded as failed again.
    figures : bool
        Draw heat maps and families of curves into ``output/figures``.
    progress : bool, optional
        Progress line on stderr (default: on a terminal or in a notebook).
    title : str, optional
        Title of the HTML report (``report.html`` in ``output``).
    no_worker_timeout : float, optional
        Dask: seconds without any connected worker after which the sweep gives up with a
        ``ConnectionError`` (finished points are kept); default 120.

    Returns
    -------
    SweepResult
        The table of results, one record per point and output.

    Raises
    ------
    ValueError
        Bad points, backend or counts.
    FileExistsError
        ``output`` exists and neither ``resume`` nor ``overwrite`` is given,
        or it holds a different sweep.
    KeyboardInterrupt
        After stopping the workers; finished points are on disk.

    Examples
    --------
    >>> def square(p, seed):
    ...     return {"y": p["x"] ** 2}
    >>> res = sweep(square, {"x": [1.0, 2.0, 3.0]}, backend="serial")
    >>> res.values("y").tolist()
    [1.0, 4.0, 9.0]
    """
    if not callable(func):
        raise ValueError(f"`func` must be callable, got {func!r}")
    if isinstance(points, Mapping):
        axes = {k: [_scalar(k, x) for x in vs] for k, vs in points.items()} if points else None
        pts = grid_points(points)
    else:
        axes = None
        pts = _list_points(points)
    if isinstance(seed, bool) or not isinstance(seed, (numbers.Integral, np.integer)) or seed < 0:
        raise ValueError(f"`seed` must be a non-negative integer, got {seed!r}")
    seed = int(seed)
    if isinstance(retries, bool) or not isinstance(retries, (numbers.Integral, np.integer)) or retries < 0:
        raise ValueError(f"`retries` must be a non-negative integer, got {retries!r}")
    retries = int(retries)
    if workers is not None:
        workers = v.positive_int("workers", workers)
    if backend is None:
        backend = "dask" if scheduler is not None else ("serial" if workers == 1 else "processes")
    if backend not in BACKENDS:
        raise ValueError(f"`backend` must be one of {list(BACKENDS)}, got {backend!r}")
    if scheduler is not None and backend != "dask":
        raise ValueError(f"`scheduler` is given, so `backend` must be 'dask', got {backend!r}")
    if scheduler is not None and (not isinstance(scheduler, str) or not scheduler.strip()):
        raise ValueError(f"`scheduler` must be an address such as 'tcp://host:8786', got {scheduler!r}")
    if backend == "dask" and not backends.dask_available():
        raise ImportError("the Dask backend needs the optional extra: pip install 'popdens[dask]'")
    n_workers = workers or _default_workers()

    payload = None if backend == "serial" else _serialised(func)  # before anything is created
    # a Dask scheduler is reached before the output folder is made: a wrong address leaves nothing
    connection = backends.dask_connect(n_workers, scheduler) if backend == "dask" else None
    manifest = {"layout": store.LAYOUT_VERSION, "version": __version__, "fingerprint": _fingerprint(func),
                "points": pts, "axes": axes, "seed": seed}
    out = Path(output) if output is not None else None
    on_disk: dict[int, dict] = {}
    if out is not None:
        try:
            on_disk = _prepare_folder(out, manifest, resume, overwrite)
        except BaseException:
            if connection is not None:
                connection[0].close()
                if connection[1] is not None:
                    connection[1].close()
            raise
    if retry_failed:
        on_disk = {i: r for i, r in on_disk.items() if r["status"] == "ok"}
    records: list[dict | None] = [on_disk.get(i) for i in range(len(pts))]
    tasks = [(i, pts[i], seed) for i in range(len(pts)) if records[i] is None]

    if backend == "serial":
        gen = backends.run_serial(evaluate_point, func, tasks, retries)
    elif backend == "processes":
        gen = backends.run_processes(evaluate_serialised, payload, tasks, retries,
                                     min(n_workers, max(len(tasks), 1)))
    else:
        gen = backends.run_dask(evaluate_serialised, payload, tasks, retries, n_workers, scheduler,
                                uuid.uuid4().hex[:12], connection,
                                backends.NO_WORKER_TIMEOUT if no_worker_timeout is None else no_worker_timeout)
    done = len(pts) - len(tasks)
    n_failed = sum(r is not None and r["status"] != "ok" for r in records)
    bar = _SweepProgress(len(pts), done, progress)
    wall0 = time.perf_counter()
    try:
        if tasks:
            for rec in gen:
                if out is not None:
                    store.write_point(out, rec)
                records[rec["index"]] = rec
                done += 1
                n_failed += rec["status"] != "ok"
                if rec["status"] != "ok":
                    logger.warning("sweep point %d %s failed after %d attempt(s): %s", rec["index"],
                                   rec["params"], rec["attempts"], rec["error"])
                bar.update(done, n_failed)
    except KeyboardInterrupt:
        gen.close()
        logger.warning("sweep interrupted: %d of %d points saved%s", done, len(pts),
                       f" in {out}" if out is not None else "")
        raise
    finally:
        gen.close()
        bar.close()
    diagnostics = {"backend": backend, "workers": 1 if backend == "serial" else n_workers,
                   "scheduler": scheduler, "computed_now": len(tasks), "wall_time_s": time.perf_counter() - wall0,
                   "version": __version__}
    res = SweepResult(points=pts, records=records, axes=axes, output=out, seed=seed, diagnostics=diagnostics)
    if out is not None:
        _write_tables(res, out, figures, title)
    return res


#: The sweep's HTML report, beside results.csv.
REPORT = "report.html"


def _write_tables(res: SweepResult, out: Path, figures: bool, title: str | None = None) -> None:
    header, rows = store.tidy_rows(res.points, res.records)
    store.durable_write(out / store.RESULTS, store.csv_text(
        header, rows, "popdens sweep; one row per point and output; units are part of each output name"))
    fpath = out / store.FAILURES
    fh, frows = store.failure_rows(res.points, res.records)
    if frows:
        store.durable_write(fpath, store.csv_text(fh, frows))
    elif fpath.exists():
        fpath.unlink()
    shown = _figures(res, out / store.FIGURES) if figures else []
    summary = {"n_points": len(res.points), "n_ok": sum(r is not None and r["status"] == "ok" for r in res.records),
               "n_failed": len(res.failed), "shape": list(res.shape), "seed": res.seed,
               "outputs": res.output_names()[0], "curves": res.output_names()[1], **res.diagnostics}
    store.durable_write(out / store.SUMMARY, json.dumps(summary, indent=2, sort_keys=True) + "\n")
    store.durable_write(out / REPORT, sweep_report(res, out, shown, title))


def _figures(res: SweepResult, folder: Path) -> list[tuple[str, str]]:
    """A heat map per scalar output on 2-D grids, lines on 1-D grids, a family per curve output
    (coloured by the first swept parameter, styled by the second); returns (file, caption) pairs."""
    from ..plotting import axis_label, plot_sweep_curves, plot_sweep_line, plot_sweep_map, save_figure

    folder.mkdir(parents=True, exist_ok=True)
    scalars, curves = res.output_names()
    figs = []
    names = list(res.axes) if res.axes is not None else list(res.points[0]) if res.points else []
    numeric = {k: all(isinstance(p[k], (int, float)) and not isinstance(p[k], bool) for p in res.points)
               for k in names}
    varying = [k for k in names if len({repr(p[k]) for p in res.points}) > 1]
    for name in scalars:
        vals = res.values(name)
        if res.axes is not None and len(names) == 2 and all(numeric.values()):
            fig = plot_sweep_map(res.axes[names[0]], res.axes[names[1]], vals, names[0], names[1], name)
            caption = f"{axis_label(name)} over {axis_label(names[0])} and {axis_label(names[1])}"
        elif res.axes is not None and len(names) == 1 and numeric[names[0]]:
            fig = plot_sweep_line(res.axes[names[0]], vals, names[0], name)
            caption = f"{axis_label(name)} against {axis_label(names[0])}"
        else:
            fig = plot_sweep_line(np.arange(len(res.points)), vals.ravel(), "point", name)
            caption = f"{axis_label(name)} at each point (parameters in results.csv)"
        figs.append((name, fig, caption))
    colour = next((k for k in varying if numeric[k]), None)
    style = next((k for k in varying if k != colour and len({repr(p[k]) for p in res.points}) <= 4), None)
    for name in curves:
        x, y = res.curves(name)
        x_name = next(r["curves"][name]["x_name"] for r in res.records if r is not None and name in r["curves"])
        labels = [", ".join(f"{k}={p[k]:g}" if isinstance(p[k], float) else f"{k}={p[k]}" for k in p)
                  for p in res.points]
        fig = plot_sweep_curves(x, y, x_name, name, labels,
                                colour_by=(colour, [p[colour] for p in res.points]) if colour else None,
                                style_by=(style, [p[style] for p in res.points]) if style and colour else None)
        figs.append((name, fig, f"{axis_label(name)} against {axis_label(x_name)}, one curve per point"
                     + (f", coloured by {axis_label(colour)}" if colour else "")))
    out = []
    for name, fig, caption in figs:
        safe = "".join(ch if ch.isalnum() or ch in "-_." else "_" for ch in name)
        save_figure(fig, folder, safe)  # no dates, fixed SVG ids: reruns give the same bytes
        out.append((f"{safe}.png", caption))
    return out


def load_sweep(folder: str | Path) -> SweepResult:
    """Read a sweep folder (complete or interrupted) written by :func:`sweep`."""
    folder = Path(folder)
    man = store.read_manifest(folder)
    if man is None:
        raise ValueError(f"`folder` {folder} holds no sweep ({store.MANIFEST} missing)")
    pts = man["points"]
    recs = store.read_points(folder, len(pts))
    return SweepResult(points=pts, records=[recs.get(i) for i in range(len(pts))], axes=man["axes"],
                       output=folder, seed=man["seed"], diagnostics={"backend": None})
