"""Conductance input: Poisson input spikes through synaptic conductances with reversal potentials.

:class:`ConductanceNoise` -- each neuron receives independent Poisson trains
of excitatory and inhibitory input spikes; each input spike opens a
synaptic conductance that decays exponentially.  Convention (units mV, ms,
Hz; conductances *dimensionless, in units of the neuron's leak
conductance*):

.. math::
    \\tau_m\\,\\frac{du}{dt} = F(u) + \\mu(t)
      + g_e(t)\\,(E_e - u) + g_i(t)\\,(E_i - u),\\qquad
    \\frac{dg_x}{dt} = -\\frac{g_x}{\\tau_x} + w_x \\sum_k \\delta(t - t^x_k),

with arrivals ``t^x_k`` at rate ``nu_x`` (Hz) and jumps ``w_x``.  A jump
``w = 0.05`` opens a conductance of 5 % of the leak (for a cell with a
10 nS leak conductance: 0.5 nS).  The reversal potentials ``E_x`` are on
the same scale as the neuron's potentials (with the common choice
``rest = 0``, an excitatory reversal at 0 mV and an inhibitory one at
-80 mV for a cell resting at -70 mV are ``E_e = 70``, ``E_i = -10``).

Moments (Campbell's theorem; rates in 1/ms): mean conductance
``g_x0 = w_x nu_x tau_x``, variance ``w_x^2 nu_x tau_x / 2``, correlation
time ``tau_x``.  The mean conductance shortens the membrane time constant
and moves the resting potential (the effective-time-constant
approximation; Richardson 2004, Phys. Rev. E 69:051918; Richardson &
Gerstner 2005, Neural Comput. 17:923): for the LIF,

.. math:: \\tau_{\\rm eff} = \\frac{\\tau_m}{1 + g_{e0} + g_{i0}},\\qquad
          E_0 = \\frac{u_{\\rm rest} + \\mu + g_{e0}E_e + g_{i0}E_i}{1 + g_{e0} + g_{i0}},

and the fluctuations enter multiplied by the driving force ``E_x - u``:
a voltage-dependent noise amplitude.  The analyses built on this are
approximations; their errors against the Monte Carlo twin (which simulates
the conductances exactly) are tabulated in the contributor guide.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .. import _validation as v

__all__ = ["ConductanceNoise"]

_MS_TO_S = 1e-3


@dataclass(frozen=True)
class ConductanceNoise:
    """Poisson input through exponentially decaying synaptic conductances (module docstring).

    Parameters
    ----------
    exc_rate : float
        Total excitatory input rate per neuron (Hz), >= 0.
    exc_weight : float
        Jump of the excitatory conductance per input spike, in units of the
        leak conductance (dimensionless), > 0.
    exc_tau : float
        Decay time constant of the excitatory conductance (ms), > 0.
    exc_reversal : float
        Excitatory reversal potential (mV), on the neuron's potential scale.
    inh_rate : float
        Total inhibitory input rate per neuron (Hz), >= 0 (default 0).
    inh_weight : float
        Jump of the inhibitory conductance (leak units), > 0 when
        ``inh_rate`` > 0 (default 0).
    inh_tau : float
        Decay time constant of the inhibitory conductance (ms), > 0
        (default 5 ms; unused without inhibition).
    inh_reversal : float, optional
        Inhibitory reversal potential (mV), below ``exc_reversal``; required
        when ``inh_rate`` > 0.

    Examples
    --------
    >>> n = ConductanceNoise(exc_rate=20000.0, exc_weight=0.02, exc_tau=2.0, exc_reversal=70.0,
    ...                      inh_rate=5000.0, inh_weight=0.05, inh_tau=5.0, inh_reversal=-10.0)
    >>> [round(g, 6) for g in n.mean_conductances()]   # leak units
    [0.8, 1.25]
    >>> round(n.effective_time_constant(20.0), 4)      # ms, for tau_m = 20 ms
    6.5574
    """

    exc_rate: float
    exc_weight: float
    exc_tau: float
    exc_reversal: float
    inh_rate: float = 0.0
    inh_weight: float = 0.0
    inh_tau: float = 5.0
    inh_reversal: float | None = None

    def __post_init__(self):
        for name in ("exc_rate", "inh_rate", "inh_weight"):
            object.__setattr__(self, name, v.non_negative(name, getattr(self, name)))
        for name in ("exc_weight", "exc_tau", "inh_tau"):
            object.__setattr__(self, name, v.positive(name, getattr(self, name)))
        object.__setattr__(self, "exc_reversal", v.as_finite_float("exc_reversal", self.exc_reversal))
        if self.inh_rate > 0.0:
            if self.inh_weight <= 0.0:
                raise ValueError(f"`inh_weight` must be > 0 (leak units) when `inh_rate` > 0, got {self.inh_weight!r}")
            if self.inh_reversal is None:
                raise ValueError("`inh_reversal` (mV) is required when `inh_rate` > 0")
        if self.inh_reversal is not None:
            rev = v.as_finite_float("inh_reversal", self.inh_reversal)
            if not rev < self.exc_reversal:
                raise ValueError(f"`inh_reversal` must be below `exc_reversal` ({self.exc_reversal:g} mV), "
                                 f"got {rev!r} mV")
            object.__setattr__(self, "inh_reversal", rev)

    @property
    def inhibited(self) -> bool:
        """True when there is inhibitory input."""
        return self.inh_rate > 0.0

    def channels(self) -> list[tuple[float, float, float, float]]:
        """``(rate_per_ms, weight, tau_ms, reversal_mV)`` of each input type present."""
        out = [(self.exc_rate * _MS_TO_S, self.exc_weight, self.exc_tau, self.exc_reversal)]
        if self.inhibited:
            out.append((self.inh_rate * _MS_TO_S, self.inh_weight, self.inh_tau, float(self.inh_reversal)))
        return out

    def mean_conductances(self) -> tuple[float, float]:
        """Mean excitatory and inhibitory conductances ``w nu tau`` (leak units).

        Returns
        -------
        tuple of float
            ``(g_e0, g_i0)``, dimensionless.
        """
        ge = self.exc_weight * self.exc_rate * _MS_TO_S * self.exc_tau
        gi = self.inh_weight * self.inh_rate * _MS_TO_S * self.inh_tau
        return ge, gi

    def total_conductance(self) -> float:
        """``1 + g_e0 + g_i0``: the mean total conductance in leak units (dimensionless)."""
        ge, gi = self.mean_conductances()
        return 1.0 + ge + gi

    def effective_time_constant(self, tau_m: float) -> float:
        """Effective membrane time constant (ms) ``tau_m / (1 + g_e0 + g_i0)``.

        Parameters
        ----------
        tau_m : float
            Membrane time constant (ms) at rest (leak only).

        Returns
        -------
        float
            The time constant (ms) with the mean synaptic conductance added.
        """
        return v.positive("tau_m", tau_m) / self.total_conductance()

    def white_diffusion(self, tau_m: float, u) -> float:
        """Diffusion coefficient ``D(u)`` (mV^2/ms) of the conductance fluctuations in their white limit.

        ``D(u) = sum_x w_x^2 nu_x tau_x^2 (E_x - u)^2 / (2 tau_m^2)``: each conductance's
        fluctuation, of variance ``w^2 nu tau / 2`` and correlation time ``tau``, has the
        integrated intensity ``w^2 nu tau^2`` and enters ``du/dt`` times ``(E_x - u)/tau_m``.

        Parameters
        ----------
        tau_m : float
            Membrane time constant (ms).
        u : float or array
            Membrane potential (mV).

        Returns
        -------
        float or array
            ``D(u)`` in mV^2/ms.
        """
        tau_m = v.positive("tau_m", tau_m)
        out = 0.0
        for nu, w, tau, rev in self.channels():
            out = out + w * w * nu * tau * tau * (rev - u) ** 2 / (2.0 * tau_m * tau_m)
        return out

    def density_terms(self, tau_m: float, u):
        """Drift (mV) and diffusion coefficient (mV^2/ms) the conductances add to the density equation.

        The drift ``sum_x g_x0 (E_x - u) - tau_m D'(u)/2`` enters like ``F(u)``
        (``A = (F + mu + drift)/tau_m``); with it the flux is ``J = A P - D dP/du``, the
        Stratonovich form ``J = (A_0 - D'/2) P - D P'`` of the white-limit fluctuations
        (:mod:`popdens.theory._conductance`).

        Parameters
        ----------
        tau_m : float
            Membrane time constant (ms).
        u : float or array
            Membrane potential (mV).

        Returns
        -------
        tuple
            ``(drift, D)``: mV and mV^2/ms, the shape of ``u``.
        """
        tau_m = v.positive("tau_m", tau_m)
        drift = 0.0
        d = 0.0
        slope = 0.0
        for nu, w, tau, rev in self.channels():
            q = w * w * nu * tau * tau / (2.0 * tau_m * tau_m)
            drift = drift + w * nu * tau * (rev - u)
            d = d + q * (rev - u) ** 2
            slope = slope - 2.0 * q * (rev - u)
        return drift - 0.5 * tau_m * slope, d

    def diffusion_coefficients(self, tau_m: float) -> tuple[float, float, float]:
        """``(d0, d1, d2)`` with ``D(u) = d0 + d1 u + d2 u^2`` (mV^2/ms; see :meth:`white_diffusion`).

        Parameters
        ----------
        tau_m : float
            Membrane time constant (ms).

        Returns
        -------
        tuple of float
            Coefficients in mV^2/ms, mV/ms and 1/ms.
        """
        tau_m = v.positive("tau_m", tau_m)
        d0 = d1 = d2 = 0.0
        for nu, w, tau, rev in self.channels():
            q = w * w * nu * tau * tau / (2.0 * tau_m * tau_m)
            d0 += q * rev * rev
            d1 -= 2.0 * q * rev
            d2 += q
        return d0, d1, d2

    def boundary_shifts(self, tau_m: float, threshold: float, reset: float) -> tuple[float, float]:
        """First-order shifts (mV) of threshold and reset for the synaptic filtering.

        At threshold ``delta_th = alpha/sqrt(2) sum_x D_x(th) sqrt(tau_x) / sqrt(D(th))``
        (Brunel & Sergi 1998; Fourcaud & Brunel 2002, with the local noise at threshold and
        the conductances' time constants weighted by their share of it); each input type's
        part is carried to the reset scaled by its driving force, ``(E_x - reset)/(E_x - th)``,
        since the conductance is continuous through the spike.

        Parameters
        ----------
        tau_m : float
            Membrane time constant (ms).
        threshold, reset : float
            Threshold and reset (mV).

        Returns
        -------
        tuple of float
            ``(threshold shift, reset shift)`` in mV.
        """
        from .synaptic import ALPHA  # noqa: PLC0415 - light module

        tau_m = v.positive("tau_m", tau_m)
        d_th = self.white_diffusion(tau_m, threshold)
        if not d_th > 0.0:
            return 0.0, 0.0
        d_th_shift = 0.0
        d_reset_shift = 0.0
        for nu, w, tau, rev in self.channels():
            dx = w * w * nu * tau * tau * (rev - threshold) ** 2 / (2.0 * tau_m * tau_m)
            part = ALPHA / math.sqrt(2.0) * dx * math.sqrt(tau) / math.sqrt(d_th)
            d_th_shift += part
            if rev != threshold:
                d_reset_shift += part * (rev - reset) / (rev - threshold)
        return d_th_shift, d_reset_shift
