"""Steady-state and linear-response analyses named in a scenario file.

Each analysis table of a scenario (``[gain]``, ``[stationary]``,
``[transfer]``) is parsed into a small frozen object here.  The object
computes its numbers with the same public functions a script would call
(:func:`popdens.gain`, :func:`popdens.stationary`, :func:`popdens.transfer`)
and writes a CSV table and figures into an output folder.

Tables
------
``[gain]``
    ``mu``: the mean drives (mV), a list or a range table
    ``{start = ..., stop = ..., count = ..., spacing = "linear" | "log"}``;
    ``sigma`` (optional, white noise only): a list of noise levels (mV), one
    gain curve each (default: the ``[noise]`` sigma).
``[stationary]``
    ``mu``: one drive (mV) or a list of drives.
``[transfer]``
    ``mu``: the stationary drive (mV); ``frequencies`` (Hz): a list or a
    range table; ``modulate``: ``"mean"`` (default, Hz/mV), ``"noise"`` (the
    variance sigma^2, Hz/mV^2) or ``"sigma"`` (Hz/mV), the last two for white noise.
``[approximations]``
    coloured, shot or conductance noise: the Monte Carlo twin's stationary rate against each
    theory, what each correction buys.  ``mu``: the drive (mV); ``neurons``
    (default 2000), ``t_end`` (ms, default 2000) and ``seed`` (default 0) of the
    twin.  Coloured noise: the white-noise and the effective-boundary (boundary
    shift) rates over ``tau_syn`` (optional, ms; default the ``[noise]`` one).
    Shot noise: the diffusion approximation and the finite-PSP theory (exact
    rate for exponential amplitudes, jump-density solver for fixed ones) over
    ``psp`` (optional, mV; default the ``[noise]`` ``exc_psp``): at each PSP
    size both amplitudes equal ``psp`` and the excitatory and inhibitory rates
    are chosen so that the input's mean and variance stay those of ``[noise]``
    (Campbell's theorem), so the diffusion approximation is the same at every
    point and the twin shows what finite PSPs change.  Conductance input: the
    default (filtered), white-conductance (diffusion) and naive current-based
    rates over ``tau_factor`` (optional; default 1): both synaptic time
    constants times the factor and both weights divided by it, so the mean
    conductances and their white-limit intensities stay those of ``[noise]``
    and the twin shows what the conductances' correlation time changes.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..exceptions import ScenarioError

__all__ = ["GainCurve", "StationaryStats", "TransferCurve", "ApproximationCheck", "parse_analyses", "ANALYSIS_TABLES",
           "check_approximations", "describe_population", "noise_fields", "write_table", "same_moments"]

#: Most points accepted in one range (guards against typos such as 1e9).
MAX_POINTS = 100_000
RANGE_KEYS = {"start", "stop", "count", "spacing"}


def _err(src, table, key, value, expected):
    return ScenarioError(f"{src}: [{table}] key `{key}` = {value!r}: expected {expected}")


def _unknown(src, table, data, allowed, required=()):
    import difflib

    if not isinstance(data, dict):
        raise ScenarioError(f"{src}: [{table}] must be a table, got {data!r}")
    for k in data:
        if k not in allowed:
            near = difflib.get_close_matches(k, sorted(allowed), n=1)
            hint = f"; did you mean `{near[0]}`?" if near else f"; valid keys: {', '.join(sorted(allowed))}"
            raise ScenarioError(f"{src}: [{table}] unknown key `{k}`{hint}")
    for k in required:
        if k not in data:
            raise ScenarioError(f"{src}: [{table}] missing required key `{k}`")


def _finite(src, table, key, x) -> float:
    if isinstance(x, bool) or not isinstance(x, (int, float)) or not math.isfinite(x):
        raise _err(src, table, key, x, "a finite number")
    return float(x)


def parse_values(src, table, key, value, *, positive=False) -> np.ndarray:
    """A number, a list of numbers or a range table ``{start, stop, count, spacing}`` → 1-D array."""
    if isinstance(value, dict):
        _unknown(src, f"{table}.{key}", value, RANGE_KEYS, ("start", "stop", "count"))
        lo = _finite(src, f"{table}.{key}", "start", value["start"])
        hi = _finite(src, f"{table}.{key}", "stop", value["stop"])
        n = value["count"]
        if isinstance(n, bool) or not isinstance(n, int) or not 1 <= n <= MAX_POINTS:
            raise _err(src, f"{table}.{key}", "count", n, f"an integer from 1 to {MAX_POINTS}")
        spacing = value.get("spacing", "linear")
        if spacing == "linear":
            out = np.linspace(lo, hi, n)
        elif spacing == "log":
            if lo <= 0 or hi <= 0:
                raise _err(src, f"{table}.{key}", "start", lo, "positive bounds for log spacing")
            out = np.geomspace(lo, hi, n)
        else:
            raise _err(src, f"{table}.{key}", "spacing", spacing, "'linear' or 'log'")
    elif isinstance(value, list):
        if not value or len(value) > MAX_POINTS:
            raise _err(src, table, key, value, f"a list of 1 to {MAX_POINTS} numbers")
        out = np.array([_finite(src, table, key, x) for x in value])
    else:
        out = np.array([_finite(src, table, key, value)])
    if positive and np.any(out <= 0):
        raise _err(src, table, key, value, "positive values")
    return out


def write_table(path: Path, columns: dict, header: dict) -> None:
    """Write ``columns`` (name → 1-D array) as CSV, names first and ``# key: value`` lines after them,
    atomically."""
    from .._files import atomic_write

    from .._files import csv_with_metadata

    names = list(columns)
    data = np.column_stack([np.asarray(columns[n], dtype=float) for n in names])
    body = "".join(",".join(f"{x:.12g}" for x in row) + "\n" for row in data)
    text = csv_with_metadata(",".join(names), [f"{k}: {val}" for k, val in header.items()], body)
    atomic_write(Path(path), lambda fh: fh.write(text.encode("utf-8")))


def describe_population(population) -> str:
    """One JSON line naming the neuron model, the noise model and their parameters."""
    import json

    from .._files import jsonable

    noise = population.noise
    d = {"neuron": {"model": type(population.neuron).__name__, **population.neuron.parameters()},
         "noise": {"kind": type(noise).__name__}}
    if hasattr(noise, "hazard"):
        d["noise"].update({"escape_function": type(noise.hazard).__name__, **noise.hazard.parameters()})
    else:  # white, coloured or shot noise: its fields, each name with its unit
        from ..plotting import KEY_UNITS

        for k, val in noise_fields(noise).items():
            unit = KEY_UNITS.get(k)
            d["noise"][f"{k}_{unit}" if unit else k] = val
    return json.dumps(jsonable(d), sort_keys=True)


def noise_fields(noise) -> dict:
    """The parameters of a white, coloured or shot noise model (its dataclass fields), by name."""
    import dataclasses

    return {f.name: getattr(noise, f.name) for f in dataclasses.fields(noise)}


def _with_sigma(population, sigma):
    from ..model.noise import Population, WhiteNoise
    from ..model.synaptic import ColouredNoise

    if sigma is None:
        return population
    noise = population.noise
    if isinstance(noise, ColouredNoise):
        return Population(population.neuron, ColouredNoise(float(sigma), noise.tau_syn))
    return Population(population.neuron, WhiteNoise(float(sigma)))


def _save(fig, folder: Path, stem: str) -> list[str]:
    from ..plotting import save_figure

    return save_figure(fig, folder, stem)


@dataclass(frozen=True)
class GainCurve:
    """Gain curves: stationary rate (Hz) over the drives ``mu`` (mV), one per noise level."""

    mu: np.ndarray
    sigmas: tuple = (None,)

    def compute(self, population) -> np.ndarray:
        """Rates (Hz), shape ``(len(sigmas), len(mu))``."""
        from ..theory.steady_state import gain

        return np.array([gain(_with_sigma(population, s), self.mu) for s in self.sigmas])

    def write(self, population, folder: Path, header: dict) -> dict:
        from ..plotting import plot_gain

        from ..model.noise import Population

        rates = self.compute(population)
        adapting = population.neuron.adapting
        # an adapting neuron's curve is drawn beside the same neuron's without adaptation (dashed)
        plain = self.compute(Population(population.neuron.without_adaptation(), population.noise)) \
            if adapting else None
        cols = {"mu_mV": self.mu}
        labels, curves, dashed = [], [], []
        for i, (s, row) in enumerate(zip(self.sigmas, rates)):
            name = "rate_Hz" if s is None else f"rate_Hz_sigma_{s:g}mV"
            cols[name] = row
            base = "rate" if s is None else f"sigma = {s:g} mV"
            labels.append(base + (", adapted" if adapting else ""))
            curves.append(row)
            dashed.append(False)
            if adapting:
                cols[name.replace("rate_Hz", "rate_Hz_without_adaptation")] = plain[i]
                labels.append(base + ", without adaptation")
                curves.append(plain[i])
                dashed.append(True)
        write_table(folder / "gain.csv", cols,
                    {**header, "population": describe_population(population), "units": "mu mV, rate Hz"})
        ax = plot_gain(self.mu, np.array(curves), labels=labels if len(labels) > 1 else None, title="gain function",
                       dashed=dashed)
        figs = _save(ax.figure, folder, "gain")
        return {"table": "gain.csv", "figures": figs, "points": int(self.mu.size),
                "max_rate_hz": float(np.nanmax(rates)), "min_rate_hz": float(np.nanmin(rates))}


@dataclass(frozen=True)
class StationaryStats:
    """Stationary statistics (rate, CV, mean potential, ISI density) at the drives ``mu`` (mV)."""

    mu: np.ndarray

    def compute(self, population) -> list:
        from ..theory.steady_state import stationary

        return [stationary(population, float(m)) for m in self.mu]

    def write(self, population, folder: Path, header: dict) -> dict:
        from ..plotting import _axes, plot_isi

        states = self.compute(population)
        cols = {"mu_mV": self.mu, "rate_Hz": [s.rate for s in states], "cv": [s.cv for s in states],
                "mean_u_mV": [s.mean_u for s in states]}
        write_table(folder / "stationary.csv", cols, {**header, "population": describe_population(population),
                                                        "units": "mu mV, rate Hz, cv 1, mean_u mV"})
        ax = _axes(None)
        for m, s in zip(self.mu, states):
            plot_isi(s.isi_t, s.isi_density, ax=ax, label=f"mu = {m:g} mV: {s.rate:.3g} Hz, CV {s.cv:.2f}")
        ax.legend(frameon=False, loc="upper right")
        figs = _save(ax.figure, folder, "isi")
        return {"table": "stationary.csv", "figures": figs,
                "states": [{"mu_mV": float(m), "rate_hz": float(s.rate), "cv": float(s.cv),
                            "mean_u_mV": float(s.mean_u)} for m, s in zip(self.mu, states)]}


@dataclass(frozen=True)
class TransferCurve:
    """Transfer function at the stationary drive ``mu`` (mV) over ``freqs`` (Hz)."""

    mu: float
    freqs: np.ndarray
    modulate: str = "mean"

    @property
    def unit(self) -> str:
        from ..theory.linear_response import MODULATIONS

        return MODULATIONS[self.modulate]

    def compute(self, population) -> np.ndarray:
        from ..theory.linear_response import transfer

        return transfer(population, self.mu, self.freqs, modulate=self.modulate)

    def write(self, population, folder: Path, header: dict) -> dict:
        from ..plotting import plot_transfer

        chi = self.compute(population)
        u = self.unit.replace("/", "_per_").replace("^", "")
        cols = {"frequency_Hz": self.freqs, f"real_{u}": chi.real, f"imag_{u}": chi.imag,
                f"abs_{u}": np.abs(chi), "phase_rad": np.angle(chi)}
        write_table(folder / "transfer.csv", cols,
                    {**header, "population": describe_population(population),
                     "units": f"frequency Hz, transfer {self.unit} ({self.modulate} modulation)",
                     "stationary_drive_mV": f"{self.mu:g}"})
        fig = plot_transfer(self.freqs, chi, unit=self.unit)
        fig.suptitle(f"transfer function ({self.modulate} modulation) at mu = {self.mu:g} mV")
        figs = _save(fig, folder, "transfer")
        return {"table": "transfer.csv", "figures": figs, "frequencies": int(self.freqs.size),
                "modulate": self.modulate}


def same_moments(noise, psp: float):
    """Shot noise with both PSP amplitudes ``psp`` (mV) and the input mean and variance of ``noise``.

    Campbell's theorem: the input adds mean ``tau_m (nu_e <a_e> - nu_i <a_i>)`` and variance
    ``tau_m (nu_e <a_e^2> + nu_i <a_i^2>)``; with ``a_e = a_i = psp`` the rates solve
    ``nu_e - nu_i = m / psp`` and ``nu_e + nu_i = v / (k psp^2)`` (``k`` = 1 for fixed, 2 for
    exponential amplitudes), which needs ``psp <= v / (k |m|)``.

    Parameters
    ----------
    noise : ShotNoise
        The input whose mean and variance are kept.
    psp : float
        The new amplitude (mV) of both excitatory and inhibitory PSPs.

    Returns
    -------
    ShotNoise
        The rescaled input.

    Raises
    ------
    ValueError
        When ``psp`` is too large for the variance (the inhibitory or excitatory rate would be negative).
    """
    from ..model.shot import ShotNoise

    k = 2.0 if noise.exponential else 1.0
    m = noise.exc_rate * noise.exc_psp - noise.inh_rate * noise.inh_psp          # Hz mV
    var = k * (noise.exc_rate * noise.exc_psp ** 2 + noise.inh_rate * noise.inh_psp ** 2)  # Hz mV^2
    a = float(psp)
    if not (math.isfinite(a) and a > 0.0):
        raise ValueError(f"`psp` must be a positive number of mV, got {psp!r}")
    total, diff = var / (k * a * a), m / a
    if total < abs(diff) * (1.0 - 1e-12):
        raise ValueError(f"`psp` = {a:g} mV is too large to keep the input's mean and variance (at most "
                         f"{var / (k * abs(m)):.4g} mV for this [noise])")
    exc, inh = 0.5 * (total + diff), max(0.0, 0.5 * (total - diff))
    return ShotNoise(exc, a, inh, a if inh > 0.0 else 0.0, noise.amplitudes)


def scaled_synapses(noise, factor: float):
    """Conductance input with both synaptic time constants times ``factor`` and both weights divided by it.

    The mean conductances ``w nu tau`` and their white-limit intensities ``w^2 nu tau^2`` stay those of
    ``noise`` (Campbell's theorem); only the conductances' correlation time changes.

    Parameters
    ----------
    noise : ConductanceNoise
        The input whose means and intensities are kept.
    factor : float
        Scale of the time constants (> 0).

    Returns
    -------
    ConductanceNoise
        The rescaled input.
    """
    import dataclasses

    f = float(factor)
    if not (math.isfinite(f) and f > 0.0):
        raise ValueError(f"`tau_factor` must be a positive number, got {factor!r}")
    return dataclasses.replace(noise, exc_tau=noise.exc_tau * f, exc_weight=noise.exc_weight / f,
                               inh_tau=noise.inh_tau * f, inh_weight=noise.inh_weight / f)


@dataclass(frozen=True)
class ApproximationCheck:
    """The twin's stationary rate against each approximation: over ``tau_syns`` (ms) for coloured noise,
    over PSP amplitudes ``psps`` (mV, at the same input mean and variance) for shot noise, over
    ``tau_factors`` (synaptic time constants scaled at fixed mean conductances and intensities) for
    conductance input."""

    mu: float
    tau_syns: tuple = ()
    neurons: int = 2000
    t_end: float = 2000.0
    seed: int = 0
    psps: tuple = ()
    tau_factors: tuple = ()

    def _twin(self, pop, i):
        """Twin rate and SE (Hz) from per-neuron spike counts (independent neurons: std / sqrt(N))."""
        from ..result import STATUS_INTERRUPTED
        from ..twins.population import montecarlo

        mc = montecarlo(pop, self.mu, t_end=self.t_end, n=self.neurons, seed=self.seed + i,
                        record_spikes=True, record_interval=self.t_end)
        if mc.status == STATUS_INTERRUPTED:  # partial spike counts are not a rate
            raise KeyboardInterrupt(mc.message)
        counts = np.bincount(mc.spike_ids, minlength=self.neurons) / (self.t_end * 1e-3)
        return float(counts.mean()), float(counts.std(ddof=1) / math.sqrt(self.neurons))

    def compute(self, population) -> dict:
        """The table's columns (rates in Hz; coloured: tau_syn in ms; shot: PSP in mV, input rates in Hz)."""
        from ..model.noise import Population, WhiteNoise
        from ..model.shot import ShotNoise
        from ..model.synaptic import ColouredNoise
        from ..theory.steady_state import gain

        from ..model.conductance import ConductanceNoise

        noise = population.noise
        if isinstance(noise, ConductanceNoise):
            out = {k: [] for k in ("tau_factor", "exc_tau_ms", "inh_tau_ms", "inh_tau_over_tau_eff", "twin_Hz",
                                   "twin_se_Hz", "filtered_Hz", "diffusion_Hz", "current_based_Hz")}
            tau_eff = noise.effective_time_constant(population.neuron.tau_m)
            for i, f in enumerate(self.tau_factors or (1.0,)):
                pop = Population(population.neuron, scaled_synapses(noise, f))
                r, se = self._twin(pop, i)
                for key, val in (("tau_factor", f), ("exc_tau_ms", pop.noise.exc_tau), ("inh_tau_ms", pop.noise.inh_tau),
                                 ("inh_tau_over_tau_eff", (pop.noise.inh_tau if pop.noise.inhibited
                                                           else pop.noise.exc_tau) / tau_eff),
                                 ("twin_Hz", r), ("twin_se_Hz", se), ("filtered_Hz", gain(pop, self.mu)),
                                 ("diffusion_Hz", gain(pop, self.mu, method="diffusion")),
                                 ("current_based_Hz", gain(pop, self.mu, method="current-based")
                                  if type(population.neuron).__name__ == "LIF" else math.nan)):
                    out[key].append(float(val))
            return {k: np.array(v) for k, v in out.items()}
        if isinstance(noise, ShotNoise):
            out = {k: [] for k in ("psp_mV", "exc_rate_Hz", "inh_rate_Hz", "twin_Hz", "twin_se_Hz",
                                   "diffusion_Hz", "finite_psp_Hz")}
            for i, a in enumerate(self.psps or (noise.exc_psp,)):
                pop = Population(population.neuron, same_moments(noise, a))
                r, se = self._twin(pop, i)
                for key, val in (("psp_mV", a), ("exc_rate_Hz", pop.noise.exc_rate),
                                 ("inh_rate_Hz", pop.noise.inh_rate), ("twin_Hz", r), ("twin_se_Hz", se),
                                 ("diffusion_Hz", gain(pop, self.mu, method="diffusion")),
                                 ("finite_psp_Hz", gain(pop, self.mu))):
                    out[key].append(float(val))
            return {k: np.array(v) for k, v in out.items()}
        taus = self.tau_syns or (noise.tau_syn,)
        sigma = noise.constant_sigma()
        white = float(gain(Population(population.neuron, WhiteNoise(sigma)), self.mu))
        out = {k: [] for k in ("tau_syn_ms", "twin_Hz", "twin_se_Hz", "white_noise_Hz", "boundary_shift_Hz",
                               "plane_Hz")}
        one_d = "siegert" if type(population.neuron).__name__ == "LIF" else "threshold-integration"
        for i, tau in enumerate(taus):
            pop = Population(population.neuron, ColouredNoise(sigma, float(tau)))
            r, se = self._twin(pop, i)
            out["tau_syn_ms"].append(float(tau))
            out["twin_Hz"].append(r)
            out["twin_se_Hz"].append(se)
            out["white_noise_Hz"].append(white)
            out["boundary_shift_Hz"].append(float(gain(pop, self.mu, method=one_d)))
            out["plane_Hz"].append(float(gain(pop, self.mu, method="plane")))
        return {k: np.array(v) for k, v in out.items()}

    def write(self, population, folder: Path, header: dict) -> dict:
        from ..model.conductance import ConductanceNoise
        from ..model.shot import ShotNoise
        from ..plotting import plot_approximations

        cols = self.compute(population)
        twin = f"{self.neurons} neurons, {self.t_end:g} ms, SE from per-neuron counts"
        if isinstance(population.noise, ConductanceNoise):
            names = {"filtered": "filtered_Hz", "diffusion": "diffusion_Hz", "current_based": "current_based_Hz"}
            write_table(folder / "approximations.csv", cols,
                        {**header, "population": describe_population(population), "drive_mV": f"{self.mu:g}",
                         "units": "time constants ms, rates Hz", "twin": twin,
                         "inputs": "synaptic time constants times tau_factor, weights divided by it (mean "
                                   "conductances and their white-limit intensities kept those of [noise])"})
            fig = plot_approximations(cols["inh_tau_over_tau_eff"], cols["twin_Hz"], cols["twin_se_Hz"],
                                      {"filtered (default)": cols["filtered_Hz"],
                                       "white conductance noise": cols["diffusion_Hz"],
                                       "current-based (naive)": cols["current_based_Hz"]},
                                      "inhibitory synaptic / effective membrane time constant",
                                      title=f"conductance input at mu = {self.mu:g} mV")
        elif isinstance(population.noise, ShotNoise):
            names = {"diffusion": "diffusion_Hz", "finite_psp": "finite_psp_Hz"}
            write_table(folder / "approximations.csv", cols,
                        {**header, "population": describe_population(population), "drive_mV": f"{self.mu:g}",
                         "units": "psp mV, input rates Hz, rates Hz", "twin": twin,
                         "inputs": "both PSP amplitudes = psp; input mean and variance kept those of [noise]"})
            fig = plot_approximations(cols["psp_mV"], cols["twin_Hz"], cols["twin_se_Hz"],
                                      {"white noise (diffusion approximation)": cols["diffusion_Hz"],
                                       "finite PSPs (" + ("exact" if population.noise.exponential
                                                          else "jump-density solver") + ")": cols["finite_psp_Hz"]},
                                      "PSP amplitude (mV)",
                                      title=f"shot noise ({population.noise.amplitudes} PSPs) at mu = {self.mu:g} mV")
        else:
            names = {"white_noise": "white_noise_Hz", "boundary_shift": "boundary_shift_Hz", "plane": "plane_Hz"}
            tau_m = float(population.neuron.tau_m)
            write_table(folder / "approximations.csv", cols,
                        {**header, "population": describe_population(population), "units": "tau_syn ms, rates Hz",
                         "drive_mV": f"{self.mu:g}", "twin": twin})
            fig = plot_approximations(cols["tau_syn_ms"] / tau_m, cols["twin_Hz"], cols["twin_se_Hz"],
                                      {"white noise (diffusion approximation)": cols["white_noise_Hz"],
                                       "effective boundary shift" + (" (none: spike cut-off)" if
                                                                     population.neuron.has_cutoff else ""):
                                           cols["boundary_shift_Hz"],
                                       "two-dimensional density (potential, current)": cols["plane_Hz"]},
                                      "tau_syn / tau_m", title=f"coloured noise at mu = {self.mu:g} mV")
        figs = _save(fig, folder, "approximations")
        err = {name: [float(x) for x in 100.0 * (cols[col] / cols["twin_Hz"] - 1.0)] for name, col in names.items()}
        return {"table": "approximations.csv", "figures": figs, "error_percent": err}


def check_approximations(src, data, noise) -> None:
    """``[approximations]`` needs coloured, shot or conductance noise, and the key that matches it."""
    from ..model.conductance import ConductanceNoise
    from ..model.shot import ShotNoise
    from ..model.synaptic import ColouredNoise

    if not isinstance(noise, (ColouredNoise, ShotNoise, ConductanceNoise)):
        raise ScenarioError(f"{src}: [approximations] compares the approximations of filtered (coloured), shot or "
                            "conductance noise with the twin: it needs [noise] kind = 'coloured', 'shot' or "
                            "'conductance'")
    right = "tau_syn" if isinstance(noise, ColouredNoise) else "psp" if isinstance(noise, ShotNoise) else "tau_factor"
    for wrong in {"tau_syn", "psp", "tau_factor"} - {right}:
        if isinstance(data, dict) and wrong in data:
            raise ScenarioError(f"{src}: [approximations] key `{wrong}` does not apply to this [noise] kind; "
                                f"use `{right}`")
    if isinstance(noise, ShotNoise) and isinstance(data, dict) and "psp" in data:
        for a in parse_values(src, "approximations", "psp", data["psp"], positive=True):
            try:
                same_moments(noise, float(a))
            except ValueError as exc:
                raise ScenarioError(f"{src}: [approximations] {exc}") from None


def _parse_approximations(src, table, data, white):
    _unknown(src, table, data, {"mu", "tau_syn", "psp", "tau_factor", "neurons", "t_end", "seed"}, ("mu",))
    mu = _finite(src, table, "mu", data["mu"])
    taus = tuple(float(t) for t in parse_values(src, table, "tau_syn", data["tau_syn"], positive=True)) \
        if "tau_syn" in data else ()
    psps = tuple(float(a) for a in parse_values(src, table, "psp", data["psp"], positive=True)) \
        if "psp" in data else ()
    n = data.get("neurons", 2000)
    if isinstance(n, bool) or not isinstance(n, int) or not 2 <= n <= 10_000_000:
        raise _err(src, table, "neurons", n, "an integer from 2 to 10000000")
    t_end = _finite(src, table, "t_end", data.get("t_end", 2000.0))
    if not 0.0 < t_end <= 1e7:
        raise _err(src, table, "t_end", t_end, "a duration in (0, 1e7] ms")
    seed = data.get("seed", 0)
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise _err(src, table, "seed", seed, "a non-negative integer")
    factors = tuple(float(f) for f in parse_values(src, table, "tau_factor", data["tau_factor"], positive=True)) \
        if "tau_factor" in data else ()
    return ApproximationCheck(mu, taus, n, t_end, seed, psps, factors)


def _parse_gain(src, table, data, white):
    _unknown(src, table, data, {"mu", "sigma"}, ("mu",))
    mu = parse_values(src, table, "mu", data["mu"])
    if "sigma" in data:
        if not white:
            raise ScenarioError(f"{src}: [{table}] key `sigma` applies to white noise only (or coloured) "
                                "([noise] kind = 'white' or 'coloured')")
        sig = parse_values(src, table, "sigma", data["sigma"], positive=True)
        return GainCurve(mu, tuple(float(s) for s in sig))
    return GainCurve(mu)


def _parse_stationary(src, table, data, white):
    _unknown(src, table, data, {"mu"}, ("mu",))
    return StationaryStats(parse_values(src, table, "mu", data["mu"]))


def _parse_transfer(src, table, data, white):
    _unknown(src, table, data, {"mu", "frequencies", "modulate"}, ("mu", "frequencies"))
    mu = _finite(src, table, "mu", data["mu"])
    freqs = parse_values(src, table, "frequencies", data["frequencies"])
    if np.any(freqs < 0):
        raise _err(src, table, "frequencies", data["frequencies"], "frequencies >= 0 (Hz)")
    modulate = data.get("modulate", "mean")
    if modulate not in ("mean", "noise", "sigma"):
        raise _err(src, table, "modulate", modulate, "'mean', 'noise' (sigma^2) or 'sigma'")
    if modulate != "mean" and not white:
        raise _err(src, table, "modulate", modulate,
                   f"'mean' ('{modulate}' needs [noise] kind = 'white' or 'coloured')")
    return TransferCurve(mu, freqs, modulate)


#: Analysis table name → parser.
ANALYSIS_TABLES = {"gain": _parse_gain, "stationary": _parse_stationary, "transfer": _parse_transfer,
                   "approximations": _parse_approximations}


def parse_analyses(src, data: dict, white: bool) -> tuple:
    """The analysis objects named by the tables of ``data``, in a fixed order."""
    return tuple((name, parser(src, name, data[name], white)) for name, parser in ANALYSIS_TABLES.items()
                 if name in data)
