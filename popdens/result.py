"""The one result type returned by every time-domain computation."""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ._display import Displayable, dataframe, fmt, rate_range
from ._files import atomic_write, csv_with_metadata, jsonable

__all__ = ["Result", "load_result"]

STATUS_OK = 0
STATUS_FAILED = -1
#: Stopped by the user (Ctrl-C); the result holds the steps done before.
STATUS_INTERRUPTED = -2
#: Diagnostics that differ between identical runs; kept out of output files so that the
#: same scenario and seed give bit-identical files (wall times go to ``timing.json``).
VOLATILE_DIAGNOSTICS = ("wall_time_s", "compile_time_s")
#: Columns of :meth:`Result.to_csv` (and of ``popdens step``): units in the names.
CSV_COLUMNS = ("t_ms", "rate_Hz", "mean_u_mV", "refractory_fraction", "drive_mV")


@dataclass(frozen=True, eq=False)
class Result(Displayable):
    """Outcome of a simulation (density solver or Monte Carlo).

    Attributes
    ----------
    t : ndarray, shape (n_times,)
        Output times (ms), starting at 0.
    rate : ndarray, shape (n_times,)
        Population rate (Hz).  ``rate[0]`` is the instantaneous rate of the
        initial state; ``rate[k]`` for k >= 1 is the mean rate over
        ``(t[k-1], t[k]]``.
    mean_u : ndarray, shape (n_times,)
        Mean membrane potential at ``t`` (mV), refractory neurons counted at reset.
    refractory_fraction : ndarray, shape (n_times,)
        Fraction of neurons in their absolute refractory period at ``t``.
    drive : ndarray, shape (n_times,)
        The input drive at ``t`` (mV).
    method : str
        Which computation produced the result.
    status : int
        0 on success, -1 if the computation failed or stopped early, -2 if it
        was interrupted by the user (see ``message``).
    message : str
        Human-readable reason for the status.
    dt : float
        Internal time step (ms).
    n_steps : int
        Number of internal steps taken.
    snapshot_t : ndarray, shape (n_snapshots,) or None
        Times (ms) of density snapshots.
    snapshots : ndarray, shape (n_snapshots, n_bins) or None
        Density snapshots: age density (1/ms) or membrane-potential density
        (1/mV) on ``axis``.
    axis : ndarray, shape (n_bins,) or None
        Age (ms) or membrane potential (mV) of each density bin.
    axis_name : str
        ``"age (ms)"`` or ``"u (mV)"``.
    spike_times, spike_ids : ndarray or None
        Monte Carlo only, on request: spike times (ms) and neuron indices.
    n_neurons : int or None
        Monte Carlo and finite-size runs: population size.
    trial_rates : ndarray, shape (n_trials, n_times) or None
        Finite-size runs with ``trials``: the rate (Hz) of every realisation
        (``rate`` is the first); see :meth:`trial_mean`, :meth:`trial_variance`.
    diagnostics : dict
        Wall time (s), popdens version, mass error, counters, settings.
    """

    t: np.ndarray
    rate: np.ndarray
    mean_u: np.ndarray
    refractory_fraction: np.ndarray
    drive: np.ndarray
    method: str
    population: Any = None
    status: int = STATUS_OK
    message: str = "completed"
    dt: float = float("nan")
    n_steps: int = 0
    snapshot_t: np.ndarray | None = None
    snapshots: np.ndarray | None = None
    axis: np.ndarray | None = None
    axis_name: str = ""
    spike_times: np.ndarray | None = None
    spike_ids: np.ndarray | None = None
    n_neurons: int | None = None
    diagnostics: dict = field(default_factory=dict)
    trial_rates: np.ndarray | None = None

    @property
    def success(self) -> bool:
        return self.status == STATUS_OK

    def isis(self) -> np.ndarray:
        """Inter-spike intervals (ms) pooled over neurons (Monte Carlo with spikes recorded)."""
        if self.spike_times is None or self.spike_ids is None:
            raise ValueError("no spikes were recorded; call montecarlo(..., record_spikes=True)")
        order = np.lexsort((self.spike_times, self.spike_ids))
        ids = self.spike_ids[order]
        ts = self.spike_times[order]
        same = ids[1:] == ids[:-1]
        return np.diff(ts)[same]

    def isi_weights(self) -> np.ndarray:
        """Weights (summing to 1) of :meth:`isis` that undo the recording window's bias against long intervals.

        Of the intervals of a record of length ``T`` (ms), only those with both spikes inside are seen,
        and an interval of length ``L`` is complete with probability ``(T - L)/T``: the pooled intervals
        under-represent long ones (by -2 % in the CV with about 12 mean intervals per record, -0.5 %
        with 40).  Weighting each by ``1/(T - L)`` undoes this exactly for a stationary process (Palm
        calculus) for intervals shorter than the record; longer ones are never seen, so make the record
        long against the longest intervals of interest.  Use them for histograms and moments to compare with
        the stationary ISI density.
        """
        isi = self.isis()
        span = float(self.t[-1] - self.t[0])
        if isi.size == 0:
            return isi
        w = 1.0 / np.maximum(span - isi, np.finfo(float).tiny)
        return w / w.sum()

    def isi_cv(self) -> float:
        """Coefficient of variation of the inter-spike intervals, weighted for the recording window
        (:meth:`isi_weights`); NaN with fewer than two intervals."""
        isi = self.isis()
        if isi.size < 2:
            return float("nan")
        w = self.isi_weights()
        m1 = float(w @ isi)
        return float(np.sqrt(max(float(w @ (isi * isi)) - m1 * m1, 0.0)) / m1)

    def rate_standard_error(self) -> np.ndarray:
        """Poisson standard error of a Monte Carlo rate per output bin (Hz).

        Uses the variance of a spike count, approximately its mean for a
        large population of independent neurons in a short bin (common
        practice).
        """
        if self.n_neurons is None:
            raise ValueError("standard errors exist only for Monte Carlo results")
        width = np.diff(self.t, prepend=np.nan) * 1e-3
        return np.sqrt(np.maximum(self.rate, 0.0) / (self.n_neurons * width))

    def _trials(self) -> np.ndarray:
        if self.trial_rates is None:
            raise ValueError("this result holds one realisation; run simulate(..., n=N, trials=M) for trial statistics")
        return self.trial_rates

    def trial_mean(self) -> np.ndarray:
        """Mean rate (Hz) over the trials at each output time."""
        return self._trials().mean(axis=0)

    def trial_variance(self) -> np.ndarray:
        """Variance (Hz^2) of the rate over the trials at each output time (unbiased, ``ddof = 1``)."""
        tr = self._trials()
        if tr.shape[0] < 2:
            raise ValueError("the trial variance needs at least 2 trials")
        return tr.var(axis=0, ddof=1)

    def spectrum(self, segment: float = 1000.0, t_from: float = 0.0):
        """Power spectrum (Hz) of the rate, estimated from the record after ``t_from`` (ms).

        Averaged periodograms over segments of ``segment`` ms (frequency
        resolution ``1000 / segment`` Hz), pooled over all trials when the
        result holds several; two-sided, the convention of
        :func:`popdens.population_rate_spectrum`.  The recorded rates are bin
        averages over the record interval ``b``: compare with
        ``r0/N + (S(f) - r0/N) sinc^2(pi f b)``, or record every step.

        Returns
        -------
        SpectrumEstimate
            ``freqs`` (Hz), ``power`` (Hz) and ``standard_error`` (Hz), ``segments``.
        """
        from ._spectral import estimate_spectra

        if self.t.size < 3:
            raise ValueError("the record is too short for a spectrum")
        width = float(self.t[1] - self.t[0])
        first = int(np.searchsorted(self.t, t_from - 1e-9 * width)) + 1  # bins (t[k-1], t[k]] after t_from
        rates = self.trial_rates if self.trial_rates is not None else self.rate[None]
        return estimate_spectra(rates[:, first:], width, segment, channels=False)

    def _card(self):
        pop = self.population
        who = f"{type(pop.neuron).__name__}, {type(pop.noise).__name__}" if pop is not None else "?"
        rows = [("method", self.method), ("population", who),
                ("time span", f"0 to {self.t[-1]:g} ms, {self.t.size - 1} intervals, dt = {self.dt:g} ms"),
                ("rate", rate_range(self.rate[1:])),
                ("drive", f"{np.nanmin(self.drive):.4g} to {np.nanmax(self.drive):.4g} mV")]
        if self.n_neurons is not None:
            rows.append(("neurons", fmt(self.n_neurons)))
        if "compile_time_s" in self.diagnostics:
            rows.append(("run time", f"{fmt(self.diagnostics.get('wall_time_s'), 's', 3)} "
                                     f"(+ {fmt(self.diagnostics['compile_time_s'], 's', 3)} compiling)"))
        for w in self.diagnostics.get("accuracy_warnings", []):
            rows.append(("accuracy warning", w))
        return "Result", rows, f"status {self.status}: {self.message}"

    def to_dataframe(self):
        """The rates over time as a pandas DataFrame, one row per output time, units in the column names."""
        return dataframe({"t_ms": self.t, "rate_Hz": self.rate, "mean_u_mV": self.mean_u,
                          "refractory_fraction": self.refractory_fraction, "drive_mV": self.drive})

    def __repr__(self) -> str:
        pop = self.population
        who = f"{type(pop.neuron).__name__}/{type(pop.noise).__name__}" if pop is not None else "?"
        rmean = float(np.mean(self.rate[1:])) if self.rate.size > 1 else float("nan")
        return (
            f"<Result {self.method} {who}: {self.t.size} times to {self.t[-1]:g} ms, dt={self.dt:g} ms, "
            f"mean rate {rmean:.4g} Hz, status={self.status} ({self.message})>"
        )

    # ----------------------------------------------------------- output
    def to_csv(self, path: str | Path, *, header_extra: dict | None = None) -> Path:
        """Write ``t, rate, mean_u, refractory_fraction, drive`` as CSV (atomic).

        Column names (units in them) come first, then one ``#`` line that records method, version,
        parameters and
        the numerical settings (diagnostics without wall times), and nothing
        that differs between identical runs.
        """
        path = Path(path)
        meta = {"method": self.method, "status": self.status, "message": self.message,
                "dt_ms": self.dt, "settings": self.settings(), **(header_extra or {})}
        if self.population is not None:
            meta["neuron"] = {"model": type(self.population.neuron).__name__, **self.population.neuron.parameters()}
        meta["version"] = self.diagnostics.get("version")
        arr = np.column_stack([self.t, self.rate, self.mean_u, self.refractory_fraction, self.drive])
        body = "".join(",".join(f"{x:.12g}" for x in row) + "\n" for row in arr)
        meta_line = "popdens result; " + json.dumps(jsonable(meta), sort_keys=True)
        text = csv_with_metadata(",".join(CSV_COLUMNS), [meta_line], body)
        atomic_write(path, lambda fh: fh.write(text.encode("utf-8")))
        return path

    def settings(self) -> dict:
        """Numerical settings and diagnostics that identical runs share (no wall times)."""
        return {k: v for k, v in self.diagnostics.items() if k not in VOLATILE_DIAGNOSTICS}

    def save(self, path: str | Path) -> Path:
        """Save arrays (``.npz``) with JSON metadata; reload with :func:`load_result`."""
        path = Path(path)
        if path.suffix != ".npz":
            path = path.with_suffix(".npz")
        arrays = {k: getattr(self, k) for k in ("t", "rate", "mean_u", "refractory_fraction", "drive")}
        for k in ("snapshot_t", "snapshots", "axis", "spike_times", "spike_ids", "trial_rates"):
            if getattr(self, k) is not None:
                arrays[k] = getattr(self, k)
        meta = {"method": self.method, "status": self.status, "message": self.message, "dt": self.dt,
                "n_steps": self.n_steps, "axis_name": self.axis_name, "n_neurons": self.n_neurons,
                "diagnostics": jsonable(self.diagnostics),
                "population": repr(self.population)}
        arrays["_meta"] = np.frombuffer(json.dumps(meta).encode("utf-8"), dtype=np.uint8)

        def write(fh):
            np.savez_compressed(fh, **arrays)

        atomic_write(path, write)
        return path

    def plot(self, ax=None, **kwargs):
        """Plot the population rate over time; returns the matplotlib Axes."""
        from .plotting import plot_rate

        return plot_rate(self, ax=ax, **kwargs)


def load_result(path: str | Path) -> Result:
    """Load a result written by :meth:`Result.save` (population kept as text)."""
    with np.load(Path(path), allow_pickle=False) as data:
        meta = json.loads(bytes(data["_meta"]).decode("utf-8"))
        kw = {k: data[k] for k in data.files if k != "_meta"}
    return Result(method=meta["method"], status=meta["status"], message=meta["message"], dt=meta["dt"],
                  n_steps=meta["n_steps"], axis_name=meta["axis_name"], n_neurons=meta["n_neurons"],
                  diagnostics={**meta["diagnostics"], "population": meta["population"]}, **kw)
