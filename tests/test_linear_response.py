"""Escape-noise transfer function: static limit and agreement with the time-domain solver."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad

import popdens
from popdens import drive, hazard
from popdens.linear_response import transfer


def pop():
    return popdens.Population(popdens.LIF(tau_m=10.0, threshold=20.0, reset=0.0, refractory=2.0),
                              popdens.EscapeNoise(hazard.Exponential(rate=20.0, width=2.0)))


def renewal_rate(mu, tau_m=10.0, theta=20.0, tau_ref=2.0):
    """1/E[ISI] by scipy quadrature of the survivor function (Cox 1962, "Renewal Theory")."""
    h = hazard.Exponential(rate=20.0, width=2.0)

    def u(a):
        return mu * (1.0 - math.exp(-(a - tau_ref) / tau_m))

    def big_h(a):
        return quad(lambda x: float(h.rate(u(x), theta)), tau_ref, a, limit=200)[0] * 1e-3

    a_max = 300.0
    mean = tau_ref + quad(lambda a: math.exp(-big_h(a)), tau_ref, a_max, limit=400)[0]
    mean += math.exp(-big_h(a_max)) / (float(h.rate(u(a_max), theta)) * 1e-3)
    return 1000.0 / mean


def test_low_frequency_limit_equals_gain_slope():
    mu = 24.0
    eps = 1e-3
    slope = (renewal_rate(mu + eps) - renewal_rate(mu - eps)) / (2 * eps)  # independent quadrature
    chi = transfer(pop(), mu, [0.0, 0.01])
    assert abs(chi[0] / slope - 1.0) < 1e-4
    # at 0.01 Hz the in-phase part is the static slope; the small lag is genuine
    assert abs(chi[1].real / slope - 1.0) < 1e-4 and abs(np.angle(chi[1])) < 1e-3


@pytest.mark.parametrize("f", [5.0, 40.0, 200.0])
def test_solver_driven_by_small_sinusoid_reproduces_amplitude_and_phase(f):
    """The refractory-density solver with a 0.05 mV sinusoid: amplitude within 2 %, phase
    within 0.05 rad of the linear theory (linearisation of the renewal equation, Gerstner 2000)."""
    mu, eps, dt = 24.0, 0.05, 0.01
    period = 1000.0 / f
    n_per = max(1, int(round(100.0 / period)))
    t_end = round((100.0 + n_per * period) / dt) * dt
    res = popdens.simulate(pop(), drive.Sine(mean=mu, amplitude=eps, frequency=f), t_end=t_end, dt=dt)
    keep = res.t >= res.t[-1] - n_per * period + 0.5 * dt
    t = res.t[keep] - 0.5 * dt  # step-average rates sit at step midpoints
    basis = np.column_stack([np.ones_like(t), np.sin(2 * np.pi * f * t * 1e-3), np.cos(2 * np.pi * f * t * 1e-3)])
    c = np.linalg.lstsq(basis, res.rate[keep], rcond=None)[0]
    amp, phase = np.hypot(c[1], c[2]) / eps, np.arctan2(c[2], c[1])
    chi = transfer(pop(), mu, [f])[0]
    assert abs(amp / abs(chi) - 1.0) < 0.02
    assert abs(phase - np.angle(chi)) < 0.05


def test_invalid_input():
    with pytest.raises(ValueError, match="freqs"):
        transfer(pop(), 20.0, [-1.0])
    with pytest.raises(ValueError, match="modulate"):
        transfer(pop(), 20.0, [1.0], modulate="noise")
    p = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0), popdens.EscapeNoise(
        hazard.ArrheniusCurrent(2.0, 10.0, 0.7, 1.1)))
    with pytest.raises(ValueError, match="du/dt"):
        transfer(p, 20.0, [1.0])
