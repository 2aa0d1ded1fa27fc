"""Steady state of adapting populations: the closures' theory against the solvers, the twins and
the adiabatic (slow-adaptation) limit."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import brentq

import popdens
from popdens import hazard

ESCAPE = popdens.EscapeNoise(hazard.Exponential(rate=20.0, width=2.0))


def esc(*terms):
    return popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0, adaptation=list(terms)), ESCAPE)


def white(*terms, sigma=4.0):
    return popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0, adaptation=list(terms)), popdens.WhiteNoise(sigma))


def test_zero_adaptation_gives_the_renewal_gain():
    mus = np.array([12.0, 18.0, 25.0])
    for make in (esc, white):
        plain = popdens.gain(make(), mus)
        zero = popdens.gain(make(popdens.Adaptation(tau=100.0, jump=0.0), ), mus)
        np.testing.assert_allclose(zero, plain, rtol=1e-8)


@pytest.mark.parametrize("terms,order", [
    ((popdens.Adaptation(tau=100.0, jump=1.0), popdens.MovingThreshold(tau=30.0, jump=2.0)), 2),
    # the coupling's potential average ignores the reset within a spike's step: first order in dt
    ((popdens.Adaptation(tau=60.0, jump=0.5, coupling=0.3),), 1),
], ids=["current+threshold", "coupled"])
def test_escape_theory_is_the_solvers_stationary_state_as_dt_goes_to_zero(terms, order):
    """The theory (adaptive Dormand-Prince along the trajectory) and the solver's discrete stationary state
    (a different code) describe the same closure: the solver's rate at dt and dt/2, Richardson-extrapolated
    with the scheme's order, meets the theory.  max_age = 600 ms keeps the merging of old neurons
    (1e-6 at the default 102 ms for this slow adaptation) out of the comparison."""
    pop = esc(*terms)
    theory = float(popdens.gain(pop, 22.0))
    r1, r2 = (popdens.simulate(pop, 22.0, t_end=0.2, dt=dt, max_age=600.0).rate[-1] for dt in (0.1, 0.05))
    assert abs(r2 - theory) < 1e-3 * theory  # the solver at a usable dt
    k = 2.0 ** order
    assert (k * r2 - r1) / (k - 1.0) == pytest.approx(theory, rel=1e-6)


def test_escape_adapted_rate_agrees_with_the_twin():
    """Twin: 2000 neurons for 2 s after a burn-in; the count of all spikes has at most Poisson variance for
    adapting neurons (their ISIs are more regular), so sqrt(count) is a conservative standard error."""
    pop = esc(popdens.Adaptation(tau=100.0, jump=1.0))
    theory = float(popdens.gain(pop, 25.0))
    mc = popdens.montecarlo(pop, 25.0, t_end=2000.0, n=2000, seed=4)
    count = mc.diagnostics["n_spikes"]
    rate, se = count / (2000 * 2.0), math.sqrt(count) / (2000 * 2.0)
    assert abs(rate - theory) < 4.0 * se
    assert theory < 0.85 * float(popdens.gain(esc(), 25.0))  # the adaptation matters here


def test_slow_adaptation_limit_is_the_adiabatic_rate():
    """tau_w = 1 s, small jump: r = g(mu - b tau_w r) with g the renewal gain (adiabatic elimination,
    common practice), solved here with scipy's brentq; theory and solver within 1 %."""
    ad = popdens.Adaptation(tau=1000.0, jump=0.1)
    for make, mu in ((esc, 25.0), (white, 25.0)):
        renewal = make()
        adiabatic = brentq(lambda r: float(popdens.gain(renewal, mu - 0.1 * 1000.0 * r * 1e-3)) - r, 0.0, 200.0)
        pop = make(ad)
        theory = float(popdens.gain(pop, mu))
        assert theory == pytest.approx(adiabatic, rel=0.01)
        assert popdens.simulate(pop, mu, t_end=1.0).rate[-1] == pytest.approx(adiabatic, rel=0.01)
        assert theory < 0.8 * float(popdens.gain(renewal, mu))


def test_white_mean_adaptation_with_coupling_is_the_fixed_point_of_the_mean_equation():
    """w = a(<u> - rest) + b tau r at the renewal neuron's rate and mean potential for the drive mu - w
    (Augustin et al. 2017); the Fokker-Planck solver's stationary state agrees to its grid error."""
    pop = white(popdens.Adaptation(tau=100.0, jump=1.0, coupling=0.3))
    ss = popdens.stationary(pop, 25.0)
    w = ss.diagnostics["mean_adaptation_mV"][0]
    renewal = popdens.stationary(white(), 25.0 - w)
    assert ss.rate == pytest.approx(renewal.rate, rel=1e-12)
    assert w == pytest.approx(0.3 * renewal.mean_u + 100.0 * renewal.rate * 1e-3, rel=1e-8)
    assert popdens.simulate(pop, 25.0, t_end=1.0).rate[-1] == pytest.approx(ss.rate, rel=2e-3)


def test_stationary_isi_statistics_and_inverse_design():
    pop = esc(popdens.Adaptation(tau=100.0, jump=1.0))
    ss = popdens.stationary(pop, 25.0)
    # the ISI density integrates to 1 and its mean is 1/rate (trapezoid on the default grid)
    assert np.trapezoid(ss.isi_density, ss.isi_t) == pytest.approx(1.0, abs=1e-5)
    assert np.trapezoid(ss.isi_t * ss.isi_density, ss.isi_t) == pytest.approx(ss.mean_isi, rel=1e-4)
    assert 0.0 < ss.cv < 1.0
    mu = popdens.drive_for_rate(pop, 10.0)
    assert float(popdens.gain(pop, mu)) == pytest.approx(10.0, rel=1e-9)
    # the adapted gain is flatter than the renewal one
    assert float(popdens.gain_slope(pop, mu)) < float(popdens.gain_slope(esc(), popdens.drive_for_rate(esc(), 10.0)))


def test_escape_isi_statistics_of_one_adaptation_current_match_the_twin():
    """The Markov chain of the post-spike adaptation (exact up to its grids) against the twin: 2000 neurons
    for 2 s.  Standard errors: rate from the spike count (Poisson, an upper bound for these regular trains);
    a serial correlation coefficient from M intervals ~ 1/sqrt(M); the CV ~ CV sqrt((1 + 2 CV^2) / (2 M))
    (common practice for near-Gaussian intervals); 4 SE."""
    pop = esc(popdens.Adaptation(tau=100.0, jump=1.0))
    ss = popdens.stationary(pop, 25.0)
    assert ss.serial_correlation[0] < -0.05  # adaptation anticorrelates successive intervals
    n, t_end = 2000, 2000.0
    mc = popdens.montecarlo(pop, 25.0, t_end=t_end, n=n, seed=9, record_spikes=True)
    order = np.lexsort((mc.spike_times, mc.spike_ids))
    ids, ts = mc.spike_ids[order], mc.spike_times[order]
    isis = [np.diff(ts[ids == i]) for i in range(n)]
    allv = np.concatenate(isis)
    m, mean, var = allv.size, allv.mean(), allv.var()
    rho1 = np.mean(np.concatenate([(x[1:] - mean) * (x[:-1] - mean) for x in isis])) / var
    cv = math.sqrt(var) / mean
    assert abs(rho1 - ss.serial_correlation[0]) < 4.0 / math.sqrt(m)
    assert abs(cv - ss.cv) < 4.0 * cv * math.sqrt((1 + 2 * cv * cv) / (2 * m))
    rate = mc.diagnostics["n_spikes"] / (n * t_end * 1e-3)
    assert abs(rate - ss.diagnostics["markov_rate_hz"]) < 4.0 * math.sqrt(rate / (n * t_end * 1e-3))
    # the closure's rate is within 1e-4 of the exact one here
    assert ss.rate == pytest.approx(ss.diagnostics["markov_rate_hz"], rel=1e-4)
