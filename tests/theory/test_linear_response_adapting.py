"""Transfer function of adapting populations: the linearised closures against the solvers (small sinusoids),
the static slope, and the Monte Carlo twins (slow)."""

from __future__ import annotations

import math

import numpy as np
import pytest

import popdens
from popdens import drive, hazard

ESCAPE = popdens.EscapeNoise(hazard.Exponential(rate=20.0, width=2.0))


def esc():
    nrn = popdens.LIF(10.0, 20.0, 0.0, 2.0, adaptation=[popdens.Adaptation(tau=100.0, jump=1.0),
                                                         popdens.MovingThreshold(tau=30.0, jump=1.0)])
    return popdens.Population(nrn, ESCAPE)


def white(coupling=0.0):
    nrn = popdens.LIF(20.0, 20.0, 10.0, 2.0, adaptation=[popdens.Adaptation(tau=100.0, jump=1.0, coupling=coupling)])
    return popdens.Population(nrn, popdens.WhiteNoise(4.0))


def fit_sine(t, y, f):
    """Least-squares amplitude and phase of the component sin(2 pi f t + phase) (t in ms)."""
    w = 2 * np.pi * f * t * 1e-3
    x = np.column_stack([np.ones_like(t), np.sin(w), np.cos(w)])
    c = np.linalg.lstsq(x, y, rcond=None)[0]
    return np.hypot(c[1], c[2]), np.arctan2(c[2], c[1]), y - x @ c


@pytest.mark.parametrize("make", [esc, white, lambda: white(0.3)], ids=["escape", "white", "white-coupled"])
def test_low_frequency_limit_is_the_adapted_gain_slope_and_adaptation_is_high_pass(make):
    """chi(f -> 0) equals d(rate)/d(mu) of the adapted steady state (computed independently by finite
    differences of the fixed point); the adaptation suppresses the response at low frequency."""
    pop = make()
    chi = popdens.transfer(pop, 20.0, [0.0, 1e-3, 5.0])
    slope = float(popdens.gain_slope(pop, 20.0))
    assert chi[0].real == pytest.approx(slope, rel=1e-6)
    assert abs(chi[1] / slope - 1.0) < 1e-3
    assert abs(chi[2]) > 1.2 * abs(chi[0])  # high-pass: the 5 Hz response beats the static one


@pytest.mark.parametrize("make,f", [(esc, 5.0), (esc, 40.0), (white, 5.0), (white, 40.0)])
def test_solver_driven_by_small_sinusoid_reproduces_amplitude_and_phase(make, f):
    """The solvers carry the same closures in the time domain: a 0.02 mV sinusoid after 500 ms of
    settling, fitted over whole periods (measured at dt = 0.1 ms: amplitude <= 8e-4, phase <= 7e-4 rad)."""
    pop, mu, eps, dt = make(), 20.0, 0.02, 0.1
    period = 1000.0 / f
    n_per = max(1, int(round(200.0 / period)))
    t_end = round((500.0 + n_per * period) / dt) * dt
    res = popdens.simulate(pop, drive.Sine(mean=mu, amplitude=eps, frequency=f), t_end=t_end, dt=dt)
    keep = res.t >= res.t[-1] - n_per * period + 0.5 * dt
    amp, phase, _ = fit_sine(res.t[keep] - 0.5 * dt, res.rate[keep], f)
    chi = popdens.transfer(pop, mu, [f])[0]
    assert abs(amp / eps / abs(chi) - 1.0) < 5e-3
    assert abs(phase - np.angle(chi)) < 5e-3


def test_adapting_transfer_refuses_what_it_cannot_compute():
    with pytest.raises(ValueError, match="`modulate`"):
        popdens.transfer(esc(), 20.0, [5.0], modulate="sigma")
    nrn = popdens.LIF(10.0, 20.0, 0.0, 2.0, adaptation=[popdens.Adaptation(tau=100.0, jump=1.0, coupling=0.2)])
    with pytest.raises(ValueError, match="`coupling`"):
        popdens.transfer(popdens.Population(nrn, ESCAPE), 20.0, [5.0])


@pytest.mark.slow
@pytest.mark.parametrize("make,eps", [(esc, 0.4), (white, 0.4)], ids=["escape", "white"])
@pytest.mark.parametrize("f", [1.0, 5.0, 20.0, 100.0])
def test_twin_driven_by_sinusoids_agrees_with_the_transfer_function(make, eps, f, rng):
    """Twin of 20 000 neurons, 4 periods (at least 2 s) after a 1 s burn-in at the sinusoidal drive,
    rate in 2 ms bins, least-squares sine fit.  Standard error of a fitted coefficient:
    sqrt(2/M) x residual s.d. for M bins (common practice for white residuals); amplitude within
    4 SE, phase within 4 SE/amplitude.  The white-noise theory is the mean-adaptation approximation:
    its measured error is in the contributor guide."""
    pop, mu = make(), 20.0
    period = 1000.0 / f
    span = max(4 * period, 2000.0)
    res = popdens.montecarlo(pop, drive.Sine(mean=mu, amplitude=eps, frequency=f), t_end=1000.0 + span,
                             n=20_000, dt=0.1, seed=rng, record_interval=2.0)
    keep = res.t > 1000.0
    t, y = res.t[keep] - 1.0, res.rate[keep]
    amp, phase, resid = fit_sine(t, y, f)
    se = math.sqrt(2.0 / t.size) * np.std(resid)
    chi = popdens.transfer(pop, mu, [f])[0]
    # a 2 ms bin averages the sinusoid: fitted at the bin centres, the first harmonic shrinks by sinc(f w)
    w = 2.0e-3
    model = eps * chi * np.sinc(f * w)
    assert abs(amp - abs(model)) < 4 * se, (amp, abs(model), se)
    dphi = (phase - np.angle(model) + np.pi) % (2 * np.pi) - np.pi
    assert abs(dphi) < 4 * se / amp, (phase, np.angle(model), se / amp)


def test_noise_modulation_of_an_adapting_white_population_matches_the_solver():
    """sigma = 4 + 0.02 sin(2 pi 10 Hz t) mV through the Fokker-Planck solver with mean adaptation (and a
    coupling) against ``transfer(..., modulate="sigma")``: the noise enters through the same adaptation loop."""
    f, eps, dt = 10.0, 0.02, 0.1
    nrn = white(0.3).neuron
    pop = popdens.Population(nrn, popdens.WhiteNoise(drive.Sine(mean=4.0, amplitude=eps, frequency=f)))
    t_end = 500.0 + 20 * 100.0 / f
    res = popdens.simulate(pop, 20.0, t_end=t_end, dt=dt)
    keep = res.t >= 500.0 + 0.5 * dt
    amp, phase, _ = fit_sine(res.t[keep] - 0.5 * dt, res.rate[keep], f)
    chi = popdens.transfer(white(0.3), 20.0, [f], modulate="sigma")[0]
    assert abs(amp / eps / abs(chi) - 1.0) < 5e-3
    assert abs(phase - np.angle(chi)) < 5e-3
