"""Gain-curve fits: weighted least squares with the exact gain function."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import curve_fit
from scipy.special import erfcx
from scipy.integrate import quad

import popdens
from popdens import GainCurve


def _siegert_hz(mu, sigma, tau=20.0, theta=20.0, reset=10.0, ref=2.0):
    # Siegert formula (Siegert 1951; Brunel & Hakim 1999) by scipy quadrature of the scaled erfc
    lo, hi = (reset - mu) / sigma, (theta - mu) / sigma
    integral = quad(lambda x: erfcx(-x), lo, hi, limit=200)[0]
    return 1000.0 / (ref + tau * np.sqrt(np.pi) * integral)


def test_gain_fit_recovers_noise_and_offset_and_matches_scipy_curve_fit():
    # a curve computed with the Siegert formula plus Gaussian noise of known SE (5 % + 0.2 Hz):
    # estimates within 3 SE, chi-square per degree of freedom within its 99 % range for 28 dof,
    # and the same estimates and SEs as scipy's curve_fit (absolute_sigma) on the same data
    rng = np.random.default_rng(5)
    drive = np.linspace(12.0, 30.0, 30)
    true = np.array([_siegert_hz(m + 1.5, 4.0) for m in drive])
    se = 0.05 * true + 0.2
    rates = np.abs(true + se * rng.standard_normal(drive.size))
    curve = GainCurve(drive, rates, se)
    pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(3.0))
    fit = popdens.fit_gain(pop, curve, ["sigma", "offset"], offset=0.0, profile=True)
    assert abs(fit.estimates["sigma"] - 4.0) < 3 * fit.se["sigma"]
    assert abs(fit.estimates["offset"] - 1.5) < 3 * fit.se["offset"]
    assert 0.45 < fit.goodness["chi2_per_dof"] < 1.8  # chi2(28): 1 % and 99 % quantiles / 28
    popt, pcov = curve_fit(lambda m, s, o: np.array([_siegert_hz(x + o, s) for x in m]), drive, rates,
                           p0=[3.5, 1.0], sigma=se, absolute_sigma=True)
    # the Newton steps stop within 2 % of a standard error of the maximum
    assert abs(fit.estimates["sigma"] - popt[0]) < 0.03 * fit.se["sigma"]
    assert abs(fit.estimates["offset"] - popt[1]) < 0.03 * fit.se["offset"]
    assert fit.se["sigma"] == pytest.approx(np.sqrt(pcov[0, 0]), rel=0.02)
    assert fit.se["offset"] == pytest.approx(np.sqrt(pcov[1, 1]), rel=0.02)
    # near-Gaussian likelihood: the profile interval is close to the Wald interval
    for name in ("sigma", "offset"):
        lo, hi = fit.profile[name]
        wlo, whi = fit.interval(name)
        assert abs(lo - wlo) < 0.1 * (whi - wlo) and abs(hi - whi) < 0.1 * (whi - wlo)
    assert len(fit.plot().axes) == 1


def test_gain_fit_needs_more_points_than_parameters():
    pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(3.0))
    with pytest.raises(ValueError, match="more points"):
        popdens.fit_gain(pop, GainCurve([15.0, 20.0], [2.0, 8.0], [0.5, 0.5]), ["sigma", "offset"])


def test_gain_fit_of_coloured_noise_keeps_the_synapse_and_matches_scipy_curve_fit():
    # a curve of a LIF with synaptically filtered noise (tau_syn 2 ms): the boundary-shift gain is the
    # Siegert formula with threshold and reset moved up by sigma alpha/2 sqrt(tau_syn/tau_m), alpha =
    # sqrt(2)|zeta(1/2)| (Brunel & Sergi 1998; Fourcaud & Brunel 2002), written here with scipy
    # quadrature and zeta from scipy; the fit keeps the synapse (it was rebuilt as white noise) and
    # agrees with scipy's curve_fit (absolute_sigma) on the same data
    from scipy.special import zeta

    alpha = np.sqrt(2.0) * abs(zeta(0.5))

    def coloured_hz(mu, sigma, tau_syn):
        shift = 0.5 * sigma * alpha * np.sqrt(tau_syn / 20.0)
        return _siegert_hz(mu, sigma, theta=20.0 + shift, reset=10.0 + shift)

    rng = np.random.default_rng(11)
    drive = np.linspace(12.0, 30.0, 16)
    true = np.array([coloured_hz(m, 4.0, 2.0) for m in drive])
    se = 0.05 * true + 0.2
    rates = np.abs(true + se * rng.standard_normal(drive.size))
    pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.ColouredNoise(3.0, 2.0))
    fit = popdens.fit_gain(pop, GainCurve(drive, rates, se), ["sigma"])
    assert isinstance(fit.population.noise, popdens.ColouredNoise) and fit.population.noise.tau_syn == 2.0
    popt, pcov = curve_fit(lambda m, s: np.array([coloured_hz(x, s, 2.0) for x in m]), drive, rates,
                           p0=[3.5], sigma=se, absolute_sigma=True)
    # the Newton steps stop within 2 % of a standard error of the maximum; SEs as curve_fit's
    assert abs(fit.estimates["sigma"] - popt[0]) < 0.03 * fit.se["sigma"]
    assert fit.se["sigma"] == pytest.approx(np.sqrt(pcov[0, 0]), rel=0.02)
    # the white-noise model of the same data lands elsewhere: the synapse matters here
    white = popdens.fit_gain(popdens.Population(pop.neuron, popdens.WhiteNoise(3.0)), GainCurve(drive, rates, se),
                             ["sigma"])
    assert abs(white.estimates["sigma"] - fit.estimates["sigma"]) > 3 * fit.se["sigma"]


def test_gain_fit_of_shot_noise_frees_an_input_rate():
    # Poisson input with exponentially distributed PSPs: the input rate recovered from a curve made by
    # the exact gain (Richardson & Swarbrick 2010) plus noise of known SE, and the same estimate and SE
    # as scipy's curve_fit (absolute_sigma) with the same gain function
    noise = popdens.ShotNoise(exc_rate=800.0, exc_psp=0.5, amplitudes="exponential")
    pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), noise)
    drive = np.linspace(6.0, 16.0, 8)
    true = popdens.gain(pop, drive)
    se = 0.05 * true + 0.2
    rates = np.abs(true + se * np.random.default_rng(3).standard_normal(drive.size))
    start = popdens.Population(pop.neuron, popdens.ShotNoise(exc_rate=600.0, exc_psp=0.5, amplitudes="exponential"))
    fit = popdens.fit_gain(start, GainCurve(drive, rates, se), ["exc_rate"])
    assert isinstance(fit.population.noise, popdens.ShotNoise) and fit.population.noise.exponential
    assert abs(fit.estimates["exc_rate"] - 800.0) < 3 * fit.se["exc_rate"]  # recovery, 3 SE
    popt, pcov = curve_fit(lambda m, r: popdens.gain(popdens.Population(pop.neuron, popdens.ShotNoise(
        exc_rate=r, exc_psp=0.5, amplitudes="exponential")), m), drive, rates, p0=[700.0], sigma=se,
        absolute_sigma=True)
    assert abs(fit.estimates["exc_rate"] - popt[0]) < 0.03 * fit.se["exc_rate"]
    assert fit.se["exc_rate"] == pytest.approx(np.sqrt(pcov[0, 0]), rel=0.02)


NOISES = [popdens.ColouredNoise(4.0, 2.0), popdens.ShotNoise(exc_rate=800.0, exc_psp=0.5),
          popdens.ConductanceNoise(exc_rate=20000.0, exc_weight=0.02, exc_tau=2.0, exc_reversal=70.0)]


@pytest.mark.parametrize("noise", NOISES)
def test_a_fit_keeps_the_noise_model(noise):
    # the population a fit builds keeps the noise model and its fixed settings (it was rebuilt as white noise)
    from popdens.fitting.params import ParameterSet

    pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), noise)
    free = ["exc_rate"] if hasattr(noise, "exc_rate") else ["sigma"]
    params = ParameterSet.make(pop, free, {"scale": 1.0, "offset": 0.0})
    assert params.build(params.start)[0] == pop
    assert type(params.build(params.start * 1.1)[0].noise) is type(noise)


@pytest.mark.parametrize("noise", NOISES)
def test_isi_fit_refuses_filtered_and_shot_noise(noise):
    pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), noise)
    isis = np.random.default_rng(0).exponential(50.0, 100) + 2.0
    with pytest.raises(ValueError, match="`population`.*" + type(noise).__name__):
        popdens.fit_isi(pop, isis, ["sigma"] if isinstance(noise, popdens.ColouredNoise) else ["exc_rate"], mu=18.0)
