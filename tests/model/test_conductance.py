"""ConductanceNoise: validation (errors name the parameter), the conductance moments (Campbell's theorem),
the effective time constant and the first-order boundary shifts."""

from __future__ import annotations

import math

import mpmath
import pytest

import popdens

EXAMPLE = dict(exc_rate=20000.0, exc_weight=0.02, exc_tau=2.0, exc_reversal=70.0,
               inh_rate=5000.0, inh_weight=0.05, inh_tau=5.0, inh_reversal=-10.0)


def test_errors_name_the_parameter():
    with pytest.raises(ValueError, match="`exc_rate`"):
        popdens.ConductanceNoise(-1.0, 0.02, 2.0, 70.0)
    with pytest.raises(ValueError, match="`exc_weight`"):
        popdens.ConductanceNoise(100.0, 0.0, 2.0, 70.0)
    with pytest.raises(ValueError, match="`exc_tau`"):
        popdens.ConductanceNoise(100.0, 0.02, -2.0, 70.0)
    with pytest.raises(ValueError, match="`exc_reversal`"):
        popdens.ConductanceNoise(100.0, 0.02, 2.0, float("nan"))
    with pytest.raises(ValueError, match="`inh_weight`"):
        popdens.ConductanceNoise(100.0, 0.02, 2.0, 70.0, inh_rate=50.0, inh_reversal=-10.0)
    with pytest.raises(ValueError, match="`inh_reversal`"):
        popdens.ConductanceNoise(100.0, 0.02, 2.0, 70.0, inh_rate=50.0, inh_weight=0.05)
    with pytest.raises(ValueError, match="`inh_reversal` must be below"):
        popdens.ConductanceNoise(100.0, 0.02, 2.0, 70.0, inh_rate=50.0, inh_weight=0.05, inh_reversal=80.0)
    with pytest.raises(ValueError, match="MovingThreshold"):
        popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0, adaptation=[popdens.MovingThreshold(30.0, 1.0)]),
                           popdens.ConductanceNoise(100.0, 0.02, 2.0, 70.0))


def test_moments_follow_campbells_theorem():
    """Campbell's theorem for a Poisson train of exponential pulses w e^{-t/tau} at rate nu (per ms): mean
    w nu tau, variance w^2 nu tau / 2 (e.g. Tuckwell 1988, Introduction to theoretical neurobiology, vol. 2);
    the effective time constant tau_m / (1 + g_e0 + g_i0) (Richardson 2004)."""
    n = popdens.ConductanceNoise(**EXAMPLE)
    ge, gi = n.mean_conductances()
    assert ge == pytest.approx(0.02 * 20.0 * 2.0, rel=1e-14)  # Campbell: w nu tau, nu = 20 per ms
    assert gi == pytest.approx(0.05 * 5.0 * 5.0, rel=1e-14)
    assert n.effective_time_constant(20.0) == pytest.approx(20.0 / (1.0 + 0.8 + 1.25), rel=1e-14)
    # white-limit intensity: twice the variance times the correlation time, w^2 nu tau^2 (Campbell)
    u = 13.0
    expect = (0.02 ** 2 * 20.0 * 4.0 * (70.0 - u) ** 2 + 0.05 ** 2 * 5.0 * 25.0 * (-10.0 - u) ** 2) / (2 * 400.0)
    assert n.white_diffusion(20.0, u) == pytest.approx(expect, rel=1e-13)
    d0, d1, d2 = n.diffusion_coefficients(20.0)
    assert d0 + d1 * u + d2 * u * u == pytest.approx(expect, rel=1e-12)  # the same quadratic expanded


def test_boundary_shift_of_one_channel_is_the_coloured_noise_shift():
    """One input type: the local noise is white noise of amplitude sigma = sqrt(2 tau_m D(theta)), and the
    shift is sigma alpha/2 sqrt(tau_s/tau_m) with alpha = sqrt(2)|zeta(1/2)| (Brunel & Sergi 1998; Fourcaud &
    Brunel 2002; zeta from mpmath); the reset moves by the same times (E - reset)/(E - threshold)."""
    n = popdens.ConductanceNoise(8000.0, 0.03, 3.0, 70.0)
    tau_m, th, re = 20.0, 20.0, 10.0
    sigma = math.sqrt(2 * tau_m * 0.03 ** 2 * 8.0 * 9.0 * 50.0 ** 2 / (2 * tau_m ** 2))
    alpha = math.sqrt(2.0) * abs(float(mpmath.zeta(0.5)))
    d_th, d_re = n.boundary_shifts(tau_m, th, re)
    assert d_th == pytest.approx(sigma * alpha / 2 * math.sqrt(3.0 / tau_m), rel=1e-12)
    assert d_re == pytest.approx(d_th * 60.0 / 50.0, rel=1e-12)
