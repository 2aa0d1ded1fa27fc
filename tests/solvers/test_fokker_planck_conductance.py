"""Fokker--Planck solver with conductance input (voltage-dependent drift and diffusion): its stationary rate
against threshold integration of the same equation (a different discretisation: exponential cells on a
uniform grid, Richardson-extrapolated), conservation, and the relaxation after a drive step against the
Monte Carlo twin."""

from __future__ import annotations

import numpy as np
import pytest

import popdens

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
