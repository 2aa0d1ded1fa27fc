"""Finite post-synaptic potentials: Poisson input spike trains (shot noise).

:class:`ShotNoise` -- each neuron receives independent Poisson trains of
excitatory and inhibitory input spikes; each input spike moves the membrane
potential at once by a finite amount (the PSP amplitude).  Convention
(units mV, ms, Hz):

.. math::
    \\tau_m\\,\\frac{du}{dt} = F(u) + \\mu(t)
      + \\tau_m \\sum_k a^e_k\\,\\delta(t - t^e_k)
      - \\tau_m \\sum_k a^i_k\\,\\delta(t - t^i_k),

with excitatory arrivals ``t^e_k`` at rate ``exc_rate`` (Hz) and amplitudes
``a^e_k`` (mV), inhibitory ones at ``inh_rate`` with amplitudes ``a^i_k``.
The amplitudes are either all equal to ``exc_psp`` / ``inh_psp``
(``amplitudes="fixed"``) or drawn independently from exponential
distributions with those means (``amplitudes="exponential"``).  An input
spike that lifts ``u`` to the neuron's ``boundary`` or beyond is an output
spike; input arriving during the refractory period is lost.

Diffusion approximation (Stein 1965; Tuckwell 1988, Introduction to
theoretical neurobiology, vol. 2): the same first two moments of the input
as white noise,

.. math:: \\mu_{\\rm shot} = \\tau_m (\\nu_e \\langle a_e\\rangle - \\nu_i \\langle a_i\\rangle),\\qquad
          \\sigma^2 = \\tau_m (\\nu_e \\langle a_e^2\\rangle + \\nu_i \\langle a_i^2\\rangle)

(rates in 1/ms), in the convention of :class:`~popdens.WhiteNoise`.  It is
exact only as the amplitudes go to zero at fixed mean and variance; its
error against the Monte Carlo twin is tabulated in the contributor guide.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .. import _validation as v

__all__ = ["ShotNoise", "AMPLITUDE_LAWS"]

#: PSP amplitude distributions.
AMPLITUDE_LAWS = ("fixed", "exponential")
_MS_TO_S = 1e-3


@dataclass(frozen=True)
class ShotNoise:
    """Poisson input spike trains with finite PSPs (see the module docstring).

    Parameters
    ----------
    exc_rate : float
        Total excitatory input rate per neuron (Hz), >= 0.
    exc_psp : float
        Excitatory PSP amplitude (mV), > 0: the jump of ``u`` per input spike
        (its mean for exponential amplitudes).
    inh_rate : float
        Total inhibitory input rate per neuron (Hz), >= 0 (default 0).
    inh_psp : float
        Inhibitory PSP amplitude (mV), the size of the downward jump, > 0
        when ``inh_rate`` > 0 (default 0).
    amplitudes : {"fixed", "exponential"}
        PSP amplitude distribution (the same law for both kinds of input).

    Examples
    --------
    >>> n = ShotNoise(exc_rate=2000.0, exc_psp=0.2, inh_rate=500.0, inh_psp=0.5)
    >>> round(n.mean_input(20.0), 6)   # mV, for tau_m = 20 ms
    3.0
    """

    exc_rate: float
    exc_psp: float
    inh_rate: float = 0.0
    inh_psp: float = 0.0
    amplitudes: str = "fixed"

    def __post_init__(self):
        for name in ("exc_rate", "inh_rate"):
            object.__setattr__(self, name, v.non_negative(name, getattr(self, name)))
        object.__setattr__(self, "exc_psp", v.positive("exc_psp", self.exc_psp))
        object.__setattr__(self, "inh_psp", v.non_negative("inh_psp", self.inh_psp))
        if self.inh_rate > 0.0 and self.inh_psp <= 0.0:
            raise ValueError(f"`inh_psp` must be > 0 mV when `inh_rate` > 0, got {self.inh_psp!r}")
        if self.amplitudes not in AMPLITUDE_LAWS:
            raise ValueError(f"`amplitudes` must be one of {list(AMPLITUDE_LAWS)}, got {self.amplitudes!r}")

    @property
    def exponential(self) -> bool:
        """True for exponentially distributed amplitudes."""
        return self.amplitudes == "exponential"

    @property
    def inhibited(self) -> bool:
        """True when there is inhibitory input."""
        return self.inh_rate > 0.0

    def _second_moment(self, a: float) -> float:
        return (2.0 if self.exponential else 1.0) * a * a

    def mean_input(self, tau_m: float) -> float:
        """Mean drive (mV) the input adds: ``tau_m (nu_e <a_e> - nu_i <a_i>)`` (rates in 1/ms)."""
        tau_m = v.positive("tau_m", tau_m)
        return tau_m * _MS_TO_S * (self.exc_rate * self.exc_psp - self.inh_rate * self.inh_psp)

    def diffusion_sigma(self, tau_m: float) -> float:
        """White-noise amplitude (mV) with the input's variance: ``sqrt(tau_m (nu_e <a_e^2> + nu_i <a_i^2>))``."""
        tau_m = v.positive("tau_m", tau_m)
        var = tau_m * _MS_TO_S * (self.exc_rate * self._second_moment(self.exc_psp)
                                  + self.inh_rate * self._second_moment(self.inh_psp))
        return math.sqrt(var)
