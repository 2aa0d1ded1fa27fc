"""Monte Carlo twins of adapting neurons: every neuron carries its own adaptation (checked against closed forms)."""

from __future__ import annotations

import math

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


def serial_correlations(res, n_neurons, lags=(1, 2)):
    """Serial correlation coefficients of successive ISIs, pooled over neurons (each neuron's ISIs
    centred on the pooled mean), and the number of ISIs."""
    order = np.lexsort((res.spike_times, res.spike_ids))
    ids, ts = res.spike_ids[order], res.spike_times[order]
    isis = [np.diff(ts[ids == i]) for i in range(n_neurons)]
    mean = np.concatenate(isis).mean()
    var = np.mean(np.concatenate([x - mean for x in isis]) ** 2)
    out = [np.mean(np.concatenate([(x[k:] - mean) * (x[:-k] - mean) for x in isis])) / var for k in lags]
    return np.array(out), sum(x.size for x in isis)


def weak_noise_pif_scc(n, tau_m=10.0, theta=10.0, mu=20.0, b=2.0, tau_a=20.0):
    """Serial correlation coefficient at lag n of a PIF with a spike-triggered adaptation current in the
    weak-noise limit: rho_n = -(v - nu)(1 - v nu) nu^(n-1) / (1 + v^2 - 2 v nu), v = exp(-T/tau_a), with
    nu = v (1 - b / (mu - a v)) for the PIF's phase response, a = b / (1 - v) the adaptation after a spike
    and T = (tau_m theta + b tau_a) / mu the period (Schwalger & Lindner 2013, Front. Comput. Neurosci.
    7:164, their geometric-sequence result; nu derived here for this model by linearising the map of
    the post-spike adaptation)."""
    period = (tau_m * theta + b * tau_a) / mu
    v = math.exp(-period / tau_a)
    a = b / (1.0 - v)
    nu = v * (1.0 - b / (mu - a * v))
    return -(v - nu) * (1.0 - v * nu) * nu ** (n - 1) / (1.0 + v * v - 2.0 * v * nu)


def adapting_pif_strong(noise):
    nrn = popdens.PIF(10.0, 10.0, 0.0, 0.0, adaptation=[popdens.Adaptation(tau=20.0, jump=2.0)])
    return popdens.Population(nrn, noise)


@pytest.mark.parametrize("noise,n,t_end", [
    (popdens.WhiteNoise(0.3), 100, 1000.0),
    pytest.param(popdens.EscapeNoise(hazard.Exponential(rate=1000.0, width=0.05)), 200, 2000.0,
                 marks=pytest.mark.slow),
], ids=["white", "escape"])
def test_adaptation_makes_successive_isis_negatively_correlated_as_the_weak_noise_theory_says(noise, n, t_end):
    """Twin with weak noise (ISI CV ~ 0.02) against the weak-noise formula: rho_1 = -0.083, rho_2 = -0.051.
    Standard error of a correlation coefficient from M intervals ~ 1/sqrt(M) (common practice for weak
    correlations); tolerance 4 SE (the formula's O(noise^2) corrections are far smaller here)."""
    res = popdens.montecarlo(adapting_pif_strong(noise), 20.0, t_end=t_end, n=n, dt=0.01, seed=3,
                             record_spikes=True, burn_in=200.0)
    rho, m = serial_correlations(res, n)
    se = 1.0 / math.sqrt(m)
    assert rho[0] < -10 * se  # clearly negative
    assert abs(rho[0] - weak_noise_pif_scc(1)) < 4 * se
    assert abs(rho[1] - weak_noise_pif_scc(2)) < 4 * se
