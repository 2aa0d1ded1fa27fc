"""Fokker--Planck solver with conductance input (voltage-dependent drift and diffusion): its stationary rate
against threshold integration of the same equation (a different discretisation: exponential cells on a
uniform grid, Richardson-extrapolated), conservation, and the relaxation after a drive step against the
Monte Carlo twin."""

from __future__ import annotations

import numpy as np
import pytest

import popdens
from popdens.solvers.fokker_planck import FokkerPlanckSolver

LIF = popdens.LIF(20.0, 20.0, 10.0, 2.0)


def noise_for(ge0, gi0, tau_e, tau_i):
    """Mean conductances ge0, gi0 (leak units) with w tau fixed (0.04, 0.25 ms)."""
    we, wi = 0.04 / tau_e, 0.25 / tau_i
    return popdens.ConductanceNoise(exc_rate=ge0 / (we * tau_e) * 1e3, exc_weight=we, exc_tau=tau_e, exc_reversal=70.0,
                                    inh_rate=gi0 / (wi * tau_i) * 1e3, inh_weight=wi, inh_tau=tau_i,
                                    inh_reversal=-10.0)


@pytest.mark.parametrize("neuron,mu", [(LIF, 10.0), (LIF, 2.0), (popdens.EIF(20.0, 15.0, 2.0, 30.0, 10.0, 2.0), 0.0)])
def test_long_run_reaches_the_threshold_integration_rate(neuron, mu):
    pop = popdens.Population(neuron, noise_for(0.8, 1.25, 0.5, 1.0))
    res = popdens.simulate(pop, mu, t_end=150.0, dt=0.05, progress=False)
    theory = float(popdens.gain(pop, mu))
    assert res.success
    assert res.diagnostics["mass_error"] < 1e-9  # conservative scheme
    # threshold integration of the same equation (Richardson 2007), independent discretisation: the
    # solver's automatic grid aims at 1e-3 of the rate
    assert res.rate[-1] == pytest.approx(theory, rel=2e-3)


@pytest.mark.slow
def test_step_response_against_the_twin():
    """Drive 4 -> 10 mV at t = 50 ms (tau_eff = 6.6 ms): the density's rate over time within 4 SE of the
    twin's (20000 neurons, 1 ms bins; SE from Poisson counts) in every bin but a few (at most 5 of 150 beyond
    4 SE: the first-order boundary shift is a stationary result)."""
    pop = popdens.Population(LIF, noise_for(0.8, 1.25, 0.5, 1.0))
    drive = popdens.drive.Step(50.0, 4.0, 10.0)
    dens = popdens.simulate(pop, drive, t_end=150.0, dt=0.02, record_interval=1.0, progress=False)
    mc = popdens.montecarlo(pop, drive, t_end=150.0, n=20000, seed=9, record_interval=1.0, progress=False,
                            burn_in=200.0)
    se = np.sqrt(np.maximum(mc.rate, 1.0) / (20000 * 1e-3))  # Poisson counts per 1 ms bin
    off = np.abs(dens.rate[1:] - mc.rate[1:]) > 4 * se[1:]  # twin, 4 SE
    print(f"{off.sum()} of {off.size} bins beyond 4 SE; rate before / after: density {dens.rate[40]:.3f} / "
          f"{dens.rate[-1]:.3f} Hz, twin {mc.rate[20:50].mean():.3f} / {mc.rate[-50:].mean():.3f} Hz")
    assert off.sum() <= 5


# ------------------------------------------------------------ conductance input that varies in time
def channel_inputs(noise, n):
    """``(channels, S1, S2)`` of a ConductanceNoise held over ``n`` boundaries (S1 = w nu, S2 = w^2 nu, Hz)."""
    chans = [(rev, tau) for _, _, tau, rev in noise.channels()]
    first = np.array([[w * nu * 1e3] * n for nu, w, _, _ in noise.channels()])
    second = np.array([[w * w * nu * 1e3] * n for nu, w, _, _ in noise.channels()])
    return chans, first, second


@pytest.mark.parametrize("scheme", ["tr-bdf2", "backward-euler"])
def test_advance_conductance_at_the_construction_input_is_the_solver_own_step(scheme):
    """Held at the input of construction, the combined drift and diffusion (rows F, F', 1, u and 1, u, u^2 with
    per-step weights) are the solver's own per-face arrays: the same run to round-off (the sums are ordered
    differently), under a drive that varies every step."""
    pop = popdens.Population(LIF, noise_for(0.8, 1.25, 0.5, 1.0))
    n = 1500
    mu = 5.0 + 3.0 * np.sin(np.arange(n + 1) * 0.02)
    own = FokkerPlanckSolver(pop, 0.1, scheme=scheme, n_cells=400)
    own.initialize(5.0, None, "synchronous")
    r_own, u_own, _ = own.advance(mu)
    var = FokkerPlanckSolver(pop, 0.1, scheme=scheme, n_cells=400)
    var.initialize(5.0, None, "synchronous")
    r_var, u_var, _ = var.advance_conductance(mu, *channel_inputs(pop.noise, n + 1))
    assert np.max(np.abs(r_var - r_own)) < 1e-9 * np.max(r_own)  # round-off
    assert np.max(np.abs(u_var - u_own)) < 1e-12 * 20.0
    assert np.max(np.abs(var.density() - own.density())) < 1e-12 * np.max(own.density())


@pytest.mark.parametrize("neuron,mu", [(LIF, 10.0), (popdens.EIF(20.0, 15.0, 2.0, 30.0, 10.0, 2.0), 0.0)])
def test_advance_conductance_relaxes_to_the_stationary_rate_of_the_new_input(neuron, mu):
    """A solver built at one input and stepped at another (excitation 0.8 -> 1.0, inhibition 1.25 -> 1.5 leak units, 12 -> 28 Hz for the LIF; the
    threshold moves by the change of variable, the reset by the two-cell reinjection) reaches the threshold
    integration rate of the new input (Richardson 2007, as the long-run test above, same 2e-3), conserving
    mass and keeping the density non-negative."""
    old, new = noise_for(0.8, 1.25, 0.5, 1.0), noise_for(1.0, 1.5, 0.5, 1.0)
    s = FokkerPlanckSolver(popdens.Population(neuron, old), 0.05)
    s.plan(np.array([mu]), None)
    s.initialize(mu, None, "stationary")
    n = 3000
    chans, first, second = channel_inputs(new, n + 1)
    ramp = np.minimum(np.arange(n + 1) / 200.0, 1.0)  # over 10 ms
    _, f_old, s_old = channel_inputs(old, n + 1)
    r, _, _ = s.advance_conductance(np.full(n + 1, mu), chans, f_old + ramp * (first - f_old),
                                    s_old + ramp * (second - s_old))
    theory = float(popdens.gain(popdens.Population(neuron, new), mu))
    assert s.status == 0  # STATUS_OK
    assert abs(s.mass() - 1.0) < 1e-10  # conservative scheme
    assert np.min(s.density()) >= -1e-12 * np.max(s.density())
    assert r[-1] == pytest.approx(theory, rel=2e-3)  # threshold integration of the new input
    # a solver built at the new input: the same equation on a grid placed for it (measured 6e-6 LIF, 1.3e-5 EIF)
    ref = FokkerPlanckSolver(popdens.Population(neuron, new), 0.05)
    ref.plan(np.array([mu]), None)
    ref.initialize(mu, None, "stationary")
    assert r[-1] == pytest.approx(ref.advance(np.full(2, mu))[0][-1], rel=5e-5)
