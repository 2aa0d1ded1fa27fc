"""Networks of coupled populations: specification, recurrent input, time integration.

A :class:`Circuit` is a set of named :class:`Cohort` objects (each a
:class:`~popdens.Population` with its external input and, for the Monte
Carlo twin, a size) and :class:`Pathway` objects (synapses from one
cohort to another, or to itself).

Recurrent input (diffusion approximation)
-----------------------------------------
A pathway from cohort ``l`` to cohort ``k`` gives each neuron of ``k``
``in_degree`` = C_kl inputs from randomly chosen neurons of ``l``, each with
a postsynaptic potential jump ``weight`` = J_kl (mV), a ``delay`` d_kl (ms)
and a synaptic kernel ``K``: instantaneous (``tau_syn = 0``) or
exponential, ``K(t) = exp(-t/tau_syn)/tau_syn``.  In the diffusion
approximation (Amit & Brunel 1997, Cereb. Cortex 7:237; Brunel 2000,
J. Comput. Neurosci. 8:183) the drive and noise amplitude of ``k`` are

.. math::
    \\mu_k(t) = \\mu_{{\\rm ext},k}(t) + \\tau_{m,k}\\sum_l J_{kl} C_{kl}\\,(K * A_l)(t - d_{kl}),\\\\
    \\sigma_k^2(t) = \\sigma_{{\\rm ext},k}^2 + \\tau_{m,k}\\sum_l J_{kl}^2 C_{kl}\\,(K * A_l)(t - d_{kl}),

with the rates ``A_l`` in Hz converted to 1/ms (``tau_m [ms] * J [mV] * C *
A [1/ms]`` is in mV).  An optional :class:`PoissonBackground` adds
``tau_m J_ext C_ext nu_ext`` to the drive and ``tau_m J_ext^2 C_ext nu_ext`` to
the variance.  Escape-noise cohorts receive only the mean input; their
noise is the escape function.

Time integration
----------------
:func:`simulate_network` steps every cohort's density solver together.
Rates are the step means returned by the solvers, located at step
midpoints and interpolated linearly in between; the delayed rate enters the
exponential filter, which is integrated exactly for a piecewise-linear
input.  A delayed rate that would be needed before the last completed step
midpoint (delays shorter than 1.5 dt) is held at its last known value.
"""

from __future__ import annotations

import logging
import math
import numbers
import time
from dataclasses import dataclass, field
from typing import Sequence, Union

import numpy as np

from . import __version__
from . import _validation as v
from ._recording import make_grid
from .drive import Constant, Drive, as_drive
from .noise import EscapeNoise, Population, WhiteNoise
from .progress import Progress
from .result import STATUS_FAILED, STATUS_INTERRUPTED, STATUS_OK, _atomic_write
from .solvers import resolve_method
from .solvers.fokker_planck import LOWER_STDS

__all__ = ["Cohort", "Pathway", "PoissonBackground", "Circuit", "CircuitResult", "simulate_network",
           "montecarlo_network"]

logger = logging.getLogger(__name__)

#: Hz -> 1/ms.
HZ_TO_PER_MS = 1e-3
#: Default time step of the network integrators (ms).
DEFAULT_DT = 0.1
#: Extra room below the automatic Fokker--Planck grid, in units of
#: (threshold - reset), because recurrent inhibition may push the drive
#: below its initial value during a run.
EXTRA_LOWER_SPANS = 1.0
#: Relative tolerance for "the delay is a whole number of steps".
STEP_TOL = 1e-9
#: Steps per block between progress updates.
PROGRESS_BLOCK = 500
#: Mean field: most steps advanced per solver call (the delays set the actual block).
MAX_BLOCK_STEPS = 1000
#: Monte Carlo: steps per compiled call (progress, interruption, spike-buffer growth).
MC_BLOCK = 1000
#: Monte Carlo: default burn-in (ms) before t = 0, discarded.
DEFAULT_BURN_IN_MS = 200.0
#: Monte Carlo: initial capacity of the spike buffer, spikes per neuron.
SPIKES_PER_NEURON_GUESS = 8


def _name(kind: str, value) -> str:
    if not isinstance(value, str) or not value.strip():
        raise ValueError(f"`{kind}` must be a non-empty string, got {value!r}")
    return value


def _count(name: str, value) -> int:
    if isinstance(value, bool) or not isinstance(value, (numbers.Integral, np.integer)):
        if isinstance(value, (float, np.floating)) and float(value).is_integer():
            value = int(value)
        else:
            raise ValueError(f"`{name}` must be a positive integer, got {value!r}")
    if value <= 0:
        raise ValueError(f"`{name}` must be a positive integer, got {value!r}")
    return int(value)


@dataclass(frozen=True)
class PoissonBackground:
    """External input from ``count`` independent Poisson spike trains per neuron.

    Parameters
    ----------
    rate : float
        Rate of each train (Hz), >= 0.
    weight : float
        PSP jump per input spike (mV).
    count : int
        Number of trains per neuron (> 0).

    Notes
    -----
    In the mean-field equations it adds ``tau_m * weight * count * rate``
    (mV) to the drive and ``tau_m * weight**2 * count * rate`` (mV^2) to the
    noise variance (Brunel 2000); the Monte Carlo twin draws the spikes.
    """

    rate: float
    weight: float
    count: int

    def __post_init__(self):
        object.__setattr__(self, "rate", v.non_negative("rate", self.rate))
        object.__setattr__(self, "weight", v.as_finite_float("weight", self.weight))
        object.__setattr__(self, "count", _count("count", self.count))

    def mean(self, tau_m: float) -> float:
        """Drive contribution (mV)."""
        return tau_m * self.weight * self.count * self.rate * HZ_TO_PER_MS

    def variance(self, tau_m: float) -> float:
        """Variance contribution (mV^2)."""
        return tau_m * self.weight ** 2 * self.count * self.rate * HZ_TO_PER_MS


@dataclass(frozen=True)
class Cohort:
    """A named population inside a circuit, with its external input.

    Parameters
    ----------
    name : str
        Unique name, used by pathways and results.
    population : Population
        Neuron model and noise model.
    size : int
        Number of neurons in the Monte Carlo twin (default 1000).
    drive : float or Drive
        External drive ``mu_ext(t)`` (mV).
    sigma_ext : float or Drive, optional
        External white-noise amplitude (mV), white-noise populations only.
        Default: the population's own ``WhiteNoise.sigma``.  May be 0 when the
        recurrent or Poisson input supplies the noise.
    background : PoissonBackground, optional
        External Poisson input, added to ``drive`` and ``sigma_ext``.
    """

    name: str
    population: Population
    size: int = 1000
    drive: Union[float, Drive] = 0.0
    sigma_ext: Union[float, Drive, None] = None
    background: PoissonBackground | None = None

    def __post_init__(self):
        _name("name", self.name)
        if not isinstance(self.population, Population):
            raise ValueError(f"cohort {self.name!r}: `population` must be a popdens.Population, "
                             f"got {self.population!r}")
        object.__setattr__(self, "size", _count("size", self.size))
        object.__setattr__(self, "drive", as_drive(self.drive))
        noise = self.population.noise
        if isinstance(noise, EscapeNoise):
            if self.sigma_ext is not None:
                raise ValueError(f"cohort {self.name!r}: `sigma_ext` applies to white-noise populations; "
                                 "this one has escape noise")
            sig = None
        else:
            sig = noise.sigma if self.sigma_ext is None else self.sigma_ext
            if not isinstance(sig, Drive):
                sig = Constant(v.non_negative("sigma_ext", sig))
        object.__setattr__(self, "sigma_ext", sig)
        if self.background is not None and not isinstance(self.background, PoissonBackground):
            raise ValueError(f"cohort {self.name!r}: `background` must be a PoissonBackground, "
                             f"got {self.background!r}")

    @property
    def diffusive(self) -> bool:
        """True for white-noise populations (recurrent input also adds variance)."""
        return isinstance(self.population.noise, WhiteNoise)

    @property
    def tau_m(self) -> float:
        return float(self.population.neuron.tau_m)

    def external_mean(self, t) -> np.ndarray | float:
        """External drive (mV) at times ``t`` (ms), Poisson background included."""
        m = self.drive(t)
        if self.background is not None:
            m = m + self.background.mean(self.tau_m)
        return m

    def external_variance(self, t) -> np.ndarray | float:
        """External noise variance (mV^2) at times ``t`` (ms); 0 for escape noise."""
        if not self.diffusive:
            return 0.0 * np.asarray(t, dtype=float) if np.ndim(t) else 0.0
        s = self.sigma_ext(t)
        var = s * s
        if self.background is not None:
            var = var + self.background.variance(self.tau_m)
        return var


@dataclass(frozen=True)
class Pathway:
    """Synapses from cohort ``source`` onto cohort ``target``.

    Parameters
    ----------
    source, target : str
        Cohort names (may be equal: recurrent connections).
    weight : float
        PSP jump J (mV) per presynaptic spike; negative for inhibition.
    in_degree : int
        Number of presynaptic partners C of each target neuron (> 0).
    delay : float
        Transmission delay d (ms), >= 0 (the time integrators need at
        least one time step).
    tau_syn : float
        Synaptic time constant (ms): 0 for instantaneous synapses, > 0 for an
        exponential kernel ``exp(-t/tau_syn)/tau_syn`` (unit area, so the PSP
        integral is the same as for the jump).
    """

    source: str
    target: str
    weight: float
    in_degree: int
    delay: float = 1.0
    tau_syn: float = 0.0

    def __post_init__(self):
        _name("source", self.source)
        _name("target", self.target)
        object.__setattr__(self, "weight", v.as_finite_float("weight", self.weight))
        object.__setattr__(self, "in_degree", _count("in_degree", self.in_degree))
        object.__setattr__(self, "delay", v.non_negative("delay", self.delay))
        object.__setattr__(self, "tau_syn", v.non_negative("tau_syn", self.tau_syn))

    @property
    def label(self) -> str:
        return f"{self.source}->{self.target}"

    def kernel_laplace(self, lam):
        """Laplace transform of kernel times delay, ``K(lam) exp(-lam d)``; ``lam`` in 1/ms."""
        lam = np.asarray(lam, dtype=complex)
        k = np.exp(-lam * self.delay)
        if self.tau_syn > 0:
            k = k / (1.0 + lam * self.tau_syn)
        return k


@dataclass(frozen=True)
class Circuit:
    """Cohorts coupled by pathways (validated at construction).

    Parameters
    ----------
    cohorts : sequence of Cohort
        At least one, with unique names.
    pathways : sequence of Pathway
        Each naming existing cohorts; the Monte Carlo twin draws
        ``in_degree`` distinct partners (no self-connections within an
        cohort), so ``in_degree`` must not exceed the source size
        (minus one for a recurrent pathway).

    Examples
    --------
    >>> import popdens
    >>> from popdens.network import Cohort, Pathway, Circuit
    >>> pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(5.0))
    >>> c = Circuit([Cohort("E", pop, size=400, drive=15.0)],
    ...             [Pathway("E", "E", weight=0.1, in_degree=40, delay=1.5)])
    >>> c.names
    ('E',)
    """

    cohorts: Sequence[Cohort]
    pathways: Sequence[Pathway] = field(default_factory=tuple)

    def __post_init__(self):
        asm = tuple(self.cohorts) if not isinstance(self.cohorts, Cohort) else (self.cohorts,)
        if not asm:
            raise ValueError("`cohorts` must contain at least one Cohort")
        for a in asm:
            if not isinstance(a, Cohort):
                raise ValueError(f"`cohorts` must contain Cohort objects, got {a!r}")
        names = [a.name for a in asm]
        dup = sorted({n for n in names if names.count(n) > 1})
        if dup:
            raise ValueError(f"cohort names must be unique; repeated: {dup}")
        pw = tuple(self.pathways)
        for p in pw:
            if not isinstance(p, Pathway):
                raise ValueError(f"`pathways` must contain Pathway objects, got {p!r}")
            for role in ("source", "target"):
                nm = getattr(p, role)
                if nm not in names:
                    raise ValueError(f"pathway {p.label}: unknown {role} cohort {nm!r}; known: {names}")
            n_src = asm[names.index(p.source)].size
            limit = n_src - 1 if p.source == p.target else n_src
            if p.in_degree > limit:
                raise ValueError(
                    f"pathway {p.label}: `in_degree` = {p.in_degree} exceeds the {limit} distinct partners "
                    f"available in cohort {p.source!r} (size {n_src}"
                    + (", no self-connections)" if p.source == p.target else ")"))
        object.__setattr__(self, "cohorts", asm)
        object.__setattr__(self, "pathways", pw)

    # ---------------------------------------------------------- structure
    @property
    def names(self) -> tuple[str, ...]:
        return tuple(a.name for a in self.cohorts)

    @property
    def n(self) -> int:
        return len(self.cohorts)

    def index(self, name: str) -> int:
        """Position of the cohort called ``name``."""
        try:
            return self.names.index(name)
        except ValueError:
            raise ValueError(f"unknown cohort {name!r}; known: {list(self.names)}") from None

    def coupling(self) -> tuple[np.ndarray, np.ndarray]:
        """Stationary coupling matrices ``(W_mean, W_var)``.

        ``W_mean[k, l]`` (mV/Hz) is the drive of ``k`` per Hz of rate of
        ``l``, ``tau_m,k * sum J_kl C_kl / 1000``; ``W_var[k, l]`` (mV^2/Hz)
        the added variance, zero for escape-noise targets.
        """
        wm = np.zeros((self.n, self.n))
        wv = np.zeros((self.n, self.n))
        for p in self.pathways:
            k, l = self.index(p.target), self.index(p.source)
            a = self.cohorts[k]
            wm[k, l] += a.tau_m * p.weight * p.in_degree * HZ_TO_PER_MS
            if a.diffusive:
                wv[k, l] += a.tau_m * p.weight ** 2 * p.in_degree * HZ_TO_PER_MS
        return wm, wv

    def stationary_input(self, rates, t: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
        """Drive and noise amplitude of every cohort for constant rates.

        Parameters
        ----------
        rates : array_like, shape (n,)
            Rates (Hz), in the order of :attr:`names`.
        t : float
            Time (ms) at which the external input is taken (default 0).

        Returns
        -------
        mu, sigma : ndarray, shape (n,)
            Drive (mV) and noise amplitude (mV; NaN for escape noise).
        """
        r = np.asarray(rates, dtype=float)
        if r.shape != (self.n,):
            raise ValueError(f"`rates` must have shape ({self.n},) (Hz), got {r.shape}")
        wm, wv = self.coupling()
        mu = np.array([a.external_mean(t) for a in self.cohorts]) + wm @ r
        var = np.array([a.external_variance(t) for a in self.cohorts]) + wv @ r
        sigma = np.where([a.diffusive for a in self.cohorts], np.sqrt(np.maximum(var, 0.0)), np.nan)
        return mu, sigma

    def population_at(self, k: int, sigma: float | None) -> Population:
        """The population of cohort ``k`` with its white noise set to ``sigma`` (mV)."""
        a = self.cohorts[k]
        if not a.diffusive:
            return a.population
        return Population(a.population.neuron, WhiteNoise(float(sigma)))


# ---------------------------------------------------------------------------
# results
# ---------------------------------------------------------------------------

@dataclass(frozen=True, eq=False)
class CircuitResult:
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
        ``t`` (mean-field integration only).
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
        _atomic_write(path, lambda fh: np.savez_compressed(fh, **arrays))
        return path

    def plot(self, ax=None, **kwargs):
        """Rates (Hz) of every cohort against time (ms); returns the Axes."""
        from .plotting import _axes

        ax = _axes(ax)
        for k, nm in enumerate(self.names):
            ax.plot(self.t[1:], self.rate[k, 1:], label=f"{nm} ({self.method})", **kwargs)
        ax.set_xlabel("time (ms)")
        ax.set_ylabel("population rate (Hz)")
        ax.legend(frameon=False)
        return ax

    def __repr__(self) -> str:
        return (f"<CircuitResult {self.method}: {list(self.names)}, {self.t.size} times to {self.t[-1]:g} ms, "
                f"status={self.status} ({self.message})>")


# ---------------------------------------------------------------------------
# mean-field time integration
# ---------------------------------------------------------------------------

class _DelayLine:
    """Delayed, filtered rate of one pathway for the mean-field integrator.

    Rates are step means (1/ms) at step midpoints; the value at a delayed
    time is interpolated linearly between midpoints (held at the last
    known midpoint beyond it).  The exponential filter is integrated exactly
    for that piecewise-linear input.
    """

    def __init__(self, pathway: Pathway, dt: float, r0: float, n_steps: int):
        self.d = pathway.delay
        self.tau = pathway.tau_syn
        self.dt = dt
        self.hist = np.full(n_steps + 2, np.nan)
        self.r0 = r0
        self.s = r0  # filtered value at the current boundary (1/ms)
        self.e = math.exp(-dt / self.tau) if self.tau > 0 else 0.0

    def delayed(self, t: float, known: int) -> float:
        """Rate (1/ms) at time ``t - d`` given ``known`` completed steps.

        Steps before t = 0 count as having had the initial rate.
        """
        x = (t - self.d) / self.dt - 0.5  # position in units of step midpoints
        last = known - 1
        if x >= last:
            return self.hist[last] if last >= 0 else self.r0
        j = int(math.floor(x))
        w = x - j
        lo = self.hist[j] if j >= 0 else self.r0
        hi = self.hist[j + 1] if j + 1 >= 0 else self.r0
        return (1.0 - w) * lo + w * hi

    def advance_filter(self, a0: float, a1: float) -> float:
        """Exact exponential filter over one step for input linear from a0 to a1 (1/ms)."""
        if self.tau <= 0.0:
            self.s = a1
            return a1
        e = self.e
        h = self.dt
        slope = (a1 - a0) / h
        # s' = (a - s)/tau with a(t) = a0 + slope t: s(h) = a1 - tau slope + (s0 - a0 + tau slope) e
        self.s = a1 - self.tau * slope + (self.s - a0 + self.tau * slope) * e
        return self.s


def simulate_network(circuit: Circuit, t_end: float, dt: float | None = None, *, initial_rates=None,
                     record_interval: float | None = None, solver_options: dict | None = None,
                     progress: bool | None = None) -> CircuitResult:
    """Integrate the coupled population-density equations of a circuit.

    Every cohort is solved by its density solver (refractory density for
    escape noise, Fokker--Planck for white noise); all are stepped together,
    coupled through delayed, filtered rates (module docstring).

    Parameters
    ----------
    circuit : Circuit
    t_end : float
        Duration (ms).
    dt : float, optional
        Common step (ms), default 0.1; must divide ``t_end``.  Every delay
        must be >= ``dt``.
    initial_rates : array_like, optional
        Rates (Hz) of the past (t <= 0), one per cohort; default 0.  Each
        solver starts in the stationary state of the input these rates give.
    record_interval : float, optional
        Output interval (ms), a multiple of ``dt``; rates are averaged over it.
    solver_options : dict, optional
        ``{cohort name: {option: value}}`` passed to the solvers (e.g.
        ``n_cells``, ``u_min`` for Fokker--Planck, ``max_age`` for escape).
    progress : bool, optional
        Progress line on stderr (default: only on a terminal, long runs).

    Returns
    -------
    CircuitResult
        ``rate`` (Hz), ``mu`` (mV) and ``sigma`` (mV) per cohort.

    Examples
    --------
    >>> import popdens
    >>> from popdens.network import Cohort, Pathway, Circuit, simulate_network
    >>> pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(5.0))
    >>> c = Circuit([Cohort("E", pop, drive=15.0)], [Pathway("E", "E", 0.1, 40, delay=1.5)])
    >>> res = simulate_network(c, 20.0)
    >>> res.rate.shape
    (1, 201)
    """
    if not isinstance(circuit, Circuit):
        raise ValueError(f"`circuit` must be a popdens.network.Circuit, got {circuit!r}")
    dt = DEFAULT_DT if dt is None else dt
    grid = make_grid(t_end, dt, record_interval, None)
    dt = grid.dt
    nk = circuit.n
    for p in circuit.pathways:
        if p.delay < dt * (1.0 - STEP_TOL):
            raise ValueError(f"pathway {p.label}: `delay` = {p.delay!r} ms is shorter than the step "
                             f"`dt` = {dt!r} ms; use a smaller dt or a longer delay")
    r0 = np.zeros(nk) if initial_rates is None else np.asarray(initial_rates, dtype=float)
    if r0.shape != (nk,) or not np.all(np.isfinite(r0)) or np.any(r0 < 0):
        raise ValueError(f"`initial_rates` must be {nk} finite rates >= 0 (Hz), got {initial_rates!r}")
    solver_options = {} if solver_options is None else dict(solver_options)
    for nm in solver_options:
        circuit.index(nm)

    lines = [_DelayLine(p, dt, r0[circuit.index(p.source)] * HZ_TO_PER_MS, grid.n_steps)
             for p in circuit.pathways]
    tgt = [circuit.index(p.target) for p in circuit.pathways]
    src = [circuit.index(p.source) for p in circuit.pathways]
    cmean = [circuit.cohorts[k].tau_m * p.weight * p.in_degree for p, k in zip(circuit.pathways, tgt)]
    cvar = [circuit.cohorts[k].tau_m * p.weight ** 2 * p.in_degree if circuit.cohorts[k].diffusive else 0.0
            for p, k in zip(circuit.pathways, tgt)]
    tq = grid.step_times(0, grid.n_steps)
    ext_mu = np.array([np.broadcast_to(a.external_mean(tq), tq.shape) for a in circuit.cohorts])
    ext_var = np.array([np.broadcast_to(a.external_variance(tq), tq.shape) for a in circuit.cohorts])
    if not (np.all(np.isfinite(ext_mu)) and np.all(np.isfinite(ext_var))):
        raise ValueError("the external drive or noise of a cohort is not finite on [0, t_end]")
    diffusive = [a.diffusive for a in circuit.cohorts]

    def inputs(j: int, s_values) -> tuple[np.ndarray, np.ndarray]:
        mu = ext_mu[:, j].copy()
        var = ext_var[:, j].copy()
        for q in range(len(lines)):
            mu[tgt[q]] += cmean[q] * s_values[q]
            var[tgt[q]] += cvar[q] * s_values[q]
        return mu, np.sqrt(np.maximum(var, 0.0))

    wall0 = time.perf_counter()
    mu0, sg0 = inputs(0, [ln.s for ln in lines])
    solvers = []
    for k, a in enumerate(circuit.cohorts):
        cls = resolve_method(a.population, None)
        opts = dict(solver_options.get(a.name, {}))
        if diffusive[k]:
            if not sg0[k] > 0:
                raise ValueError(f"cohort {a.name!r}: the noise amplitude at t = 0 is {sg0[k]!r} mV; "
                                 "white-noise populations need sigma > 0 (external or recurrent)")
            nrn = a.population.neuron
            if "u_min" not in opts and "grid" not in opts:
                base = min(float(nrn.reset), float(nrn.rest) + min(float(mu0[k]), 0.0))
                opts["u_min"] = (base - LOWER_STDS * sg0[k] / math.sqrt(2.0)
                                 - EXTRA_LOWER_SPANS * (float(nrn.boundary) - float(nrn.reset)))
        try:
            s = cls(a.population, dt, **opts)
        except TypeError as exc:
            raise ValueError(f"cohort {a.name!r}: bad solver option in {sorted(opts)}: {exc}") from None
        s.initialize(float(mu0[k]), float(sg0[k]) if diffusive[k] else None, "stationary")
        solvers.append(s)

    n = grid.n_steps
    rate = np.empty((nk, n))
    mus = np.empty((nk, n + 1))
    sgs = np.empty((nk, n + 1))
    mus[:, 0], sgs[:, 0] = mu0, sg0
    rate_init = np.array([s.instantaneous_rate(float(mu0[k]), float(sg0[k]) if diffusive[k] else None)
                          for k, s in enumerate(solvers)])
    a_prev = [ln.delayed(0.0, 0) for ln in lines]
    # Block of steps whose delayed input is already known from completed steps: the drive at
    # t_{j+b+1} needs rates up to (t_{j+b+1} - d)/dt - 1/2 <= j - 1 midpoints, i.e. b <= d/dt - 3/2.
    # Advancing such a block in one solver call gives the same numbers as single steps, without
    # the per-call overhead (measured: 53 vs 30 us per Fokker-Planck step of 400 cells).
    block = MAX_BLOCK_STEPS
    for p in circuit.pathways:
        block = min(block, max(1, int(math.floor(p.delay / dt - 0.5 + STEP_TOL))))
    bar = Progress(n, "network mean-field", progress)
    status, message = STATUS_OK, "completed"
    done = 0
    try:
        j = 0
        while j < n:
            nb = min(block, n - j)
            for b in range(nb):
                t1 = (j + b + 1) * dt
                s_new = []
                for q, ln in enumerate(lines):
                    a1 = ln.delayed(t1, j)
                    s_new.append(ln.advance_filter(a_prev[q], a1))
                    a_prev[q] = a1
                mus[:, j + b + 1], sgs[:, j + b + 1] = inputs(j + b + 1, s_new)
            for k, s in enumerate(solvers):
                if diffusive[k]:
                    r, _, _ = s.advance(mus[k, j:j + nb + 1], sgs[k, j:j + nb + 1])
                else:
                    r, _, _ = s.advance(mus[k, j:j + nb + 1])
                if s.status != STATUS_OK:
                    status, message = STATUS_FAILED, f"cohort {circuit.names[k]!r}: {s.message}"
                    break
                rate[k, j:j + nb] = r
            if status != STATUS_OK:
                break
            for q, ln in enumerate(lines):
                ln.hist[j:j + nb] = rate[src[q], j:j + nb] * HZ_TO_PER_MS
            j += nb
            done = j
            if (done // nb) % max(1, PROGRESS_BLOCK // nb) == 0:
                bar.update(done)
    except KeyboardInterrupt:
        status, message = STATUS_INTERRUPTED, f"interrupted by the user at t = {done * dt:g} ms"
        logger.warning(message)
    finally:
        bar.close()
    e = grid.every
    n_out = done // e
    r_out = np.concatenate([rate_init[:, None], rate[:, : n_out * e].reshape(nk, n_out, e).mean(axis=2)], axis=1)
    idx = np.arange(n_out + 1) * e
    sg_out = np.where(np.array(diffusive)[:, None], sgs[:, idx], np.nan)
    mass = [abs(s.mass() - 1.0) for s in solvers]
    return CircuitResult(
        names=circuit.names, t=idx * dt, rate=r_out, mu=mus[:, idx], sigma=sg_out, method="mean-field",
        status=status, message=message, dt=dt,
        diagnostics={"wall_time_s": time.perf_counter() - wall0, "version": __version__, "steps": done,
                     "mass_error": max(mass),
                     "solvers": {nm: s.method_name for nm, s in zip(circuit.names, solvers)},
                     **{f"{nm}:{k}": val for nm, s in zip(circuit.names, solvers)
                        for k, val in s.diagnostics().items()}},
    )


# ---------------------------------------------------------------------------
# Monte Carlo twin
# ---------------------------------------------------------------------------

def _flat(arrays, dtype):
    ptr = np.zeros(len(arrays) + 1, dtype=np.int64)
    for i, a in enumerate(arrays):
        ptr[i + 1] = ptr[i] + np.asarray(a).size
    flat = np.concatenate([np.asarray(a, dtype=dtype).ravel() for a in arrays]) if arrays else np.zeros(0, dtype)
    return np.ascontiguousarray(flat, dtype=dtype), ptr


def _delay_steps(p: Pathway, dt: float) -> int:
    m = int(round(p.delay / dt))
    if m < 1 or abs(p.delay / dt - m) > STEP_TOL * max(1.0, m):
        raise ValueError(f"pathway {p.label}: `delay` = {p.delay!r} ms must be a whole number (>= 1) of "
                         f"steps `dt` = {dt!r} ms in the Monte Carlo twin")
    return m


def montecarlo_network(circuit: Circuit, t_end: float, dt: float | None = None, seed=None, *,
                       burn_in: float | None = None, record_interval: float | None = None,
                       record_spikes: bool = False, bridge: bool = True,
                       progress: bool | None = None) -> CircuitResult:
    """Direct simulation of the spiking network a circuit describes.

    Each cohort has ``size`` neurons; each pathway gives every target
    neuron ``in_degree`` distinct, randomly chosen presynaptic neurons
    (fixed in-degree, no self-connections), with the pathway's PSP jump,
    delay and synaptic kernel.  External input: the drive, white noise of
    amplitude ``sigma_ext`` (white-noise cohorts) and, if given,
    independent Poisson spike trains (:class:`PoissonBackground`).  See
    :mod:`popdens._mc_network` for the step.

    Parameters
    ----------
    circuit : Circuit
    t_end : float
        Duration (ms) after the burn-in.
    dt : float, optional
        Step (ms), default 0.1; every delay must be a whole number (>= 1) of steps.
    seed : int or numpy.random.Generator, optional
        The same seed gives bit-identical results (connectivity included).
    burn_in : float, optional
        Time (ms) simulated before t = 0 at the external input of t = 0 and
        discarded; default 200 ms.  Neurons start at potentials drawn
        uniformly between reset and threshold.
    record_interval : float, optional
        Bin width (ms) of the rates; default ``dt``.
    record_spikes : bool
        Keep spike times (ms) and neuron ids.
    bridge : bool
        Brownian-bridge crossing detection for white noise (default True).
    progress : bool, optional
        Progress line on stderr (default: only on a terminal, long runs).

    Returns
    -------
    CircuitResult
        ``rate`` (Hz; spike count per bin / (size * bin width)), ``mean_u``
        (mV); ``rate[:, 0]`` is NaN (a finite network has no instantaneous
        rate).  ``diagnostics`` holds the numbers of synapses, spikes and
        synaptic events and the wall time.
    """
    from ._mc_escape import seed_compiled_rng
    from ._mc_network import NOISE_ESCAPE, NOISE_WHITE, csr_by_source, draw_in_degree, run_network

    if not isinstance(circuit, Circuit):
        raise ValueError(f"`circuit` must be a popdens.network.Circuit, got {circuit!r}")
    dt = DEFAULT_DT if dt is None else dt
    grid = make_grid(t_end, dt, record_interval, None)
    dt = grid.dt
    burn_in = DEFAULT_BURN_IN_MS if burn_in is None else v.non_negative("burn_in", burn_in)
    n_burn = int(round(burn_in / dt))
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    asm = circuit.cohorts
    npop = circuit.n
    sizes = np.array([a.size for a in asm], dtype=np.int64)
    start = np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)
    n_total = int(start[-1])
    wall0 = time.perf_counter()

    # -- per-cohort parameters
    nrns = [a.population.neuron for a in asm]
    noise = np.array([NOISE_WHITE if a.diffusive else NOISE_ESCAPE for a in asm], dtype=np.int64)
    ncode = np.array([n_.code for n_ in nrns], dtype=np.int64)
    tau_m = np.array([n_.tau_m for n_ in nrns], dtype=float)
    reset = np.array([n_.reset for n_ in nrns], dtype=float)
    boundary = np.array([n_.boundary for n_ in nrns], dtype=float)
    has_cutoff = np.array([bool(n_.has_cutoff) for n_ in nrns])
    tau_ref = np.array([n_.refractory for n_ in nrns], dtype=float)
    theta = np.array([n_.threshold for n_ in nrns], dtype=float)
    hzs = [a.population.noise.hazard if not a.diffusive else None for a in asm]
    hcode = np.array([h.code if h is not None else 0 for h in hzs], dtype=np.int64)
    uses_slope = np.array([bool(h.uses_slope) if h is not None else False for h in hzs])
    npar_flat, npar_ptr = _flat([n_.kernel_params for n_ in nrns], float)
    nops_flat, nprog_ptr = _flat([n_.program[0] for n_ in nrns], np.int64)
    nargs_flat, _ = _flat([n_.program[1] for n_ in nrns], float)
    hpar_flat, hpar_ptr = _flat([h.kernel_params if h is not None else np.zeros(1) for h in hzs], float)
    hops_flat, hprog_ptr = _flat([h.program[0] if h is not None else np.zeros(1, np.int64) for h in hzs], np.int64)
    hargs_flat, _ = _flat([h.program[1] if h is not None else np.zeros(1) for h in hzs], float)
    size = max([n_.program[0].size for n_ in nrns] + [h.program[0].size for h in hzs if h is not None]) + 2
    stack = np.empty(size)
    xbuf = np.zeros(3)
    bg_lam = np.array([a.background.count * a.background.rate * dt * 1e-3 if a.background else 0.0 for a in asm])
    bg_drive = np.array([a.tau_m * a.background.weight / dt if a.background else 0.0 for a in asm])

    # -- pathways: delays, drives, ring buffers, connectivity
    pws = circuit.pathways
    nq = len(pws)
    q_src = np.array([circuit.index(p.source) for p in pws], dtype=np.int64)
    q_tgt = np.array([circuit.index(p.target) for p in pws], dtype=np.int64)
    q_m = np.array([_delay_steps(p, dt) for p in pws], dtype=np.int64)
    q_head = np.zeros(nq, dtype=np.int64)
    q_decay = np.array([math.exp(-dt / p.tau_syn) if p.tau_syn > 0 else 0.0 for p in pws])
    q_drive = np.array([
        asm[q_tgt[q]].tau_m * p.weight * ((-math.expm1(-dt / p.tau_syn)) if p.tau_syn > 0 else 1.0) / dt
        for q, p in enumerate(pws)])
    buf_len = [(q_m[q] + 1) * sizes[q_tgt[q]] for q in range(nq)]
    q_buf_off = np.concatenate([[0], np.cumsum(buf_len)]).astype(np.int64)[:nq]
    x_len = [sizes[q_tgt[q]] for q in range(nq)]
    q_x_off = np.concatenate([[0], np.cumsum(x_len)]).astype(np.int64)[:nq]
    buf = np.zeros(int(sum(buf_len)) if nq else 1, dtype=np.float32)  # spike counts: exact up to 2**24
    xs = np.zeros(int(sum(x_len)) if nq else 1)
    seed_compiled_rng(int(rng.integers(0, 2**31 - 1)))
    ptrs, idxs = [], []
    for q, p in enumerate(pws):
        ns = int(sizes[q_src[q]])
        perm = np.arange(ns, dtype=np.int32)
        sources = draw_in_degree(int(sizes[q_tgt[q]]), ns, p.in_degree, p.source == p.target, perm)
        ptr, tg = csr_by_source(sources, p.in_degree, ns)
        ptrs.append(ptr)
        idxs.append(tg)
    ptr_flat, q_ptr_off = _flat(ptrs, np.int64) if nq else (np.zeros(1, np.int64), np.zeros(1, np.int64))
    idx_flat, q_idx_off = _flat(idxs, np.int32) if nq else (np.zeros(1, np.int32), np.zeros(1, np.int64))
    in_lists = [[q for q in range(nq) if q_tgt[q] == k] for k in range(npop)]
    out_lists = [[q for q in range(nq) if q_src[q] == k] for k in range(npop)]
    in_list, in_ptr = _flat([np.array(x, dtype=np.int64) for x in in_lists], np.int64)
    out_list, out_ptr = _flat([np.array(x, dtype=np.int64) for x in out_lists], np.int64)
    if in_list.size == 0:
        in_list = np.zeros(1, np.int64)
    if out_list.size == 0:
        out_list = np.zeros(1, np.int64)
    n_synapses = int(sum(p.in_degree * sizes[q_tgt[q]] for q, p in enumerate(pws)))

    # -- neuron state
    u = np.empty(n_total)
    for k, n_ in enumerate(nrns):
        hi = n_.threshold if n_.threshold > n_.reset else n_.boundary
        u[start[k]:start[k + 1]] = rng.uniform(n_.reset, hi, size=int(sizes[k]))
    ref = np.zeros(n_total)
    age = np.repeat(tau_ref + 0.0, sizes)
    lam = np.zeros(n_total)
    thr = rng.exponential(1.0, size=n_total)
    hz = np.zeros(n_total)

    def ext(times):
        # the Poisson background is drawn as spikes, so only the drive and the white noise enter here
        mu = np.array([np.broadcast_to(a.drive(times), times.shape) for a in asm], dtype=float)
        var = np.array([np.broadcast_to(a.sigma_ext(times) ** 2 if a.diffusive else 0.0 * times, times.shape)
                        for a in asm], dtype=float)
        if not (np.all(np.isfinite(mu)) and np.all(np.isfinite(var)) and np.all(var >= 0)):
            raise FloatingPointError("the external drive or noise is not finite (or negative variance)")
        return np.ascontiguousarray(mu), np.ascontiguousarray(np.sqrt(var))

    fixed = (start, noise, ncode, tau_m, reset, boundary, has_cutoff, tau_ref, hcode, theta, uses_slope,
             npar_flat, npar_ptr, nops_flat, nargs_flat, nprog_ptr, hpar_flat, hpar_ptr, hops_flat, hargs_flat,
             hprog_ptr, bg_lam, bg_drive)
    net = (q_src, q_tgt, q_m, q_head, q_buf_off, q_x_off, q_drive, q_decay, q_ptr_off, q_idx_off,
           in_ptr, in_list, out_ptr, out_list, buf, xs, ptr_flat, idx_flat, u, ref, age, lam, thr, hz)
    no_spk = (np.zeros(1), np.zeros(1, dtype=np.int64))
    mu_b, sg_b = ext(np.zeros(1))
    n_burn_spikes = 0
    for b0 in range(0, n_burn, MC_BLOCK):
        b1 = min(n_burn, b0 + MC_BLOCK)
        m_ = np.ascontiguousarray(np.repeat(mu_b, b1 - b0 + 1, axis=1))
        s_ = np.ascontiguousarray(np.repeat(sg_b, b1 - b0 + 1, axis=1))
        cnt = np.zeros((b1 - b0, npop), dtype=np.int64)
        mu_out = np.zeros((b1 - b0, npop))
        run_network(*fixed, m_, s_, dt, bool(bridge), *net, 0.0, False, *no_spk, 0, cnt, mu_out, stack, xbuf)
        n_burn_spikes += int(cnt.sum())

    n = grid.n_steps
    counts = np.zeros((n, npop), dtype=np.int64)
    mean_u = np.zeros((n, npop))
    cap = n_total * SPIKES_PER_NEURON_GUESS if record_spikes else 1
    spk_t = np.empty(cap)
    spk_i = np.empty(cap, dtype=np.int64)
    n_spk = 0
    bar = Progress(n, "network Monte Carlo", progress)
    k = 0
    status, message = STATUS_OK, "completed"
    try:
        for end in range(MC_BLOCK, n + MC_BLOCK, MC_BLOCK):
            end = min(end, n)
            while k < end:
                m_, s_ = ext(grid.step_times(k, end))
                done, n_spk, full = run_network(*fixed, m_, s_, dt, bool(bridge), *net, k * dt, bool(record_spikes),
                                                spk_t, spk_i, n_spk, counts[k:end], mean_u[k:end], stack, xbuf)
                k += done
                if full:
                    grow = max(cap, n_spk + n_total)
                    spk_t = np.concatenate([spk_t[:n_spk], np.empty(grow)])
                    spk_i = np.concatenate([spk_i[:n_spk], np.empty(grow, dtype=np.int64)])
                    cap = spk_t.size
            bar.update(k)
    except FloatingPointError as exc:
        status, message = STATUS_FAILED, str(exc)
    except KeyboardInterrupt:
        status, message = STATUS_INTERRUPTED, f"interrupted by the user at t = {k * dt:g} ms"
        logger.warning(message)
    finally:
        bar.close()
    e = grid.every
    n_out = k // e
    c_out = counts[: n_out * e].reshape(n_out, e, npop).sum(axis=1).T
    rate = c_out / (sizes[:, None] * e * dt * 1e-3)
    rate = np.concatenate([np.full((npop, 1), np.nan), rate], axis=1)
    idx = np.arange(n_out + 1) * e
    mu_rec = np.concatenate([np.full((npop, 1), np.nan), mean_u[e - 1: n_out * e: e].T], axis=1)
    n_spikes = int(counts[:k].sum())
    out_deg = {p.label: p.in_degree * int(sizes[q_tgt[q]]) / int(sizes[q_src[q]]) for q, p in enumerate(pws)}
    events = int(sum(counts[:k, q_src[q]].sum() * out_deg[p.label] for q, p in enumerate(pws)))
    return CircuitResult(
        names=circuit.names, t=idx * dt, rate=rate, method="montecarlo", mean_u=mu_rec,
        status=status, message=message, dt=dt, sizes=tuple(int(x) for x in sizes),
        spike_times=spk_t[:n_spk].copy() if record_spikes else None,
        spike_ids=spk_i[:n_spk].copy() if record_spikes else None,
        diagnostics={"wall_time_s": time.perf_counter() - wall0, "version": __version__, "steps": k,
                     "burn_in_ms": n_burn * dt, "burn_in_spikes": n_burn_spikes, "n_neurons": n_total,
                     "n_synapses": n_synapses, "n_spikes": n_spikes, "synaptic_events": events},
    )
