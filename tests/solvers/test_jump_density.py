"""The jump-density solver (shot noise): conservation, positivity, first-passage densities in closed form,
relaxation to the exact stationary rate, and the twin after a step of the drive."""

from __future__ import annotations

import numpy as np
import pytest

import popdens
from popdens.result import STATUS_OK
from popdens.solvers.jump_density import JumpDensitySolver
from popdens.theory._shot_exact import exact_shot_rate

LIF = popdens.LIF(20.0, 20.0, 10.0, 2.0)


def test_mass_is_conserved_and_the_density_stays_positive():
    pop = popdens.Population(LIF, popdens.ShotNoise(1500.0, 0.7, 600.0, 0.45))
    s = JumpDensitySolver(pop, 0.2, n_cells=150)
    s.plan(np.array([0.0, 12.0]), None)
    s.initialize(0.0, None, "synchronous")
    for mu in (np.full(101, 12.0), np.linspace(12.0, -5.0, 101)):
        s.advance(mu)
        assert s.mass() == pytest.approx(1.0, abs=1e-12)
        assert s.density().min() >= 0.0
    assert s.status == STATUS_OK


def test_first_passage_of_a_perfect_integrator_counting_one_jump():
    """PIF, no drift, fixed PSP a = gap: after a synchronous spike at t = 0 the next spike comes one input
    interval after the refractory period, rate(t) = nu exp(-nu (t - t_ref)) for t_ref < t < 2 t_ref
    (exact).  The grid is aligned, so only backward Euler's time error remains: first order, measured
    0.36 % at dt = 0.02 ms and 0.18 % at 0.01 ms."""
    a, nu, tref = 0.5, 0.4, 2.0
    pop = popdens.Population(popdens.PIF(10.0, a, 0.0, tref), popdens.ShotNoise(nu * 1e3, a))
    errs = []
    for dt in (0.02, 0.01):
        res = popdens.simulate(pop, 0.0, 3.9, dt=dt, initial="synchronous", error_control="off", progress=False)
        t = res.t[1:] - 0.5 * dt  # rates are step means
        sel = (t > tref + 0.2) & (t < 2 * tref - 0.2)
        exact = 1e3 * nu * np.exp(-nu * (t[sel] - tref))
        errs.append(np.max(np.abs(res.rate[1:][sel] / exact - 1.0)))
    assert errs[1] < 0.25 * 0.01
    assert 1.7 < errs[0] / errs[1] < 2.3  # first order in dt


def test_relaxes_to_the_exact_stationary_rate_after_a_step():
    """Exponential PSPs: after a step of the drive, the solver settles at the exact rate of the new drive
    (Richardson & Swarbrick 2010); the stationary state of backward Euler is that of the space
    discretisation at any dt, so a coarse step suffices.  Measured 2.5e-4 before and 9e-5 after the step,
    bound 2e-3 (two-grid extrapolation)."""
    noise = popdens.ShotNoise(1200.0, 0.8, 300.0, 0.8, "exponential")
    pop = popdens.Population(LIF, noise)
    res = popdens.simulate(pop, popdens.drive.Step(20.0, 0.0, 4.0), 250.0, dt=0.5, error_control="off",
                           progress=False)
    exact = exact_shot_rate(20.0, 20.0, 10.0, 2.0, 0.0, 4.0, 1200.0, 0.8, 300.0, 0.8)
    assert res.rate[-1] == pytest.approx(exact, rel=2e-3)
    assert res.rate[1] == pytest.approx(exact_shot_rate(20.0, 20.0, 10.0, 2.0, 0.0, 0.0, 1200.0, 0.8, 300.0, 0.8),
                                        rel=2e-3)


@pytest.mark.slow
def test_step_response_against_the_twin():
    """Fixed PSPs 0.5 mV, drive 0 -> 4 mV at t = 20 ms: 5 ms bins of the solver vs the twin (40 000 neurons),
    every bin within 4 SE (Poisson SE of the bin count)."""
    pop = popdens.Population(LIF, popdens.ShotNoise(3300.0, 0.5, 1700.0, 0.5))
    drv = popdens.drive.Step(20.0, 0.0, 4.0)
    res = popdens.simulate(pop, drv, 120.0, dt=0.05, record_interval=5.0, error_control="off", progress=False)
    n = 40000
    mc = popdens.montecarlo(pop, drv, 120.0, n=n, dt=0.05, seed=21, record_interval=5.0, progress=False)
    se = np.sqrt(np.maximum(mc.rate[1:], 1.0) / (n * 5e-3))
    print(np.c_[res.t[1:], res.rate[1:], mc.rate[1:], se])
    assert np.all(np.abs(res.rate[1:] - mc.rate[1:]) < 4 * se)
