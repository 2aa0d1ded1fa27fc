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

Synaptic filtering (coloured noise)
-----------------------------------
Pathways with ``tau_syn > 0``, a :class:`PoissonBackground` with
``tau_syn > 0`` and a cohort whose own noise is :class:`~popdens.ColouredNoise`
deliver filtered input: the potential is then differentiable and the
diffusion approximation overestimates the rate (by tens of percent for
``tau_syn/tau_m`` of 0.05-0.1).  The mean field applies the effective
boundary shift of Fourcaud & Brunel (2002), ``delta = alpha/2 sigma
sqrt(tau_syn/tau_m)`` for noise of one time constant.  For a mixture of
inputs of variances ``sigma_i^2`` and time constants ``tau_i`` (white inputs
count with ``tau_i = 0``) each contributes in proportion to its share of the
variance,

.. math:: \\delta = \\frac{\\alpha}{2}\\,\\frac{\\sum_i \\sigma_i^2\\sqrt{\\tau_i/\\tau_m}}{\\sigma},
          \\qquad \\tau_{\\rm eff} = \\Big(\\sum_i \\sigma_i^2\\sqrt{\\tau_i}\\Big/\\sigma^2\\Big)^2,

i.e. coloured noise of amplitude ``sigma`` and time constant ``tau_eff``.
For one time constant this is the published theory; the rule for mixtures
is an approximation of ours, chosen by measurement against the spiking twin
(LIF, 4 mV of noise, tau_syn/tau_m = 0.1, a quarter to three quarters of the
variance white: rate errors -2.8 % to +1.1 %, where weighting ``tau_i``
itself by the variance gave -7 % to -9 %; contributor guide).

Synapse kinds
-------------
A :class:`Pathway` (and a :class:`PoissonBackground`) states its synapse
with ``synapse``:

* ``"current"`` (default): a current PSP of integral ``weight`` (mV),
  instantaneous or filtered with ``tau_syn``, analysed in the diffusion
  approximation above;
* ``"shot"``: an instantaneous jump of ``weight`` (mV) per input spike,
  analysed as finite PSPs (shot noise, :class:`~popdens.ShotNoise`; one
  weight per sign and ``sigma_ext = 0`` in the target cohort,
  :mod:`popdens.network._shot_input`);
* ``"conductance"``: a conductance jump of ``weight`` (leak units, > 0)
  decaying with ``tau_syn`` (ms, > 0) towards the ``reversal`` potential
  (mV), analysed in the effective-time-constant approximation
  (:class:`~popdens.ConductanceNoise`; :mod:`popdens.network._conductance_input`).
  The target cohort needs ``sigma_ext = 0``: the conductance theory carries
  no extra white current noise.  Such pathways and backgrounds add nothing
  to :meth:`Circuit.coupling` and the external mean and variance.

All synaptic input of one cohort (its pathways and its background) is of
one kind.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass, field
from typing import Sequence, Union

import numpy as np

from .. import _validation as v
from ..model.drive import Constant, Drive, as_drive
from ..model.noise import EscapeNoise, Population, WhiteNoise
from ..model.shot import ShotNoise
from ..model.synaptic import ColouredNoise
from ._shot_input import check_shot_cohort

__all__ = ["Cohort", "Pathway", "PoissonBackground", "Circuit"]

#: Hz -> 1/ms.
HZ_TO_PER_MS = 1e-3
#: Default time step of the network integrators (ms).
DEFAULT_DT = 0.1
#: Relative tolerance for "the delay is a whole number of steps".
STEP_TOL = 1e-9

def _name(kind: str, value) -> str:
    if not isinstance(value, str) or not value.strip():
        raise ValueError(f"`{kind}` must be a non-empty string, got {value!r}")
    return value


#: Synapse kinds of a pathway or background (module docstring).
SYNAPSE_KINDS = ("current", "shot", "conductance")


def _synapse(owner: str, synapse, weight: float, tau_syn: float, reversal):
    """Validated ``(synapse, reversal)`` of a pathway or background; ``owner`` names it in errors."""
    if synapse not in SYNAPSE_KINDS:
        raise ValueError(f"{owner}: `synapse` must be one of {list(SYNAPSE_KINDS)}, got {synapse!r}")
    if synapse == "conductance":
        if reversal is None:
            raise ValueError(f"{owner}: `reversal` (mV) is required for a conductance synapse")
        reversal = v.as_finite_float("reversal", reversal)
        if not weight > 0.0:
            raise ValueError(f"{owner}: `weight` of a conductance synapse is a conductance jump in leak units "
                             f"and must be > 0 (the reversal potential sets its sign), got {weight!r}")
        if not tau_syn > 0.0:
            raise ValueError(f"{owner}: `tau_syn` of a conductance synapse must be > 0 ms, got {tau_syn!r}")
        return synapse, reversal
    if reversal is not None:
        raise ValueError(f"{owner}: `reversal` applies to conductance synapses; this one is {synapse!r}")
    if synapse == "shot" and tau_syn != 0.0:
        raise ValueError(f"{owner}: a shot-noise synapse is an instantaneous jump, so `tau_syn` must be 0 ms, "
                         f"got {tau_syn!r}")
    return synapse, None


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
    tau_syn : float
        Synaptic time constant (ms): 0 (default) for instantaneous jumps,
        > 0 for an exponential current of unit area, as for :class:`Pathway`.
    synapse : {"current", "shot", "conductance"}
        Synapse kind, as for :class:`Pathway` (default ``"current"``).
    reversal : float, optional
        Reversal potential (mV) of a conductance synapse; only then.

    Notes
    -----
    In the mean-field equations it adds ``tau_m * weight * count * rate``
    (mV) to the drive and ``tau_m * weight**2 * count * rate`` (mV^2) to the
    noise variance (Brunel 2000); the Monte Carlo twin draws the spikes.
    """

    rate: float
    weight: float
    count: int
    tau_syn: float = 0.0
    synapse: str = "current"
    reversal: float | None = None

    def __post_init__(self):
        object.__setattr__(self, "rate", v.non_negative("rate", self.rate))
        object.__setattr__(self, "weight", v.as_finite_float("weight", self.weight))
        object.__setattr__(self, "count", _count("count", self.count))
        object.__setattr__(self, "tau_syn", v.non_negative("tau_syn", self.tau_syn))
        _, rev = _synapse("background", self.synapse, self.weight, self.tau_syn, self.reversal)
        object.__setattr__(self, "reversal", rev)

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
        External noise amplitude (mV), white- or coloured-noise populations
        only.  Default: the population's own ``sigma``.  May be 0 when the
        recurrent or Poisson input supplies the noise.  With
        :class:`~popdens.ColouredNoise` the external noise is filtered with
        its ``tau_syn``.
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
        if isinstance(noise, ShotNoise):
            raise ValueError(f"cohort {self.name!r}: `population` has ShotNoise, which networks do not support "
                             "yet; use WhiteNoise or ColouredNoise (the diffusion approximation)")
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
        """True for white- or coloured-noise populations (recurrent input also adds variance)."""
        return isinstance(self.population.noise, (WhiteNoise, ColouredNoise))

    @property
    def ext_tau_syn(self) -> float:
        """Synaptic time constant (ms) of the external noise: 0 for white noise."""
        noise = self.population.noise
        return float(noise.tau_syn) if isinstance(noise, ColouredNoise) else 0.0

    @property
    def tau_m(self) -> float:
        return float(self.population.neuron.tau_m)

    @property
    def _current_background(self) -> bool:
        # a conductance background enters through popdens.network._conductance_input instead
        return self.background is not None and self.background.synapse != "conductance"

    def external_mean(self, t) -> np.ndarray | float:
        """External drive (mV) at times ``t`` (ms), Poisson background included."""
        m = self.drive(t)
        if self._current_background:
            m = m + self.background.mean(self.tau_m)
        return m

    def external_variance(self, t) -> np.ndarray | float:
        """External noise variance (mV^2) at times ``t`` (ms); 0 for escape noise."""
        if not self.diffusive:
            return 0.0 * np.asarray(t, dtype=float) if np.ndim(t) else 0.0
        s = self.sigma_ext(t)
        var = s * s
        if self._current_background:
            var = var + self.background.variance(self.tau_m)
        return var

    def external_filter_weight(self, t) -> np.ndarray | float:
        """Sum of the external variances times the square roots of their synaptic time constants
        (mV^2 ms^0.5; module docstring)."""
        if not self.diffusive:
            return 0.0 * np.asarray(t, dtype=float) if np.ndim(t) else 0.0
        s = self.sigma_ext(t)
        out = s * s * math.sqrt(self.ext_tau_syn)
        if self._current_background:
            out = out + self.background.variance(self.tau_m) * math.sqrt(self.background.tau_syn)
        return out


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
    synapse : {"current", "shot", "conductance"}
        Synapse kind (module docstring, "Synapse kinds"; default
        ``"current"``).  For ``"conductance"``, ``weight`` is the
        conductance jump in units of the target's leak conductance (> 0) and
        ``tau_syn`` (> 0) its decay time.
    reversal : float, optional
        Reversal potential (mV) of a conductance synapse; only then.
    """

    source: str
    target: str
    weight: float
    in_degree: int
    delay: float = 1.0
    tau_syn: float = 0.0
    synapse: str = "current"
    reversal: float | None = None

    def __post_init__(self):
        _name("source", self.source)
        _name("target", self.target)
        object.__setattr__(self, "weight", v.as_finite_float("weight", self.weight))
        object.__setattr__(self, "in_degree", _count("in_degree", self.in_degree))
        object.__setattr__(self, "delay", v.non_negative("delay", self.delay))
        object.__setattr__(self, "tau_syn", v.non_negative("tau_syn", self.tau_syn))
        _, rev = _synapse(f"pathway {self.source}->{self.target}", self.synapse, self.weight, self.tau_syn,
                             self.reversal)
        object.__setattr__(self, "reversal", rev)

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


#: In-degree / source size above which the diffusion approximation's independent inputs are
#: doubtful (sparse-network condition, e.g. Brunel 2000 uses 0.1; common practice).
DENSE_CONNECTIVITY = 0.1


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
        for a in asm:
            self._input_kind(a.name)

    def _input_kind(self, name: str) -> str:
        kinds = {}
        for p in self.pathways:
            if p.target == name:
                kinds.setdefault(p.synapse, []).append(f"pathway {p.label}")
        a = self.cohorts[self.index(name)]
        if a.background is not None:
            kinds.setdefault(a.background.synapse, []).append("its background")
        if len(kinds) > 1:
            detail = "; ".join(f"{k}: {', '.join(w)}" for k, w in kinds.items())
            raise ValueError(f"cohort {name!r}: all its synaptic input must be of one `synapse` kind, got {detail}")
        kind = next(iter(kinds), "current")
        if kind != "current" and not a.diffusive:
            raise ValueError(f"cohort {name!r}: {kind} synapses need a white- or coloured-noise population "
                             "(its noise amplitude is then the external part only); this one has escape noise")
        if kind == "conductance" and not (isinstance(a.sigma_ext, Constant) and a.sigma_ext.mu == 0.0):
            raise ValueError(f"cohort {name!r}: `sigma_ext` must be 0 mV for conductance synapses (the "
                             f"conductance theory carries no extra white current noise; all fluctuations come "
                             f"from the input spikes), got {a.sigma_ext!r}; pass sigma_ext=0")
        if kind == "shot":
            check_shot_cohort(a, [p for p in self.pathways if p.target == name])
        return kind

    def synapse_kind(self, k: int) -> str:
        """Synapse kind (``"current"``, ``"shot"`` or ``"conductance"``) of all input of cohort ``k``."""
        return self._input_kind(self.names[k])

    def require_current(self, where: str, allow: tuple = ()) -> None:
        """Raise NotImplementedError when any input is neither a current synapse nor of a kind in ``allow``
        (``where``: the caller's name)."""
        for k in range(self.n):
            kind = self.synapse_kind(k)
            if kind != "current" and kind not in allow:
                raise NotImplementedError(f"{where}: cohort {self.names[k]!r} receives {kind} synapses, "
                                          "which this analysis does not support yet")

    # ---------------------------------------------------------- structure
    @property
    def names(self) -> tuple[str, ...]:
        return tuple(a.name for a in self.cohorts)

    @property
    def n(self) -> int:
        return len(self.cohorts)

    def density_notes(self, limit: float = DENSE_CONNECTIVITY) -> list[str]:
        """Pathways whose in-degree is more than ``limit`` of the source cohort's size.

        The diffusion approximation treats the inputs of different neurons as independent; when
        neurons draw a large share of their inputs from the same few cells, their inputs are
        correlated, and the spiking twin can synchronise where the mean field predicts an
        asynchronous state (measured: in-degree/size 0.4 gave rate fluctuations of 28 Hz s.d. at a
        16 Hz mean, 0.1 gave 12.6 Hz; DEVELOPERS.md, "Demos")."""
        notes = []
        for p in self.pathways:
            share = p.in_degree / self.cohorts[self.index(p.source)].size
            if share > limit:
                notes.append(f"pathway {p.label}: in-degree {p.in_degree} is {share:.0%} of cohort {p.source!r}; "
                             f"above {limit:.0%} neurons share much of their input, which the diffusion "
                             "approximation ignores (expect correlated, synchronous activity in the spiking twin)")
        return notes

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
            if p.synapse == "conductance":  # popdens.network._conductance_input
                continue
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
        mu : ndarray, shape (n,)
            Drive (mV) of every cohort.
        sigma : ndarray, shape (n,)
            Noise amplitude (mV; NaN for escape noise).
        """
        r = np.asarray(rates, dtype=float)
        if r.shape != (self.n,):
            raise ValueError(f"`rates` must have shape ({self.n},) (Hz), got {r.shape}")
        wm, wv = self.coupling()
        mu = np.array([a.external_mean(t) for a in self.cohorts]) + wm @ r
        var = np.array([a.external_variance(t) for a in self.cohorts]) + wv @ r
        sigma = np.where([a.diffusive for a in self.cohorts], np.sqrt(np.maximum(var, 0.0)), np.nan)
        return mu, sigma

    def noise_time_constant(self, rates, t: float = 0.0) -> np.ndarray:
        """Effective synaptic time constant (ms) of each cohort's noise for constant rates (Hz).

        The square of the variance-weighted mean of the square roots of the time
        constants of the external noise, the Poisson background and the
        pathways (module docstring); 0 for white input and for escape-noise cohorts.
        """
        r = np.asarray(rates, dtype=float)
        num = np.array([float(a.external_filter_weight(t)) for a in self.cohorts])
        den = np.array([float(a.external_variance(t)) for a in self.cohorts])
        for p in self.pathways:
            k, l = self.index(p.target), self.index(p.source)
            a = self.cohorts[k]
            if a.diffusive and p.synapse != "conductance":
                var = a.tau_m * p.weight ** 2 * p.in_degree * HZ_TO_PER_MS * max(float(r[l]), 0.0)
                num[k] += var * math.sqrt(p.tau_syn)
                den[k] += var
        return np.where(den > 0.0, (num / np.where(den > 0.0, den, 1.0)) ** 2, 0.0)

    def population_at(self, k: int, sigma: float | None, tau_syn: float = 0.0) -> Population:
        """The population of cohort ``k`` with noise amplitude ``sigma`` (mV), filtered with
        ``tau_syn`` (ms; 0: white noise)."""
        a = self.cohorts[k]
        if not a.diffusive:
            return a.population
        if tau_syn > 0.0:
            return Population(a.population.neuron, ColouredNoise(float(sigma), float(tau_syn)))
        return Population(a.population.neuron, WhiteNoise(float(sigma)))


