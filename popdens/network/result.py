"""The result of a circuit run over time (mean field or spiking twin)."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .._files import atomic_write
from .._display import Displayable, dataframe, rate_range
from ..result import STATUS_OK

__all__ = ["CircuitResult"]


@dataclass(frozen=True, eq=False)
class CircuitResult(Displayable):
    """Rates over time of every cohort of a circuit.

    Attributes
    ----------
    names : tuple of str
        Cohort names, the order of the first axis of the arrays.
    t : ndarray, shape (n_times,)
        Output times (ms) from 0.
    rate : ndarray, shape (n_cohorts, n_times)
        Population rates (Hz): ``rate[:, 0]`` the initial rate, ``rate[:, j]``
        the mean over ``(t[j-1], t[j]]``.
    mu, sigma : ndarray, shape (n_cohorts, n_times) or None
        Total drive (mV) and noise amplitude (mV, NaN for escape noise) at
        ``t`` (mean-field integration only).  Cohorts with conductance synapses:
        their own drive (mV) and NaN (the conductances are not a current of
        one amplitude).  Cohorts with shot-noise synapses: those of the
        diffusion-equivalent input (the rate comes from the jump-density
        solver, not from them).
    mean_u : ndarray, shape (n_cohorts, n_times) or None
        Monte Carlo: mean membrane potential (mV) at ``t``.
    method : str
        ``"mean-field"`` or ``"montecarlo"``.
    status, message : int, str
        0 and "completed" on success.
    dt : float
        Internal step (ms).
    sizes : tuple of int or None
        Monte Carlo: neurons per cohort.
    spike_times, spike_ids : ndarray or None
        Monte Carlo, on request: spike times (ms) and neuron indices
        (cohort ``k`` owns ids ``offsets[k] .. offsets[k+1]-1``).
    diagnostics : dict
        Wall time (s), version, counters.
    """

    names: tuple
    t: np.ndarray
    rate: np.ndarray
    method: str
    mu: np.ndarray | None = None
    sigma: np.ndarray | None = None
    mean_u: np.ndarray | None = None
    status: int = STATUS_OK
    message: str = "completed"
    dt: float = float("nan")
    sizes: tuple | None = None
    spike_times: np.ndarray | None = None
    spike_ids: np.ndarray | None = None
    diagnostics: dict = field(default_factory=dict)

    @property
    def success(self) -> bool:
        return self.status == STATUS_OK

    def rate_of(self, name: str) -> np.ndarray:
        """Rate (Hz) of the cohort ``name``."""
        if name not in self.names:
            raise ValueError(f"unknown cohort {name!r}; known: {list(self.names)}")
        return self.rate[self.names.index(name)]

    @property
    def offsets(self) -> np.ndarray:
        """First neuron id of each cohort (Monte Carlo)."""
        if self.sizes is None:
            raise ValueError("neuron ids exist only for Monte Carlo results")
        return np.concatenate([[0], np.cumsum(self.sizes)])

    def mean_rate(self, t_from: float = 0.0) -> np.ndarray:
        """Time-averaged rate (Hz) of each cohort over ``(t_from, t_end]`` (ms)."""
        sel = self.t[1:] > t_from + 1e-9
        if not np.any(sel):
            raise ValueError(f"`t_from` = {t_from!r} ms leaves no output interval")
        return self.rate[:, 1:][:, sel].mean(axis=1)

    def spectra(self, segment: float = 1000.0, t_from: float = 0.0):
        """Spectra and cross-spectra (Hz) of the cohorts' rates after ``t_from`` (ms).

        Averaged periodograms over segments of ``segment`` ms (two-sided; the
        convention of :func:`popdens.network.spectral_matrix`); the rates are
        averages over the record interval (see :meth:`popdens.Result.spectrum`).

        Returns
        -------
        SpectrumEstimate
            ``freqs`` (Hz); ``power`` and ``standard_error``, shape ``(n_freqs, n_cohorts)``;
            ``cross`` (complex, ``(n_freqs, n, n)``) and ``cross_error``.
        """
        from .._spectral import estimate_spectra

        if self.t.size < 3:
            raise ValueError("the record is too short for a spectrum")
        width = float(self.t[1] - self.t[0])
        first = int(np.searchsorted(self.t, t_from - 1e-9 * width)) + 1
        return estimate_spectra(self.rate[:, first:], width, segment)

    def rate_spectrum(self, t_from: float = 0.0, segment_ms: float = 256.0):
        """Power spectrum of each cohort's rate fluctuations (Welch's method, one-sided).

        Parameters
        ----------
        t_from : float
            Start (ms) of the stretch analysed.
        segment_ms : float
            Length of Welch's segments (ms); the frequency resolution is 1000 / segment_ms Hz.

        Returns
        -------
        freqs : ndarray
            Frequencies (Hz) up to half the output rate.
        power : ndarray, shape (n_cohorts, n_freqs)
            Spectral density of the binned rate (Hz^2/Hz).  Independent neurons at rate ``r`` give
            about ``2 r / N`` at high frequencies (one-sided Poisson level).
        """
        from scipy import signal

        sel = self.t > t_from + 1e-9
        x = self.rate[:, sel]
        if x.shape[1] < 8:
            raise ValueError(f"`t_from` = {t_from!r} ms leaves fewer than 8 output intervals for a spectrum")
        fs = 1000.0 / float(self.t[1] - self.t[0])  # outputs per second
        nper = int(min(x.shape[1], max(8, round(segment_ms * fs / 1000.0))))
        freqs, power = signal.welch(x - x.mean(axis=1, keepdims=True), fs=fs, nperseg=nper, axis=1)
        return freqs, power

    def save(self, path) -> "Path":  # noqa: F821
        """Save arrays as ``.npz`` (atomic)."""
        from pathlib import Path
        import json

        path = Path(path)
        if path.suffix != ".npz":
            path = path.with_suffix(".npz")
        arrays = {"t": self.t, "rate": self.rate}
        for k in ("mu", "sigma", "mean_u", "spike_times", "spike_ids"):
            if getattr(self, k) is not None:
                arrays[k] = getattr(self, k)
        meta = {"names": list(self.names), "method": self.method, "status": self.status,
                "message": self.message, "dt": self.dt, "sizes": list(self.sizes) if self.sizes else None}
        arrays["_meta"] = np.frombuffer(json.dumps(meta).encode("utf-8"), dtype=np.uint8)
        atomic_write(path, lambda fh: np.savez_compressed(fh, **arrays))
        return path

    def plot(self, ax=None, **kwargs):
        """Rates (Hz) of every cohort against time (ms); returns the Axes."""
        from ..plotting import plot_circuit_rates

        return plot_circuit_rates(self, ax, **kwargs)

    def _card(self):
        rows = [("method", self.method),
                ("time span", f"0 to {self.t[-1]:g} ms, {self.t.size - 1} intervals, dt = {self.dt:g} ms")]
        for k, nm in enumerate(self.names):
            size = f" (N = {self.sizes[k]})" if self.sizes else ""
            rows.append((f"rate of {nm}{size}", rate_range(self.rate[k, 1:])))
        return "CircuitResult", rows, f"status {self.status}: {self.message}"

    def to_dataframe(self):
        """Rates over time as a pandas DataFrame: ``t_ms`` and one ``rate_Hz_<cohort>`` column per cohort."""
        return dataframe({"t_ms": self.t, **{f"rate_Hz_{nm}": self.rate[k] for k, nm in enumerate(self.names)}})

    def __repr__(self) -> str:
        return (f"<CircuitResult {self.method}: {list(self.names)}, {self.t.size} times to {self.t[-1]:g} ms, "
                f"status={self.status} ({self.message})>")
