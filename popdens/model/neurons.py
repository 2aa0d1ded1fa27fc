"""Neuron models: parameters and pure, vectorised subthreshold dynamics.

Every model obeys

.. math:: \\tau_m \\frac{du}{dt} = F(u) + \\mu(t),

with the membrane potential :math:`u` in mV, the membrane time constant
:math:`\\tau_m` in ms and the input drive :math:`\\mu(t)` expressed in mV (the
input current times the membrane resistance).  After a spike the potential is
held at ``reset`` for the absolute ``refractory`` period (ms), then integrates
again.

Every model accepts ``adaptation=[...]``: spike-triggered adaptation
currents and moving thresholds (:mod:`popdens.model.adaptation`), which
make the neuron non-renewal; the default (none) is a renewal neuron.

``threshold`` is where escape functions are centred (escape noise) and
``boundary`` where a spike is certain: the absorbing boundary of the
Fokker--Planck equation (diffusive noise) and, for models with a spike
cut-off (EIF, QIF), the point where the potential has diverged.
"""

from __future__ import annotations

import copy
from dataclasses import dataclass, field
from typing import ClassVar, Mapping

import numpy as np

from .. import _validation as v
from .adaptation import KIND_CURRENT, KIND_THRESHOLD, check_adaptation
from .expressions import Expression, parse_expression

__all__ = ["NeuronBase", "LIF", "EIF", "QIF", "PIF", "CustomNeuron"]

# integer codes used by the compiled kernels (popdens.model._kernels)
CODE_LIF, CODE_EIF, CODE_QIF, CODE_PIF, CODE_CUSTOM = 0, 1, 2, 3, 4

_EMPTY_PROGRAM = (np.zeros(1, dtype=np.int64), np.zeros(1))


@dataclass(frozen=True)
class NeuronBase:
    """Base of all neuron models (do not instantiate).

    Subclasses define ``drift(u)`` (F(u) in mV), ``drift_slope(u)`` (dF/du,
    dimensionless), ``threshold``, ``boundary`` and the compiled
    representation ``code`` / ``kernel_params`` / ``program``.
    """

    name: ClassVar[str] = "neuron"
    code: ClassVar[int] = -1
    #: True when reaching ``boundary`` is a certain spike even with escape noise.
    has_cutoff: ClassVar[bool] = False

    def _check_common(self) -> None:
        v.positive("tau_m", self.tau_m)
        v.as_finite_float("reset", self.reset)
        v.non_negative("refractory", self.refractory)
        v.less_than("reset", float(self.reset), "threshold" if not self.has_cutoff else "cutoff", float(self.boundary))

    # -- to be provided by subclasses ------------------------------------
    tau_m: float = field(init=False, default=1.0)
    reset: float = field(init=False, default=0.0)
    refractory: float = field(init=False, default=0.0)
    #: Adaptation components (:class:`~popdens.Adaptation`, :class:`~popdens.MovingThreshold`); empty: renewal.
    adaptation: tuple = field(init=False, default=())

    def _set_adaptation(self, value) -> None:
        object.__setattr__(self, "adaptation", check_adaptation(value))

    @property
    def adapting(self) -> bool:
        """True when the neuron carries any adaptation component."""
        return bool(self.adaptation)

    @property
    def adaptation_currents(self) -> tuple:
        """The adaptation currents (:class:`~popdens.Adaptation`)."""
        return tuple(a for a in self.adaptation if a.kind == KIND_CURRENT)

    @property
    def moving_thresholds(self) -> tuple:
        """The moving thresholds (:class:`~popdens.MovingThreshold`)."""
        return tuple(a for a in self.adaptation if a.kind == KIND_THRESHOLD)

    def without_adaptation(self):
        """The same neuron model without adaptation (a renewal neuron)."""
        out = copy.copy(self)
        object.__setattr__(out, "adaptation", ())
        return out

    def _repr(self, name: str) -> str:
        items = [f"{k}={val!r}" for k, val in self.parameters().items() if k != "adaptation"]
        if self.adaptation:
            items.append(f"adaptation={list(self.adaptation)!r}")
        return f"{name}(" + ", ".join(items) + ")"

    def _with_adaptation(self, out: dict) -> dict:
        if self.adaptation:
            out["adaptation"] = [a.parameters() for a in self.adaptation]
        return out

    @property
    def threshold(self) -> float:  # pragma: no cover - abstract
        raise NotImplementedError

    @property
    def boundary(self) -> float:  # pragma: no cover - abstract
        raise NotImplementedError

    def drift(self, u):  # pragma: no cover - abstract
        """F(u) in mV, vectorised."""
        raise NotImplementedError

    def drift_slope(self, u):  # pragma: no cover - abstract
        """dF/du (dimensionless), vectorised."""
        raise NotImplementedError

    @property
    def kernel_params(self) -> np.ndarray:
        return np.zeros(1)

    @property
    def program(self) -> tuple[np.ndarray, np.ndarray]:
        return _EMPTY_PROGRAM

    @property
    def rest(self) -> float:
        return 0.0

    def velocity(self, u, mu):
        """du/dt in mV/ms for drive ``mu`` (mV)."""
        return (self.drift(u) + mu) / self.tau_m

    def parameters(self) -> dict[str, float]:
        """Public parameters as a dict (for records and scenario files)."""
        return {k: getattr(self, k) for k in self.__dataclass_fields__ if not k.startswith("_") and self.__dataclass_fields__[k].init}


def _setattrs(obj, **kw):
    for k, val in kw.items():
        object.__setattr__(obj, k, val)


@dataclass(frozen=True, init=False)
class LIF(NeuronBase):
    """Leaky integrate-and-fire neuron.

    ``tau_m du/dt = -(u - rest) + mu``.

    Parameters
    ----------
    tau_m : float
        Membrane time constant (ms), > 0.
    threshold : float
        Firing threshold (mV).
    reset : float
        Reset potential (mV), < threshold.
    refractory : float
        Absolute refractory period (ms), >= 0.
    rest : float, optional
        Resting potential (mV), default 0.
    adaptation : sequence, optional
        Spike-triggered adaptation: :class:`~popdens.Adaptation` currents and
        (escape noise) :class:`~popdens.MovingThreshold` kernels; default none
        (a renewal neuron).

    Examples
    --------
    >>> LIF(tau_m=20.0, threshold=20.0, reset=10.0, refractory=2.0).drift(5.0)
    -5.0
    """

    name: ClassVar[str] = "LIF"
    code: ClassVar[int] = CODE_LIF
    tau_m: float
    threshold_: float
    reset: float
    refractory: float
    rest_: float

    def __init__(self, tau_m, threshold, reset, refractory, rest=0.0, adaptation=None):
        _setattrs(self, tau_m=v.as_finite_float("tau_m", tau_m), threshold_=v.as_finite_float("threshold", threshold),
                  reset=v.as_finite_float("reset", reset), refractory=v.as_finite_float("refractory", refractory),
                  rest_=v.as_finite_float("rest", rest))
        self._set_adaptation(adaptation)
        self._check_common()

    threshold = property(lambda self: self.threshold_)
    boundary = property(lambda self: self.threshold_)
    rest = property(lambda self: self.rest_)

    def drift(self, u):
        return -(np.asarray(u, dtype=float) - self.rest_) if np.ndim(u) else -(float(u) - self.rest_)

    def drift_slope(self, u):
        return -np.ones_like(np.asarray(u, dtype=float)) if np.ndim(u) else -1.0

    @property
    def kernel_params(self):
        return np.array([self.rest_])

    def parameters(self):
        return self._with_adaptation(dict(tau_m=self.tau_m, threshold=self.threshold_, reset=self.reset,
                                          refractory=self.refractory, rest=self.rest_))

    def __repr__(self):
        return self._repr("LIF")


@dataclass(frozen=True, init=False)
class EIF(NeuronBase):
    """Exponential integrate-and-fire neuron (Fourcaud-Trocmé et al. 2003).

    ``tau_m du/dt = -(u - rest) + slope_factor*exp((u - soft_threshold)/slope_factor) + mu``;
    a spike when ``u`` reaches ``cutoff``.

    Parameters
    ----------
    tau_m : float
        Membrane time constant (ms), > 0.
    soft_threshold : float
        Potential where the exponential term takes over (mV); escape
        functions are centred here.
    slope_factor : float
        Sharpness of spike initiation (mV), > 0.
    cutoff : float
        Spike cut-off (mV), > soft_threshold.
    reset : float
        Reset potential (mV), < cutoff.
    refractory : float
        Absolute refractory period (ms), >= 0.
    rest : float, optional
        Resting potential (mV), default 0.
    adaptation : sequence, optional
        Spike-triggered adaptation: :class:`~popdens.Adaptation` currents and
        (escape noise) :class:`~popdens.MovingThreshold` kernels; default none
        (a renewal neuron).
    """

    name: ClassVar[str] = "EIF"
    code: ClassVar[int] = CODE_EIF
    has_cutoff: ClassVar[bool] = True
    tau_m: float
    soft_threshold: float
    slope_factor: float
    cutoff: float
    reset: float
    refractory: float
    rest_: float

    def __init__(self, tau_m, soft_threshold, slope_factor, cutoff, reset, refractory, rest=0.0, adaptation=None):
        _setattrs(self, tau_m=v.as_finite_float("tau_m", tau_m),
                  soft_threshold=v.as_finite_float("soft_threshold", soft_threshold),
                  slope_factor=v.as_finite_float("slope_factor", slope_factor),
                  cutoff=v.as_finite_float("cutoff", cutoff), reset=v.as_finite_float("reset", reset),
                  refractory=v.as_finite_float("refractory", refractory), rest_=v.as_finite_float("rest", rest))
        v.positive("slope_factor", self.slope_factor)
        v.less_than("soft_threshold", self.soft_threshold, "cutoff", self.cutoff)
        if (self.cutoff - self.soft_threshold) / self.slope_factor > 600:
            raise ValueError(
                f"`cutoff` = {self.cutoff!r} is too far above `soft_threshold` for `slope_factor` = "
                f"{self.slope_factor!r}: exp((cutoff - soft_threshold)/slope_factor) overflows; "
                "allowed: (cutoff - soft_threshold)/slope_factor <= 600"
            )
        self._set_adaptation(adaptation)
        self._check_common()

    threshold = property(lambda self: self.soft_threshold)
    boundary = property(lambda self: self.cutoff)
    rest = property(lambda self: self.rest_)

    def drift(self, u):
        u = np.asarray(u, dtype=float)
        out = -(u - self.rest_) + self.slope_factor * np.exp(np.minimum((u - self.soft_threshold) / self.slope_factor, 700.0))
        return out if out.ndim else float(out)

    def drift_slope(self, u):
        u = np.asarray(u, dtype=float)
        out = -1.0 + np.exp(np.minimum((u - self.soft_threshold) / self.slope_factor, 700.0))
        return out if out.ndim else float(out)

    @property
    def kernel_params(self):
        return np.array([self.rest_, self.soft_threshold, self.slope_factor])

    def parameters(self):
        return self._with_adaptation(dict(
            tau_m=self.tau_m, soft_threshold=self.soft_threshold, slope_factor=self.slope_factor,
            cutoff=self.cutoff, reset=self.reset, refractory=self.refractory, rest=self.rest_))

    def __repr__(self):
        return self._repr("EIF")


@dataclass(frozen=True, init=False)
class QIF(NeuronBase):
    """Quadratic integrate-and-fire neuron with a spike cut-off.

    ``tau_m du/dt = (u - rest)(u - critical)/(critical - rest) + mu``;
    the drift has slope -1 at ``rest`` (like a leak) and +1 at ``critical``,
    the unstable fixed point without input.  A spike when ``u`` reaches
    ``cutoff``.

    Parameters
    ----------
    tau_m : float
        Membrane time constant (ms), > 0.
    critical : float
        Unstable fixed point at zero drive (mV), > rest; escape functions
        are centred here.
    cutoff : float
        Spike cut-off (mV), > critical.
    reset : float
        Reset potential (mV), < cutoff.
    refractory : float
        Absolute refractory period (ms), >= 0.
    rest : float, optional
        Stable fixed point at zero drive (mV), default 0.
    adaptation : sequence, optional
        Spike-triggered adaptation: :class:`~popdens.Adaptation` currents and
        (escape noise) :class:`~popdens.MovingThreshold` kernels; default none
        (a renewal neuron).
    """

    name: ClassVar[str] = "QIF"
    code: ClassVar[int] = CODE_QIF
    has_cutoff: ClassVar[bool] = True
    tau_m: float
    critical: float
    cutoff: float
    reset: float
    refractory: float
    rest_: float

    def __init__(self, tau_m, critical, cutoff, reset, refractory, rest=0.0, adaptation=None):
        _setattrs(self, tau_m=v.as_finite_float("tau_m", tau_m), critical=v.as_finite_float("critical", critical),
                  cutoff=v.as_finite_float("cutoff", cutoff), reset=v.as_finite_float("reset", reset),
                  refractory=v.as_finite_float("refractory", refractory), rest_=v.as_finite_float("rest", rest))
        v.less_than("rest", self.rest_, "critical", self.critical)
        v.less_than("critical", self.critical, "cutoff", self.cutoff)
        self._set_adaptation(adaptation)
        self._check_common()

    threshold = property(lambda self: self.critical)
    boundary = property(lambda self: self.cutoff)
    rest = property(lambda self: self.rest_)

    def drift(self, u):
        u = np.asarray(u, dtype=float)
        out = (u - self.rest_) * (u - self.critical) / (self.critical - self.rest_)
        return out if out.ndim else float(out)

    def drift_slope(self, u):
        u = np.asarray(u, dtype=float)
        out = (2.0 * u - self.rest_ - self.critical) / (self.critical - self.rest_)
        return out if out.ndim else float(out)

    @property
    def kernel_params(self):
        return np.array([self.rest_, self.critical])

    def parameters(self):
        return self._with_adaptation(dict(tau_m=self.tau_m, critical=self.critical, cutoff=self.cutoff,
                                          reset=self.reset, refractory=self.refractory, rest=self.rest_))

    def __repr__(self):
        return self._repr("QIF")


@dataclass(frozen=True, init=False)
class PIF(NeuronBase):
    """Perfect (non-leaky) integrate-and-fire neuron: ``tau_m du/dt = mu``.

    Parameters
    ----------
    tau_m : float
        Time constant (ms) converting the drive (mV) into a slope, > 0.
    threshold : float
        Firing threshold (mV).
    reset : float
        Reset potential (mV), < threshold.
    refractory : float
        Absolute refractory period (ms), >= 0.
    adaptation : sequence, optional
        Spike-triggered adaptation: :class:`~popdens.Adaptation` currents and
        (escape noise) :class:`~popdens.MovingThreshold` kernels; default none
        (a renewal neuron).
    """

    name: ClassVar[str] = "PIF"
    code: ClassVar[int] = CODE_PIF
    tau_m: float
    threshold_: float
    reset: float
    refractory: float

    def __init__(self, tau_m, threshold, reset, refractory, adaptation=None):
        _setattrs(self, tau_m=v.as_finite_float("tau_m", tau_m), threshold_=v.as_finite_float("threshold", threshold),
                  reset=v.as_finite_float("reset", reset), refractory=v.as_finite_float("refractory", refractory))
        self._set_adaptation(adaptation)
        self._check_common()

    threshold = property(lambda self: self.threshold_)
    boundary = property(lambda self: self.threshold_)

    @property
    def rest(self) -> float:
        return self.reset

    def drift(self, u):
        return np.zeros_like(np.asarray(u, dtype=float)) if np.ndim(u) else 0.0

    def drift_slope(self, u):
        return np.zeros_like(np.asarray(u, dtype=float)) if np.ndim(u) else 0.0

    def parameters(self):
        return self._with_adaptation(dict(tau_m=self.tau_m, threshold=self.threshold_, reset=self.reset,
                                          refractory=self.refractory))

    def __repr__(self):
        return self._repr("PIF")


@dataclass(frozen=True, init=False)
class CustomNeuron(NeuronBase):
    """Neuron whose drift F(u) is a text expression.

    ``tau_m du/dt = F(u) + mu`` with ``F`` given as text in ``u`` and named
    parameters, parsed safely (see :mod:`popdens.model.expressions`).

    Parameters
    ----------
    drift : str
        Expression for F(u) in mV, e.g. ``"-(u - rest) + 0.02*(u - rest)**2"``.
    tau_m : float
        Membrane time constant (ms), > 0.
    threshold : float
        Threshold (mV): escape functions are centred here and, without
        ``cutoff``, it is the absorbing boundary for diffusive noise.
    reset : float
        Reset potential (mV), < threshold.
    refractory : float
        Absolute refractory period (ms), >= 0.
    parameters : mapping, optional
        Named constants used in ``drift`` (mV unless stated by the user).
    cutoff : float, optional
        Spike cut-off (mV) > threshold, for drifts that diverge.
    rest : float, optional
        A typical resting potential (mV) used to place automatic grids;
        default ``reset``.
    adaptation : sequence, optional
        Spike-triggered adaptation: :class:`~popdens.Adaptation` currents and
        (escape noise) :class:`~popdens.MovingThreshold` kernels; default none
        (a renewal neuron).
    """

    name: ClassVar[str] = "custom"
    code: ClassVar[int] = CODE_CUSTOM
    drift_text: str
    tau_m: float
    threshold_: float
    reset: float
    refractory: float
    params: Mapping[str, float]
    cutoff: float | None
    rest_: float
    _expr: Expression = field(repr=False, compare=False)
    _slope: Expression = field(repr=False, compare=False)

    def __init__(self, drift, tau_m, threshold, reset, refractory, parameters=None, cutoff=None, rest=None,
                 adaptation=None):
        params = dict(parameters or {})
        expr = parse_expression(drift, ("u",), params)
        _setattrs(self, drift_text=drift, tau_m=v.as_finite_float("tau_m", tau_m),
                  threshold_=v.as_finite_float("threshold", threshold), reset=v.as_finite_float("reset", reset),
                  refractory=v.as_finite_float("refractory", refractory), params=params,
                  cutoff=None if cutoff is None else v.as_finite_float("cutoff", cutoff),
                  rest_=v.as_finite_float("rest", reset if rest is None else rest),
                  _expr=expr, _slope=expr.derivative("u"))
        if self.cutoff is not None:
            v.less_than("threshold", self.threshold_, "cutoff", self.cutoff)
        self._set_adaptation(adaptation)
        self._check_common()
        probe = np.linspace(self.reset, self.boundary, 5)
        if not np.all(np.isfinite(self.drift(probe))):
            raise ValueError(f"`drift` {drift!r} is not finite between reset and threshold")

    @property
    def has_cutoff(self) -> bool:  # type: ignore[override]
        return self.cutoff is not None

    threshold = property(lambda self: self.threshold_)
    boundary = property(lambda self: self.threshold_ if self.cutoff is None else self.cutoff)
    rest = property(lambda self: self.rest_)

    def drift(self, u):
        return self._expr(np.asarray(u, dtype=float)) if np.ndim(u) else float(self._expr(float(u)))

    def drift_slope(self, u):
        return self._slope(np.asarray(u, dtype=float)) if np.ndim(u) else float(self._slope(float(u)))

    @property
    def program(self):
        return self._expr.program

    @property
    def slope_program(self):
        return self._slope.program

    def parameters(self):
        out = dict(drift=self.drift_text, tau_m=self.tau_m, threshold=self.threshold_, reset=self.reset,
                   refractory=self.refractory, parameters=dict(self.params))
        if self.cutoff is not None:
            out["cutoff"] = self.cutoff
        out["rest"] = self.rest_
        return self._with_adaptation(out)

    def __repr__(self):
        return self._repr("CustomNeuron")
