"""Fokker-Planck solver with the mean-adaptation approximation, against its Monte Carlo twin."""

from __future__ import annotations

import numpy as np
import pytest

import popdens
from popdens import drive


def lif(*terms, sigma=4.0):
    return popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0, adaptation=list(terms)), popdens.WhiteNoise(sigma))


@pytest.mark.parametrize("initial", ["stationary", "synchronous"])
def test_zero_adaptation_reproduces_the_renewal_solver_bit_for_bit(initial):
    d = drive.Step(t=30.0, before=15.0, after=25.0)
    a = popdens.simulate(lif(), d, t_end=80.0, initial=initial, error_control="off")
    b = popdens.simulate(lif(popdens.Adaptation(tau=100.0, jump=0.0)), d, t_end=80.0, initial=initial, error_control="off")
    np.testing.assert_array_equal(a.rate, b.rate)
    np.testing.assert_array_equal(a.mean_u, b.mean_u)


def test_stationary_start_is_the_fixed_point_of_the_mean_equation():
    ad = popdens.Adaptation(tau=100.0, jump=1.0, coupling=0.3)
    res = popdens.simulate(lif(ad), 18.0, t_end=300.0, record_interval=1.0, error_control="off")
    assert res.success and res.diagnostics["mass_error"] < 1e-11
    assert np.ptp(res.rate[1:]) <= 1e-9 * res.rate[1]
    # stationary mean adaptation: w = a (<u> - rest) + b tau r   (tau dw/dt = 0; Augustin et al. 2017)
    w = res.diagnostics["mean_adaptation_mV"][0]
    assert w == pytest.approx(0.3 * (res.mean_u[-1] - 0.0) + 1.0 * 100.0 * res.rate[-1] * 1e-3, rel=2e-3)


def test_step_response_agrees_with_twin_within_the_mean_adaptation_error():
    """Medium adaptation: the approximation's measured error (contributor guide) is ~1 % of the overshoot;
    the twin's Poisson standard error sqrt(r / (N w)) (common practice) is subtracted in quadrature."""
    pop = lif(popdens.Adaptation(tau=100.0, jump=1.0))
    d = drive.Step(t=100.0, before=15.0, after=25.0)
    n, w = 2500, 5.0
    pred = popdens.simulate(pop, d, t_end=500.0, record_interval=w)
    mc = popdens.montecarlo(pop, d, t_end=500.0, n=n, seed=3, record_interval=w, burn_in=500.0)
    after = pred.t > 100.0
    overshoot = pred.rate[after].max() - pred.rate[1]
    se2 = np.mean(pred.rate[after] / (n * w * 1e-3))
    err = np.sqrt(max(np.mean((pred.rate[after] - mc.rate[after]) ** 2) - se2, 0.0)) / overshoot
    assert pred.rate[-1] < 0.8 * pred.rate[after].max()
    assert err <= 0.05


@pytest.mark.parametrize("kind", ["white", "escape"])
def test_adapting_solvers_do_not_depend_on_how_the_span_is_split(kind):
    """One call of 400 steps or calls of 1, 150 and 249 steps: bit-identical (the state carries everything)."""
    from popdens.solvers.fokker_planck import FokkerPlanckSolver
    from popdens.solvers.refractory import RefractoryDensitySolver

    ad = popdens.Adaptation(tau=50.0, jump=1.0, coupling=0.2)
    if kind == "white":
        pop, cls = lif(ad), FokkerPlanckSolver
    else:
        pop = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0, adaptation=[ad]),
                                 popdens.EscapeNoise(popdens.hazard.Exponential(20.0, 2.0)))
        cls = RefractoryDensitySolver
    mu = 15.0 + 5.0 * np.sin(np.arange(401) * 0.05)
    sig = np.full(401, 4.0) if kind == "white" else None
    runs = []
    for cuts in ([0, 400], [0, 1, 151, 400]):
        s = cls(pop, 0.1)
        s.initialize(mu[0], None if sig is None else sig[0], "stationary")
        parts = [s.advance(mu[a:b + 1], None if sig is None else sig[a:b + 1])[0] for a, b in zip(cuts, cuts[1:])]
        runs.append(np.concatenate(parts))
    np.testing.assert_array_equal(runs[0], runs[1])
