"""Monte Carlo twins of adapting neurons: every neuron carries its own adaptation (checked against closed forms)."""

from __future__ import annotations

import numpy as np
import pytest

import popdens
from popdens import hazard

# PIF with adaptation current (tau_a, jump b), constant drive mu, reset 0, threshold theta, no refractoriness.
# Integrating tau_a dw/dt = -w + b tau_a sum delta(t - t_k) over one period T of the deterministic limit cycle
# gives int_0^T w dt = b tau_a, so mu T / tau_m - b tau_a / tau_m = theta and T = (tau_m theta + b tau_a) / mu
# (closed form derived here; the same balance as in Schwalger & Lindner 2013, Front. Comput. Neurosci. 7:164).
TAU_M, THETA, MU, B, TAU_A = 10.0, 10.0, 20.0, 0.1, 100.0
PERIOD = (TAU_M * THETA + B * TAU_A) / MU  # 5.5 ms; 5 ms without adaptation


def adapting_pif(noise):
    nrn = popdens.PIF(TAU_M, THETA, 0.0, 0.0, adaptation=[popdens.Adaptation(tau=TAU_A, jump=B)])
    return popdens.Population(nrn, noise)


@pytest.mark.parametrize("noise,tol", [
    (popdens.WhiteNoise(0.02), 2e-4),
    # a steep escape function fires ~0.02 ms after the crossing (width / slope times a log factor)
    (popdens.EscapeNoise(hazard.Exponential(rate=1000.0, width=0.01)), 6e-3),
], ids=["white", "escape"])
def test_weak_noise_period_of_an_adapting_pif_is_the_closed_form(noise, tol):
    mc = popdens.montecarlo(adapting_pif(noise), MU, t_end=500.0, n=50, dt=0.01, seed=1, record_spikes=True)
    isi = mc.isis()
    assert isi.size > 4000
    assert isi.mean() == pytest.approx(PERIOD, rel=tol)
    assert abs(isi.mean() - 5.0) > 10 * tol * PERIOD  # the adaptation is visible


def test_zero_adaptation_reproduces_the_renewal_twin_bit_for_bit():
    pop0 = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0), popdens.EscapeNoise(hazard.Exponential(20.0, 2.0)))
    nrn = popdens.LIF(10.0, 20.0, 0.0, 2.0, adaptation=[popdens.Adaptation(tau=50.0, jump=0.0)])
    pop1 = popdens.Population(nrn, pop0.noise)
    d = popdens.drive.Step(t=20.0, before=15.0, after=20.0)
    a = popdens.montecarlo(pop0, d, t_end=60.0, n=500, seed=5, burn_in=500.0)
    b = popdens.montecarlo(pop1, d, t_end=60.0, n=500, seed=5, burn_in=500.0)
    np.testing.assert_array_equal(a.rate, b.rate)
    np.testing.assert_array_equal(a.mean_u, b.mean_u)
