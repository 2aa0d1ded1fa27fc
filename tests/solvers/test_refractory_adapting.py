"""Refractory-density solver for adapting neurons (quasi-renewal closures) against its Monte Carlo twin."""

from __future__ import annotations

import numpy as np
import pytest

import popdens
from popdens import drive, hazard

ESCAPE = popdens.EscapeNoise(hazard.Exponential(rate=20.0, width=2.0))


def adapting_lif(*terms):
    return popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0, adaptation=list(terms)), ESCAPE)


@pytest.mark.parametrize("closure", ["spike-weighted", "quasi-renewal"])
def test_zero_adaptation_reproduces_the_renewal_solver(closure):
    """The adapting step with zero jumps is the renewal step bit for bit (synchronous start); the stationary
    start is found by another route (a root of the adaptation means, the old bin's fixed point with Aitken
    extrapolation): measured 5e-12 from the fully converged renewal state, against whose plain iteration
    (stopped at a 1e-13 change per iteration, 6e-11 from it) the tolerance is set."""
    d = drive.Step(t=30.0, before=15.0, after=25.0)
    zero = adapting_lif(popdens.Adaptation(tau=80.0, jump=0.0), popdens.MovingThreshold(tau=30.0, jump=0.0))
    plain = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0), ESCAPE)
    for initial, tol in (("synchronous", 0.0), ("stationary", 1e-10)):
        a = popdens.simulate(plain, d, t_end=100.0, initial=initial, error_control="off")
        b = popdens.simulate(zero, d, t_end=100.0, initial=initial, adaptation_closure=closure, error_control="off")
        np.testing.assert_allclose(b.rate, a.rate, rtol=tol, atol=0.0)
        np.testing.assert_allclose(b.mean_u, a.mean_u, rtol=tol, atol=0.0)


def test_stationary_start_stays_put_and_mass_is_conserved():
    pop = adapting_lif(popdens.Adaptation(tau=100.0, jump=1.0, coupling=0.2), popdens.MovingThreshold(30.0, 1.0))
    res = popdens.simulate(pop, 18.0, t_end=300.0, record_interval=1.0, error_control="off")
    assert res.success and res.diagnostics["mass_error"] < 1e-12
    assert np.ptp(res.rate) <= 1e-5 * res.rate[0]


def test_unknown_closure_is_a_clear_error():
    with pytest.raises(ValueError, match="`adaptation_closure`"):
        popdens.simulate(adapting_lif(popdens.Adaptation(100.0, 1.0)), 15.0, t_end=1.0, adaptation_closure="mean")


def onset_error(pop, n, seed, closure="spike-weighted", t_step=100.0, t_end=700.0, bin_ms=5.0):
    """RMS difference solver - twin after a step, noise-corrected, as a fraction of the twin's overshoot.

    The twin's bin rate has the Poisson standard error sqrt(r / (N w)) (common practice); its mean square
    is subtracted from the mean square difference.
    """
    d = drive.Step(t=t_step, before=15.0, after=25.0)
    pred = popdens.simulate(pop, d, t_end=t_end, record_interval=bin_ms, adaptation_closure=closure)
    mc = popdens.montecarlo(pop, d, t_end=t_end, n=n, seed=seed, record_interval=bin_ms)
    after = pred.t > t_step
    base = pred.rate[(pred.t > 0) & ~after].mean()
    overshoot = pred.rate[after].max() - base
    se2 = np.mean(pred.rate[after] / (n * bin_ms * 1e-3))
    ms = np.mean((pred.rate[after] - mc.rate[after]) ** 2)
    return np.sqrt(max(ms - se2, 0.0)) / overshoot, np.sqrt(se2) / overshoot, pred, mc


def test_step_response_of_adapting_population_agrees_with_twin():
    # medium adaptation: the adapted rate is ~half the onset peak
    err, noise, pred, mc = onset_error(adapting_lif(popdens.Adaptation(tau=100.0, jump=1.0)), n=4000, seed=11)
    assert pred.rate[-1] < 0.6 * pred.rate.max()  # adaptation is strong enough to see
    assert err <= 0.05 and noise < 0.05
