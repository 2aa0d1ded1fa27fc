"""Recorded data for fitting: spike trains (ms), stimuli (mV) and measured gain curves.

Spike trains come as arrays (one per trial or per neuron) or from files:

* a Neurodata Without Borders file (``.nwb``; needs the optional ``pynwb``,
  ``pip install "popdens[nwb]"``): the spike times of the ``units`` table
  (seconds in NWB, converted to ms), and optionally a stimulus time series
  from the file's acquisition;
* a two-column CSV file: trial (or unit) id, spike time (ms unless ``unit``
  says otherwise); a header line and ``#`` comments are allowed;
* a ``.npz`` file with arrays ``trial`` (ids) and ``time``, or one array per
  trial named ``trial_0``, ``trial_1``...

Every spike train is checked: finite, non-negative, sorted, within the
recording, and the unit plausible (a file in seconds read as ms shows
intervals far below the refractory period of any neuron: caught, with
``unit="s"`` as the fix).
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .. import _validation as v
from ..model.drive import Drive, Trace

__all__ = ["SpikeTrains", "GainCurve", "load_spike_trains", "load_gain_curve", "load_stimulus"]

#: Multipliers from a time unit to ms.
TIME_UNITS = {"ms": 1.0, "s": 1000.0}
#: Median inter-spike interval (ms) below which data given in ms are suspected to be seconds:
#: a median ISI of 50 ms in seconds reads as 0.05 "ms", 40x below any refractory period.
SUSPICIOUS_MEDIAN_ISI_MS = 0.5
#: Largest file read (bytes): the loaders refuse bigger files instead of filling the memory.
MAX_FILE_BYTES = 2 * 1024 ** 3


@dataclass(frozen=True, eq=False)
class SpikeTrains:
    """Spike times of repeated trials (or of several neurons) recorded over the same span.

    Parameters
    ----------
    trains : sequence of array_like
        Spike times (ms) per trial, measured from the start of the trial
        (stimulus onset at the stimulus' own time 0).
    duration : float, optional
        Length of every trial (ms); default: the last spike rounded up to a
        whole ms.  Spikes must lie in ``[0, duration)``.
    unit : {"ms", "s"}
        Unit of the given times (converted to ms).
    ids : sequence, optional
        Trial or unit labels (default 0, 1, ...).

    Raises
    ------
    ValueError
        For empty data, non-finite, negative or unsorted times, spikes beyond
        ``duration``, or times that look like seconds given as ms.
    """

    trains: tuple
    duration: float
    ids: tuple

    def __init__(self, trains, duration=None, unit="ms", ids=None):
        if unit not in TIME_UNITS:
            raise ValueError(f"`unit` must be one of {sorted(TIME_UNITS)}, got {unit!r}")
        if isinstance(trains, np.ndarray) and trains.dtype != object and trains.ndim == 1:
            trains = [trains]
        out = []
        for i, tr in enumerate(trains):
            arr = np.asarray(tr, dtype=float).ravel() * TIME_UNITS[unit]
            if not np.all(np.isfinite(arr)):
                raise ValueError(f"`trains[{i}]` holds non-finite spike times")
            if np.any(arr < 0.0):
                raise ValueError(f"`trains[{i}]` holds negative spike times (first {arr[arr < 0][0]!r} ms); "
                                 "times are measured from the start of each trial")
            if np.any(np.diff(arr) < 0.0):
                raise ValueError(f"`trains[{i}]` is not sorted in time")
            arr.setflags(write=False)
            out.append(arr)
        if not out:
            raise ValueError("`trains` is empty: give at least one spike train")
        n_spikes = sum(a.size for a in out)
        if n_spikes == 0:
            raise ValueError("`trains` holds no spikes")
        last = max(float(a[-1]) for a in out if a.size)
        if duration is None:
            duration = math.floor(last) + 1.0
        else:
            duration = v.positive("duration", duration) * TIME_UNITS[unit]
            if last >= duration:
                raise ValueError(f"a spike at {last!r} ms lies beyond `duration` = {duration!r} ms")
        isis = np.concatenate([np.diff(a) for a in out])
        if unit == "ms" and isis.size and np.median(isis) < SUSPICIOUS_MEDIAN_ISI_MS:
            raise ValueError(
                f"the median inter-spike interval is {np.median(isis):.3g} ms, below any refractory period: "
                "the times look like seconds; pass `unit='s'`")
        ids = tuple(range(len(out))) if ids is None else tuple(ids)
        if len(ids) != len(out):
            raise ValueError(f"`ids` has {len(ids)} labels for {len(out)} trains")
        object.__setattr__(self, "trains", tuple(out))
        object.__setattr__(self, "duration", float(duration))
        object.__setattr__(self, "ids", ids)

    @property
    def n_trials(self) -> int:
        return len(self.trains)

    @property
    def n_spikes(self) -> int:
        return int(sum(a.size for a in self.trains))

    def isis(self) -> np.ndarray:
        """All inter-spike intervals (ms) within trials, in order."""
        return np.concatenate([np.diff(a) for a in self.trains])

    def psth(self, bin_width: float) -> tuple[np.ndarray, np.ndarray]:
        """Trial-averaged rate: bin edges (ms) and rate (Hz) per bin."""
        bin_width = v.positive("bin_width", bin_width)
        n = max(1, int(round(self.duration / bin_width)))
        edges = np.linspace(0.0, n * bin_width, n + 1)
        counts = np.histogram(np.concatenate(self.trains), bins=edges)[0]
        return edges, counts / (self.n_trials * bin_width * 1e-3)

    def __repr__(self) -> str:
        return f"<SpikeTrains: {self.n_trials} trains, {self.n_spikes} spikes over {self.duration:g} ms>"


@dataclass(frozen=True, eq=False)
class GainCurve:
    """A measured gain (f-I) curve: drive (mV), rate (Hz) and its standard error (Hz) per point.

    Raises ``ValueError`` for mismatched lengths, non-finite values, negative
    rates or non-positive standard errors.
    """

    drive: np.ndarray
    rate: np.ndarray
    se: np.ndarray

    def __init__(self, drive, rate, se):
        d = v.finite_array("drive", drive).ravel()
        r = v.finite_array("rate", rate).ravel()
        s = v.finite_array("se", se).ravel()
        if not (d.size == r.size == s.size) or d.size == 0:
            raise ValueError(f"`drive`, `rate` and `se` must have the same non-zero length, got "
                             f"{d.size}, {r.size}, {s.size}")
        if np.any(r < 0.0):
            raise ValueError("`rate` must be >= 0 (Hz)")
        if np.any(s <= 0.0):
            raise ValueError("`se` must be > 0 (Hz): every point needs its standard error")
        for a in (d, r, s):
            a.setflags(write=False)
        object.__setattr__(self, "drive", d)
        object.__setattr__(self, "rate", r)
        object.__setattr__(self, "se", s)


def _check_file(path) -> Path:
    path = Path(path)
    if not path.is_file():
        raise ValueError(f"`path` {str(path)!r} is not a file")
    if path.stat().st_size > MAX_FILE_BYTES:
        raise ValueError(f"`path` {str(path)!r} is larger than {MAX_FILE_BYTES} bytes")
    return path


def _numeric_rows(path: Path, n_cols: int, what: str) -> np.ndarray:
    rows = []
    with path.open(newline="", encoding="utf-8") as fh:
        for i, row in enumerate(csv.reader(fh)):
            if not row or row[0].lstrip().startswith("#"):
                continue
            if len(row) < n_cols:
                raise ValueError(f"{path}:{i + 1}: expected {n_cols} columns ({what}), got {row!r}")
            try:
                rows.append([float(x) for x in row[:n_cols]])
            except ValueError:
                if rows:
                    raise ValueError(f"{path}:{i + 1}: not numbers: {row!r}") from None
                continue  # header line
    if not rows:
        raise ValueError(f"{path}: no data rows")
    return np.asarray(rows)


def _nwb_units(path: Path, unit_ids=None):
    try:
        import pynwb  # noqa: PLC0415 - optional extra
    except ImportError:
        raise ImportError('reading NWB files needs pynwb: pip install "popdens[nwb]"') from None
    with pynwb.NWBHDF5IO(str(path), "r") as io:
        nwb = io.read()
        if nwb.units is None or len(nwb.units) == 0:
            raise ValueError(f"{path}: the NWB file has no units table")
        ids = list(nwb.units.id[:])
        trains = [np.asarray(nwb.units.get_unit_spike_times(k), dtype=float) for k in range(len(ids))]
    if unit_ids is not None:
        keep = [ids.index(u) for u in unit_ids if u in ids]
        if len(keep) != len(unit_ids):
            raise ValueError(f"`unit_ids`: {sorted(set(unit_ids) - set(ids))} not in the units table {ids}")
        trains, ids = [trains[k] for k in keep], [ids[k] for k in keep]
    return trains, ids


def load_spike_trains(path, *, unit=None, duration=None, unit_ids=None) -> SpikeTrains:
    """Read spike trains from an NWB, CSV or npz file.

    Parameters
    ----------
    path : str or Path
        ``.nwb`` (units table; spike times in seconds by the NWB standard),
        ``.csv`` (columns: trial or unit id, spike time) or ``.npz``
        (arrays ``trial`` and ``time``, or ``trial_0``, ``trial_1``...).
    unit : {"ms", "s"}, optional
        Unit of the times in the file; default ``"s"`` for NWB, ``"ms"``
        otherwise.  Times that look like seconds read as ms are refused.
    duration : float, optional
        Trial length, in ``unit``; default: the last spike rounded up to 1 ms.
    unit_ids : sequence, optional
        NWB only: the ids of the units to read (default all).

    Returns
    -------
    SpikeTrains
        One train per trial or unit, times in ms, with their ids and the recording duration (ms).
    """
    path = _check_file(path)
    suffix = path.suffix.lower()
    if suffix == ".nwb":
        trains, ids = _nwb_units(path, unit_ids)
        return SpikeTrains(trains, duration=duration, unit=unit or "s", ids=ids)
    if unit_ids is not None:
        v.warn_ignored("unit_ids", "only NWB files have a units table")
    if suffix == ".csv":
        rows = _numeric_rows(path, 2, "trial id, spike time")
        labels = np.unique(rows[:, 0])
        trains = [rows[rows[:, 0] == lab, 1] for lab in labels]
        return SpikeTrains(trains, duration=duration, unit=unit or "ms",
                           ids=[int(x) if float(x).is_integer() else float(x) for x in labels])
    if suffix == ".npz":
        with np.load(path, allow_pickle=False) as z:
            if "trial" in z.files and "time" in z.files:
                ids_arr, times = np.asarray(z["trial"]).ravel(), np.asarray(z["time"], dtype=float).ravel()
                if ids_arr.size != times.size:
                    raise ValueError(f"{path}: `trial` and `time` differ in length")
                labels = np.unique(ids_arr)
                trains = [times[ids_arr == lab] for lab in labels]
                ids = labels.tolist()
            else:
                names = sorted((k for k in z.files if k.startswith("trial_")), key=lambda k: int(k[6:]))
                if not names:
                    raise ValueError(f"{path}: expected arrays `trial` and `time`, or `trial_0`, `trial_1`...")
                trains, ids = [np.asarray(z[k], dtype=float) for k in names], [int(k[6:]) for k in names]
            if duration is None and "duration" in z.files:
                duration = float(z["duration"])
        return SpikeTrains(trains, duration=duration, unit=unit or "ms", ids=ids)
    raise ValueError(f"`path` {str(path)!r}: unknown file type {suffix!r} (use .nwb, .csv or .npz)")


def load_stimulus(path, *, name=None, unit="mV") -> Drive:
    """Read a stimulus (drive, mV over ms) from an NWB acquisition time series or a CSV file.

    Parameters
    ----------
    path : str or Path
        ``.nwb``: the acquisition series ``name`` (or the only one), its
        timestamps or start time and rate in seconds; ``.csv``: columns time
        (ms), drive (mV).
    name : str, optional
        NWB acquisition name.
    unit : str
        The stimulus values must be in mV (the drive, i.e. current times
        membrane resistance); another unit is refused (use the fit's
        ``scale`` parameter to map currents to mV).
    """
    if unit != "mV":
        raise ValueError(f"`unit` must be 'mV' (fit `scale` to convert a current), got {unit!r}")
    path = _check_file(path)
    if path.suffix.lower() == ".csv":
        return Trace.from_csv(path)
    if path.suffix.lower() != ".nwb":
        raise ValueError(f"`path` {str(path)!r}: a stimulus is read from .nwb or .csv")
    try:
        import pynwb  # noqa: PLC0415 - optional extra
    except ImportError:
        raise ImportError('reading NWB files needs pynwb: pip install "popdens[nwb]"') from None
    with pynwb.NWBHDF5IO(str(path), "r") as io:
        nwb = io.read()
        series = dict(nwb.acquisition)
        if name is None:
            if len(series) != 1:
                raise ValueError(f"{path}: give `name`, one of {sorted(series)}")
            name = next(iter(series))
        if name not in series:
            raise ValueError(f"`name` {name!r} is not an acquisition of {path} ({sorted(series)})")
        ts = series[name]
        values = np.asarray(ts.data[:], dtype=float).ravel() * float(ts.conversion)
        if ts.timestamps is not None:
            times = np.asarray(ts.timestamps[:], dtype=float) * 1000.0
        else:
            times = (float(ts.starting_time) + np.arange(values.size) / float(ts.rate)) * 1000.0
    return Trace(times, values)


def load_gain_curve(path) -> GainCurve:
    """Read a measured gain curve from a CSV file with columns drive (mV), rate (Hz), SE (Hz)."""
    rows = _numeric_rows(_check_file(path), 3, "drive mV, rate Hz, SE Hz")
    return GainCurve(rows[:, 0], rows[:, 1], rows[:, 2])
