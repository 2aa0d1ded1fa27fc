"""Exact stationary rate of the LIF driven by shot noise with exponentially distributed excitatory PSPs.

Model (:class:`~popdens.ShotNoise`, LIF drift ``F(u) = -(u - rest)``):
between input spikes ``tau du/dt = E - u`` with ``E = rest + mu``;
excitatory input at rate ``R_e`` (1/ms) with amplitudes exponential of mean
``a_e``; inhibitory input at rate ``R_i`` with amplitudes of mean ``a_i``
(exponential or fixed); threshold ``th``, reset ``re``, refractory period
``t_ref``.

Method (Richardson & Swarbrick 2010, Phys. Rev. Lett. 105:178102): with
exponential excitatory amplitudes, the part of a jump that overshoots the
threshold drops out of the transformed master equation.  Multiplying the
stationary equation by ``exp(s u)`` and integrating over ``u < th`` gives a
first-order equation in ``s`` for ``Q(s) = int P(u) exp(s u) du``:

.. math::
    Q' = Q\\,\\Big[E + \\frac{\\tau R_e a_e}{1 - a_e s} - \\tau R_i\\,\\frac{1 - \\phi_i(s)}{s}\\Big]
       + \\frac{\\tau r}{s}\\Big[e^{s\\,re} - \\frac{e^{s\\,th}}{1 - a_e s}\\Big],

``phi_i(s) = <exp(-s a_i)> = 1/(1 + a_i s)``, valid when ``E < th`` (no flux is carried across
the threshold by the drift).  ``Q`` is finite at ``s = 1/a_e``, where the
integrating factor vanishes; that fixes the rate:

.. math::
    \\frac{1}{r} = t_{ref} + \\tau \\int_0^1 \\frac{dz}{z}\\,e^{\\Lambda_i(z)}
      \\Big[(1-z)^{\\tau R_e - 1} e^{z (th - E)/a_e} - (1-z)^{\\tau R_e} e^{z (re - E)/a_e}\\Big],

``Lambda_i(z) = tau R_i log(1 + z a_i/a_e)``.  Without inhibition and with the reset at ``E`` this
reduces to the excitatory shot-noise results of Richardson & Swarbrick
(2010) and Droste & Lindner (2017, J. Comput. Neurosci. 43:81).  The
integral is evaluated with QUADPACK's algebraic-weight rule for the
endpoint factor ``(1 - z)^{tau R_e - 1}`` and scaled by its largest value
(so rates below 1e-300 Hz come out as 0 instead of overflowing).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import integrate

__all__ = ["exact_shot_rate", "exact_rate_applies"]

#: Relative tolerance of the quadrature.
QUAD_RTOL = 1e-10
#: Sub-intervals allowed to the adaptive quadrature.
QUAD_LIMIT = 400


def exact_rate_applies(neuron, noise, mu: float) -> bool:
    """True when the closed form holds: LIF, exponential amplitudes, excitation, ``rest + mu`` below threshold."""
    return (noise.exponential and noise.exc_rate > 0.0
            and float(neuron.rest) + float(mu) < float(neuron.threshold))


def exact_shot_rate(tau_m, threshold, reset, refractory, rest, mu, exc_rate, exc_psp, inh_rate, inh_psp) -> float:
    """Stationary rate (Hz) of the shot-noise LIF (module docstring); ms, mV, Hz.

    Raises ``ValueError`` when ``rest + mu >= threshold`` (drift across the threshold) or
    without excitation.
    """
    e = float(rest) + float(mu)
    if not e < threshold:
        raise ValueError(f"the exact shot-noise rate needs `mu` < threshold - rest = {threshold - rest:g} mV "
                         f"(no drift across the threshold), got {mu!r}")
    if exc_rate <= 0.0:
        raise ValueError("the exact shot-noise rate needs `exc_rate` > 0 Hz")
    tau = float(tau_m)
    k_e = tau * exc_rate * 1e-3  # tau R_e, dimensionless
    k_i = tau * inh_rate * 1e-3
    big_a = (threshold - e) / exc_psp
    big_b = (reset - e) / exc_psp
    ratio = inh_psp / exc_psp

    def lam_i(z):
        if k_i == 0.0:
            return 0.0
        x = z * ratio
        return k_i * math.log1p(x)

    def log_top(z):  # log of the first term without its (1 - z)^(k_e - 1) weight
        return lam_i(z) + z * big_a

    # scale: the largest value of the first term, (1 - z)^(k_e - 1) exp(z A + Lambda_i)
    zs = np.linspace(0.0, 1.0, 2001)[:-1]
    logs = np.array([(k_e - 1.0) * math.log1p(-z) + log_top(z) for z in zs])
    j = int(np.argmax(logs))
    scale = float(logs[j])
    peak = float(zs[j])

    def g(z):
        """Integrand over (1 - z)^(k_e - 1), times exp(-scale)."""
        if z <= 0.0:
            return math.exp(-scale) * (big_a - big_b + 1.0)
        base = lam_i(z) - scale
        if z < 1e-6:  # (e^{zA} - (1 - z) e^{zB}) / z without cancellation
            val = (math.expm1(z * big_a) - math.expm1(z * big_b)) / z + math.exp(z * big_b)
            return math.exp(base) * val
        t1 = math.exp(base + z * big_a)
        t2 = math.exp(base + z * big_b + math.log1p(-z)) if z < 1.0 else 0.0
        return (t1 - t2) / z

    pts = [p for p in (peak,) if 0.0 < p < 1.0]
    total = 0.0
    edges = [0.0] + pts + [1.0]
    for lo, hi in zip(edges[:-1], edges[1:]):
        if hi == 1.0:
            # the endpoint factor (1 - z)^(k_e - 1) by the algebraic weight rule; g is smooth there
            val, _ = integrate.quad(g, lo, hi, weight="alg",
                                    wvar=(0.0, k_e - 1.0), epsrel=QUAD_RTOL, epsabs=0.0, limit=QUAD_LIMIT)
        else:
            val, _ = integrate.quad(lambda z: g(z) * (1.0 - z) ** (k_e - 1.0), lo, hi, epsrel=QUAD_RTOL,
                                    epsabs=0.0, limit=QUAD_LIMIT)
        total += val
    log_isi_part = math.log(tau) + math.log(total) + scale if total > 0.0 else -math.inf
    if log_isi_part > 700.0:
        return 0.0
    return 1000.0 / (float(refractory) + math.exp(log_isi_part))
