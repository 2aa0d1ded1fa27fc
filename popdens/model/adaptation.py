"""Spike-triggered adaptation: adaptation currents and moving thresholds.

A neuron model carries a list of adaptation components (``adaptation=[...]``
on every neuron model).  Two kinds exist:

* :class:`Adaptation` -- an adaptation current ``w_k`` (mV: the current times
  the membrane resistance) that enters the drift,

  .. math:: \\tau_m \\frac{du}{dt} = F(u) + \\mu(t) - \\sum_k w_k,\\qquad
            \\tau_k \\frac{dw_k}{dt} = a_k\\,(u - u_{\\rm rest}) - w_k,

  and jumps by ``b_k`` (``jump``, mV) at each spike of the neuron: the
  adaptive integrate-and-fire form (Brette & Gerstner 2005, J. Neurophysiol.
  94:3637) with a dimensionless subthreshold coupling ``a_k`` (``coupling``).
  During the absolute refractory period ``u`` is held at reset and ``w_k``
  keeps relaxing.
* :class:`MovingThreshold` -- a threshold kernel for escape noise: the
  escape function is evaluated at the threshold
  ``threshold + sum_k theta_k`` with ``theta_k`` jumping by ``jump`` (mV) at
  each spike and decaying back with time constant ``tau`` (ms), i.e. the
  exponential kernel ``theta_k(t - t_spike) = jump exp(-(t - t_spike)/tau)``
  summed over all past spikes (Gerstner et al. 2014, Neuronal Dynamics,
  ch. 6; Naud & Gerstner 2012, PLoS Comput. Biol. 8:e1002711).

Units: time constants in ms, jumps in mV, the coupling dimensionless.  An
empty list (the default) is today's renewal neuron, bit for bit.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .. import _validation as v

__all__ = ["Adaptation", "MovingThreshold", "AdaptationTerm", "check_adaptation", "KIND_CURRENT", "KIND_THRESHOLD",
           "pack", "refuse", "step_args"]

#: Integer codes of the component kinds in compiled code.
KIND_CURRENT, KIND_THRESHOLD = 0, 1


class AdaptationTerm:
    """Base of adaptation components (do not instantiate)."""

    kind: int = -1
    tau: float
    jump: float

    @property
    def coupling_value(self) -> float:
        return 0.0


@dataclass(frozen=True)
class Adaptation(AdaptationTerm):
    """An adaptation current ``w`` (mV) with time constant ``tau`` and spike-triggered ``jump``.

    ``tau dw/dt = coupling * (u - rest) - w`` between spikes, ``w -> w + jump``
    at each spike; ``w`` is subtracted from the drive.

    Parameters
    ----------
    tau : float
        Time constant (ms), > 0.
    jump : float
        Increment of ``w`` at each spike (mV), >= 0.
    coupling : float, optional
        Subthreshold coupling ``a`` (dimensionless), >= 0; default 0 (purely
        spike-triggered adaptation).

    Examples
    --------
    >>> Adaptation(tau=200.0, jump=0.5)
    Adaptation(tau=200.0, jump=0.5, coupling=0.0)
    """

    tau: float
    jump: float
    coupling: float = 0.0
    kind = KIND_CURRENT

    def __post_init__(self):
        object.__setattr__(self, "tau", v.positive("tau", self.tau))
        object.__setattr__(self, "jump", v.non_negative("jump", self.jump))
        object.__setattr__(self, "coupling", v.non_negative("coupling", self.coupling))

    @property
    def coupling_value(self) -> float:
        return self.coupling

    def parameters(self) -> dict:
        return {"kind": "current", "tau": self.tau, "jump": self.jump, "coupling": self.coupling}


@dataclass(frozen=True)
class MovingThreshold(AdaptationTerm):
    """A threshold that jumps by ``jump`` (mV) at each spike and relaxes with ``tau`` (ms).

    Only for escape noise: the escape function sees ``threshold + theta``.

    Parameters
    ----------
    tau : float
        Decay time constant (ms), > 0.
    jump : float
        Increment of the threshold at each spike (mV), >= 0.

    Examples
    --------
    >>> MovingThreshold(tau=100.0, jump=2.0)
    MovingThreshold(tau=100.0, jump=2.0)
    """

    tau: float
    jump: float
    kind = KIND_THRESHOLD

    def __post_init__(self):
        object.__setattr__(self, "tau", v.positive("tau", self.tau))
        object.__setattr__(self, "jump", v.non_negative("jump", self.jump))

    def parameters(self) -> dict:
        return {"kind": "threshold", "tau": self.tau, "jump": self.jump}


def check_adaptation(value) -> tuple:
    """``adaptation`` as a tuple of :class:`Adaptation` / :class:`MovingThreshold`, or a clear ``ValueError``."""
    if value is None:
        return ()
    if isinstance(value, AdaptationTerm):
        value = (value,)
    if isinstance(value, (str, bytes, dict)) or not hasattr(value, "__iter__"):
        raise ValueError(f"`adaptation` must be a list of popdens.Adaptation or popdens.MovingThreshold, "
                         f"got {value!r}")
    items = tuple(value)
    for i, item in enumerate(items):
        if not isinstance(item, AdaptationTerm):
            raise ValueError(f"`adaptation[{i}]` must be a popdens.Adaptation or popdens.MovingThreshold, "
                             f"got {item!r}")
    return items


def pack(terms) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Compiled representation: ``(kind, tau, jump, coupling)`` arrays of shape ``(K,)``."""
    kind = np.array([t.kind for t in terms], dtype=np.int64)
    tau = np.array([t.tau for t in terms], dtype=float)
    jump = np.array([t.jump for t in terms], dtype=float)
    coup = np.array([t.coupling_value for t in terms], dtype=float)
    return kind, tau, jump, coup


def step_args(neuron, dt: float) -> tuple:
    """Compiled adaptation parameters for a time step ``dt`` (ms).

    ``(kinds, decay, coupling, kick, rest)``: kind codes, the decay factor
    ``exp(-dt/tau)`` of one step, the coupling, the increment ``jump
    exp(-dt/(2 tau))`` left at the end of a step by a spike in its middle
    (mV), and the neuron's resting potential (mV).
    """
    kinds, tau, jump, coup = pack(neuron.adaptation)
    return kinds, np.exp(-dt / tau), coup, jump * np.exp(-0.5 * dt / tau), float(neuron.rest)


def refuse(population, what: str) -> None:
    """Raise a clear ``ValueError`` when ``what`` does not support adapting neurons."""
    if population.neuron.adaptation:
        raise ValueError(f"{what} does not support `adaptation` (spike-triggered adaptation) yet; "
                         "remove it from the neuron model or use popdens.montecarlo")
