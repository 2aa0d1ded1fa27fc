"""Networks of coupled populations: specification, recurrent input, time integration.

A :class:`Circuit` is a set of named :class:`Assembly` objects (each a
:class:`~popdens.Population` with its external input and, for the Monte
Carlo twin, a size) and :class:`Pathway` objects (synapses from one
assembly to another, or to itself).

Recurrent input (diffusion approximation)
-----------------------------------------
A pathway from assembly ``l`` to assembly ``k`` gives each neuron of ``k``
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
the variance.  Escape-noise assemblies receive only the mean input; their
noise is the escape function.

Time integration
----------------
:func:`simulate_network` steps every assembly's density solver together.
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
from .result import STATUS_FAILED, STATUS_OK, _atomic_write
from .solvers import resolve_method
from .solvers.fokker_planck import LOWER_STDS

__all__ = ["Assembly", "Pathway", "PoissonBackground", "Circuit", "CircuitResult", "simulate_network"]

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
class Assembly:
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
            raise ValueError(f"assembly {self.name!r}: `population` must be a popdens.Population, "
                             f"got {self.population!r}")
        object.__setattr__(self, "size", _count("size", self.size))
        object.__setattr__(self, "drive", as_drive(self.drive))
        noise = self.population.noise
        if isinstance(noise, EscapeNoise):
            if self.sigma_ext is not None:
                raise ValueError(f"assembly {self.name!r}: `sigma_ext` applies to white-noise populations; "
                                 "this one has escape noise")
            sig = None
        else:
            sig = noise.sigma if self.sigma_ext is None else self.sigma_ext
            if not isinstance(sig, Drive):
                sig = Constant(v.non_negative("sigma_ext", sig))
        object.__setattr__(self, "sigma_ext", sig)
        if self.background is not None and not isinstance(self.background, PoissonBackground):
            raise ValueError(f"assembly {self.name!r}: `background` must be a PoissonBackground, "
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
    """Synapses from assembly ``source`` onto assembly ``target``.

    Parameters
    ----------
    source, target : str
        Assembly names (may be equal: recurrent connections).
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
    """Assemblies coupled by pathways (validated at construction).

    Parameters
    ----------
    assemblies : sequence of Assembly
        At least one, with unique names.
    pathways : sequence of Pathway
        Each naming existing assemblies; the Monte Carlo twin draws
        ``in_degree`` distinct partners (no self-connections within an
        assembly), so ``in_degree`` must not exceed the source size
        (minus one for a recurrent pathway).

    Examples
    --------
    >>> import popdens
    >>> from popdens.network import Assembly, Pathway, Circuit
    >>> pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(5.0))
    >>> c = Circuit([Assembly("E", pop, size=400, drive=15.0)],
    ...             [Pathway("E", "E", weight=0.1, in_degree=40, delay=1.5)])
    >>> c.names
    ('E',)
    """

    assemblies: Sequence[Assembly]
    pathways: Sequence[Pathway] = field(default_factory=tuple)

    def __post_init__(self):
        asm = tuple(self.assemblies) if not isinstance(self.assemblies, Assembly) else (self.assemblies,)
        if not asm:
            raise ValueError("`assemblies` must contain at least one Assembly")
        for a in asm:
            if not isinstance(a, Assembly):
                raise ValueError(f"`assemblies` must contain Assembly objects, got {a!r}")
        names = [a.name for a in asm]
        dup = sorted({n for n in names if names.count(n) > 1})
        if dup:
            raise ValueError(f"assembly names must be unique; repeated: {dup}")
        pw = tuple(self.pathways)
        for p in pw:
            if not isinstance(p, Pathway):
                raise ValueError(f"`pathways` must contain Pathway objects, got {p!r}")
            for role in ("source", "target"):
                nm = getattr(p, role)
                if nm not in names:
                    raise ValueError(f"pathway {p.label}: unknown {role} assembly {nm!r}; known: {names}")
            n_src = asm[names.index(p.source)].size
            limit = n_src - 1 if p.source == p.target else n_src
            if p.in_degree > limit:
                raise ValueError(
                    f"pathway {p.label}: `in_degree` = {p.in_degree} exceeds the {limit} distinct partners "
                    f"available in assembly {p.source!r} (size {n_src}"
                    + (", no self-connections)" if p.source == p.target else ")"))
        object.__setattr__(self, "assemblies", asm)
        object.__setattr__(self, "pathways", pw)

    # ---------------------------------------------------------- structure
    @property
    def names(self) -> tuple[str, ...]:
        return tuple(a.name for a in self.assemblies)

    @property
    def n(self) -> int:
        return len(self.assemblies)

    def index(self, name: str) -> int:
        """Position of the assembly called ``name``."""
        try:
            return self.names.index(name)
        except ValueError:
            raise ValueError(f"unknown assembly {name!r}; known: {list(self.names)}") from None

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
            a = self.assemblies[k]
            wm[k, l] += a.tau_m * p.weight * p.in_degree * HZ_TO_PER_MS
            if a.diffusive:
                wv[k, l] += a.tau_m * p.weight ** 2 * p.in_degree * HZ_TO_PER_MS
        return wm, wv

    def stationary_input(self, rates, t: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
        """Drive and noise amplitude of every assembly for constant rates.

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
        mu = np.array([a.external_mean(t) for a in self.assemblies]) + wm @ r
        var = np.array([a.external_variance(t) for a in self.assemblies]) + wv @ r
        sigma = np.where([a.diffusive for a in self.assemblies], np.sqrt(np.maximum(var, 0.0)), np.nan)
        return mu, sigma

    def population_at(self, k: int, sigma: float | None) -> Population:
        """The population of assembly ``k`` with its white noise set to ``sigma`` (mV)."""
        a = self.assemblies[k]
        if not a.diffusive:
            return a.population
        return Population(a.population.neuron, WhiteNoise(float(sigma)))


# ---------------------------------------------------------------------------
# results
# ---------------------------------------------------------------------------

@dataclass(frozen=True, eq=False)
class CircuitResult:
    """Time course of every assembly of a circuit.

    Attributes
    ----------
    names : tuple of str
        Assembly names, the order of the first axis of the arrays.
    t : ndarray, shape (n_times,)
        Output times (ms) from 0.
    rate : ndarray, shape (n_assemblies, n_times)
        Population rates (Hz): ``rate[:, 0]`` the initial rate, ``rate[:, j]``
        the mean over ``(t[j-1], t[j]]``.
    mu, sigma : ndarray, shape (n_assemblies, n_times) or None
        Total drive (mV) and noise amplitude (mV, NaN for escape noise) at
        ``t`` (mean-field integration only).
    method : str
        ``"mean-field"`` or ``"montecarlo"``.
    status, message : int, str
        0 and "completed" on success.
    dt : float
        Internal step (ms).
    sizes : tuple of int or None
        Monte Carlo: neurons per assembly.
    spike_times, spike_ids : ndarray or None
        Monte Carlo, on request: spike times (ms) and neuron indices
        (assembly ``k`` owns ids ``offsets[k] .. offsets[k+1]-1``).
    diagnostics : dict
        Wall time (s), version, counters.
    """

    names: tuple
    t: np.ndarray
    rate: np.ndarray
    method: str
    mu: np.ndarray | None = None
    sigma: np.ndarray | None = None
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
        """Rate (Hz) of the assembly ``name``."""
        if name not in self.names:
            raise ValueError(f"unknown assembly {name!r}; known: {list(self.names)}")
        return self.rate[self.names.index(name)]

    @property
    def offsets(self) -> np.ndarray:
        """First neuron id of each assembly (Monte Carlo)."""
        if self.sizes is None:
            raise ValueError("neuron ids exist only for Monte Carlo results")
        return np.concatenate([[0], np.cumsum(self.sizes)])

    def mean_rate(self, t_from: float = 0.0) -> np.ndarray:
        """Time-averaged rate (Hz) of each assembly over ``(t_from, t_end]`` (ms)."""
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
        for k in ("mu", "sigma", "spike_times", "spike_ids"):
            if getattr(self, k) is not None:
                arrays[k] = getattr(self, k)
        meta = {"names": list(self.names), "method": self.method, "status": self.status,
                "message": self.message, "dt": self.dt, "sizes": list(self.sizes) if self.sizes else None}
        arrays["_meta"] = np.frombuffer(json.dumps(meta).encode("utf-8"), dtype=np.uint8)
        _atomic_write(path, lambda fh: np.savez_compressed(fh, **arrays))
        return path

    def plot(self, ax=None, **kwargs):
        """Rates (Hz) of every assembly against time (ms); returns the Axes."""
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

    Every assembly is solved by its density solver (refractory density for
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
        Rates (Hz) of the past (t <= 0), one per assembly; default 0.  Each
        solver starts in the stationary state of the input these rates give.
    record_interval : float, optional
        Output interval (ms), a multiple of ``dt``; rates are averaged over it.
    solver_options : dict, optional
        ``{assembly name: {option: value}}`` passed to the solvers (e.g.
        ``n_cells``, ``u_min`` for Fokker--Planck, ``max_age`` for escape).
    progress : bool, optional
        Progress line on stderr (default: only on a terminal, long runs).

    Returns
    -------
    CircuitResult
        ``rate`` (Hz), ``mu`` (mV) and ``sigma`` (mV) per assembly.

    Examples
    --------
    >>> import popdens
    >>> from popdens.network import Assembly, Pathway, Circuit, simulate_network
    >>> pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(5.0))
    >>> c = Circuit([Assembly("E", pop, drive=15.0)], [Pathway("E", "E", 0.1, 40, delay=1.5)])
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
    cmean = [circuit.assemblies[k].tau_m * p.weight * p.in_degree for p, k in zip(circuit.pathways, tgt)]
    cvar = [circuit.assemblies[k].tau_m * p.weight ** 2 * p.in_degree if circuit.assemblies[k].diffusive else 0.0
            for p, k in zip(circuit.pathways, tgt)]
    tq = grid.step_times(0, grid.n_steps)
    ext_mu = np.array([np.broadcast_to(a.external_mean(tq), tq.shape) for a in circuit.assemblies])
    ext_var = np.array([np.broadcast_to(a.external_variance(tq), tq.shape) for a in circuit.assemblies])
    if not (np.all(np.isfinite(ext_mu)) and np.all(np.isfinite(ext_var))):
        raise ValueError("the external drive or noise of an assembly is not finite on [0, t_end]")
    diffusive = [a.diffusive for a in circuit.assemblies]

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
    for k, a in enumerate(circuit.assemblies):
        cls = resolve_method(a.population, None)
        opts = dict(solver_options.get(a.name, {}))
        if diffusive[k]:
            if not sg0[k] > 0:
                raise ValueError(f"assembly {a.name!r}: the noise amplitude at t = 0 is {sg0[k]!r} mV; "
                                 "white-noise populations need sigma > 0 (external or recurrent)")
            nrn = a.population.neuron
            if "u_min" not in opts and "grid" not in opts:
                base = min(float(nrn.reset), float(nrn.rest) + min(float(mu0[k]), 0.0))
                opts["u_min"] = (base - LOWER_STDS * sg0[k] / math.sqrt(2.0)
                                 - EXTRA_LOWER_SPANS * (float(nrn.boundary) - float(nrn.reset)))
        try:
            s = cls(a.population, dt, **opts)
        except TypeError as exc:
            raise ValueError(f"assembly {a.name!r}: bad solver option in {sorted(opts)}: {exc}") from None
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
    bar = Progress(n, "network mean-field", progress)
    status, message = STATUS_OK, "completed"
    done = 0
    buf_mu = np.empty(2)
    buf_sg = np.empty(2)
    try:
        for j in range(n):
            t1 = (j + 1) * dt
            s_new = []
            for q, ln in enumerate(lines):
                a1 = ln.delayed(t1, j)
                s_new.append(ln.advance_filter(a_prev[q], a1))
                a_prev[q] = a1
            mu1, sg1 = inputs(j + 1, s_new)
            mus[:, j + 1], sgs[:, j + 1] = mu1, sg1
            for k, s in enumerate(solvers):
                buf_mu[0], buf_mu[1] = mus[k, j], mu1[k]
                if diffusive[k]:
                    buf_sg[0], buf_sg[1] = sgs[k, j], sg1[k]
                    r, _, _ = s.advance(buf_mu, buf_sg)
                else:
                    r, _, _ = s.advance(buf_mu)
                if s.status != STATUS_OK:
                    status, message = STATUS_FAILED, f"assembly {circuit.names[k]!r}: {s.message}"
                    break
                rate[k, j] = r[0]
            if status != STATUS_OK:
                break
            for q, ln in enumerate(lines):
                ln.hist[j] = rate[src[q], j] * HZ_TO_PER_MS
            done = j + 1
            if done % PROGRESS_BLOCK == 0:
                bar.update(done)
    except KeyboardInterrupt:
        status, message = STATUS_FAILED, f"interrupted by the user at t = {done * dt:g} ms"
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
