"""Noise models and the population (neuron model + noise).

Three noise models are supported:

* :class:`EscapeNoise` -- each neuron fires with an instantaneous rate (the
  hazard, Hz) that depends on its membrane potential; there is no hard
  threshold.
* :class:`WhiteNoise` -- each neuron receives Gaussian white-noise input,
  with the convention

  .. math:: \\tau_m\\,du = (F(u) + \\mu(t))\\,dt + \\sigma\\sqrt{\\tau_m}\\,dW,

  so a free LIF membrane has stationary variance :math:`\\sigma^2/2`
  (sigma in mV, time in ms).  A spike occurs when ``u`` reaches the
  neuron's ``boundary``.
* :class:`~popdens.model.synaptic.ColouredNoise` -- the same noise filtered by
  an exponential synapse (time constant ``tau_syn``); see
  :mod:`popdens.model.synaptic`.
* :class:`~popdens.model.shot.ShotNoise` -- Poisson input spike trains with
  finite PSPs (jumps of ``u``); see :mod:`popdens.model.shot`.
* :class:`~popdens.model.conductance.ConductanceNoise` -- Poisson input spike
  trains through synaptic conductances with reversal potentials; see
  :mod:`popdens.model.conductance`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Union

from .. import _validation as v
from .drive import Constant, Drive
from .hazard import EscapeFunction
from .conductance import ConductanceNoise
from .neurons import NeuronBase
from .shot import ShotNoise
from .synaptic import ColouredNoise

__all__ = ["EscapeNoise", "WhiteNoise", "Population"]


@dataclass(frozen=True)
class EscapeNoise:
    """Escape noise with a given escape function.

    Parameters
    ----------
    hazard : EscapeFunction
        E.g. ``popdens.hazard.Exponential(rate=10.0, width=2.0)``.
    """

    hazard: EscapeFunction

    def __post_init__(self):
        if not isinstance(self.hazard, EscapeFunction):
            raise ValueError(
                f"`hazard` must be an escape function from popdens.hazard, got {self.hazard!r}"
            )


@dataclass(frozen=True)
class WhiteNoise:
    """Gaussian white-noise input of amplitude ``sigma`` (mV).

    Convention: ``tau_m du = (F(u) + mu) dt + sigma sqrt(tau_m) dW``; a free
    LIF membrane then has variance ``sigma**2 / 2`` (mV^2).

    Parameters
    ----------
    sigma : float or Drive
        Noise amplitude in mV (> 0), or a drive giving it over time (ms).
    """

    sigma: Union[float, Drive]

    def __post_init__(self):
        s = self.sigma
        if isinstance(s, Drive):
            return
        object.__setattr__(self, "sigma", v.positive("sigma", s))

    @property
    def sigma_drive(self) -> Drive:
        """The amplitude as a drive (mV over ms)."""
        return self.sigma if isinstance(self.sigma, Drive) else Constant(self.sigma)


#: Noise models a Population accepts.
NOISE_MODELS = (EscapeNoise, WhiteNoise, ColouredNoise, ShotNoise, ConductanceNoise)


@dataclass(frozen=True)
class Population:
    """A large population of identical, independent neurons with one noise model.

    Parameters
    ----------
    neuron : NeuronBase
        LIF, EIF, QIF, PIF or CustomNeuron.
    noise : EscapeNoise, WhiteNoise, ColouredNoise, ShotNoise or ConductanceNoise
        How the neurons fire: escape noise (a hazard), white-noise input,
        white noise filtered by an exponential synapse, Poisson input
        spikes with finite PSPs, or Poisson input through synaptic
        conductances.
    """

    neuron: NeuronBase
    noise: Union[EscapeNoise, WhiteNoise, ColouredNoise, ShotNoise, ConductanceNoise]

    def __post_init__(self):
        if not isinstance(self.neuron, NeuronBase):
            raise ValueError(f"`neuron` must be a popdens neuron model, got {self.neuron!r}")
        if not isinstance(self.noise, NOISE_MODELS):
            raise ValueError(f"`noise` must be EscapeNoise, WhiteNoise, ColouredNoise, ShotNoise or "
                             f"ConductanceNoise, got {self.noise!r}")
        if isinstance(self.noise, (WhiteNoise, ColouredNoise, ShotNoise, ConductanceNoise)) and self.neuron.moving_thresholds:
            raise ValueError("`adaptation` holds a MovingThreshold, which needs escape noise; with white, "
                             "coloured, shot or conductance noise the threshold is the absorbing boundary: use popdens.Adaptation "
                             "currents instead")


