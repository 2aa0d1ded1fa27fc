"""Synaptic input models beyond white noise: filtered (coloured) noise.

:class:`ColouredNoise` -- Gaussian noise passed through an exponential
synaptic filter.  Convention (units mV, ms):

.. math::
    \\tau_m\\,\\frac{du}{dt} = F(u) + \\mu(t) + I_s,\\qquad
    \\tau_s\\,dI_s = -I_s\\,dt + \\sigma\\sqrt{\\tau_m}\\,dW,

so the integrated input has the same intensity as :class:`~popdens.WhiteNoise`
of amplitude ``sigma`` and ``tau_syn -> 0`` recovers it; ``I_s`` (mV) has
stationary variance ``sigma**2 tau_m / (2 tau_syn)``.  The mean drive
``mu(t)`` enters the membrane directly (it is not filtered).

The membrane potential is now differentiable: it reaches the threshold
only with positive velocity.  To first order in ``k = sqrt(tau_syn /
tau_m)`` the stationary density is that of the white-noise problem with
threshold and reset moved up by (Brunel & Sergi 1998, J. Theor. Biol.
195:87; Fourcaud & Brunel 2002, Neural Comput. 14:2057)

.. math:: \\delta = \\sigma\\,\\frac{\\alpha}{2}\\sqrt{\\tau_s/\\tau_m},\\qquad
          \\alpha = \\sqrt{2}\\,|\\zeta(1/2)| \\approx 2.0653,

where ``zeta`` is the Riemann zeta function (the Milne extrapolation length
of the kinetic boundary layer at an absorbing wall; Hagan, Doering &
Levermore 1989, SIAM J. Appl. Math. 49:1480).  This is an approximation; its
error against the Monte Carlo twin is tabulated in the contributor guide.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Union

from .. import _validation as v
from .drive import Constant, Drive

__all__ = ["ColouredNoise", "ALPHA", "ZETA_HALF"]

#: Riemann zeta(1/2) (checked against mpmath in the tests).
ZETA_HALF = -1.4603545088095868
#: alpha = sqrt(2) |zeta(1/2)| (Brunel & Sergi 1998; Fourcaud & Brunel 2002).
ALPHA = math.sqrt(2.0) * abs(ZETA_HALF)


@dataclass(frozen=True)
class ColouredNoise:
    """Gaussian noise filtered by an exponential synapse (see the module docstring).

    Parameters
    ----------
    sigma : float or Drive
        Noise amplitude (mV), > 0, as in :class:`~popdens.WhiteNoise`: the
        white noise the filter is applied to.  The analyses of the
        stationary state and the linear response need a constant amplitude.
    tau_syn : float
        Synaptic time constant (ms), > 0.

    Examples
    --------
    >>> n = ColouredNoise(4.0, 2.0)
    >>> round(n.boundary_shift(20.0), 4)   # mV, for tau_m = 20 ms
    1.3062
    """

    sigma: Union[float, Drive]
    tau_syn: float

    def __post_init__(self):
        if not isinstance(self.sigma, Drive):
            object.__setattr__(self, "sigma", v.positive("sigma", self.sigma))
        object.__setattr__(self, "tau_syn", v.positive("tau_syn", self.tau_syn))

    @property
    def sigma_drive(self) -> Drive:
        """The amplitude as a drive (mV over ms)."""
        return self.sigma if isinstance(self.sigma, Drive) else Constant(self.sigma)

    def constant_sigma(self) -> float | None:
        """The amplitude (mV) if it is constant, else None."""
        s = self.sigma
        if isinstance(s, Drive):
            return float(s(0.0)) if s.is_constant else None
        return float(s)

    def boundary_shift(self, tau_m: float, sigma: float | None = None) -> float:
        """Effective shift (mV) of threshold and reset, ``sigma alpha/2 sqrt(tau_syn/tau_m)``.

        Parameters
        ----------
        tau_m : float
            Membrane time constant (ms).
        sigma : float, optional
            Amplitude (mV) to use instead of the noise's own (which must then be constant).
        """
        if sigma is None:
            sigma = self.constant_sigma()
            if sigma is None:
                raise ValueError("the boundary shift needs a constant `sigma` (mV); pass `sigma=`")
        return float(sigma) * 0.5 * ALPHA * math.sqrt(self.tau_syn / v.positive("tau_m", tau_m))
