"""Spike-train and population-rate spectra (popdens.theory.spectra)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.special import erfcx

import popdens
from popdens import hazard
from popdens.theory.spectra import isi_transform, population_rate_spectrum, spike_train_spectrum


def dead_time_poisson(dead=3.0):
    """An escape-noise LIF held at reset (rest = reset = 0, mu = 0): after the refractory period
    the hazard is constant, 50 Hz * exp(-20/20) = 18.39 Hz: a Poisson process with dead time."""
    return popdens.Population(popdens.LIF(tau_m=10.0, threshold=20.0, reset=0.0, refractory=dead),
                              popdens.EscapeNoise(hazard.Exponential(rate=50.0, width=20.0)))


def test_poisson_process_with_dead_time_matches_closed_form():
    """Renewal spectrum with P_hat = lam exp(-i w d)/(lam + i w) (Cox 1962, "Renewal Theory";
    common practice), S(0) = r0 CV^2 with CV = 1/(1 + lam d)."""
    lam, dead = 50.0 * math.exp(-1.0) * 1e-3, 3.0  # 1/ms, ms
    f = np.array([0.0, 0.5, 5.0, 50.0, 500.0, 5000.0])
    s = 2j * np.pi * f[1:] * 1e-3
    p_hat = lam * np.exp(-s * dead) / (lam + s)
    r0 = 1000.0 / (dead + 1.0 / lam)
    ref = np.concatenate([[r0 / (1.0 + lam * dead) ** 2], r0 * ((1 + p_hat) / (1 - p_hat)).real])
    spec, (rate, cv2) = spike_train_spectrum(dead_time_poisson(dead), 0.0, f, with_moments=True)
    assert abs(rate / r0 - 1.0) < 1e-10
    assert abs(cv2 * (1.0 + lam * dead) ** 2 - 1.0) < 1e-8
    err = np.abs(spec / ref - 1.0)
    # trapezoidal ages of 0.02 ms: measured 5e-7 at 500 Hz, 4e-5 at 5 kHz (omega da = 0.63 there)
    assert np.max(err[:-1]) < 2e-6 and err[-1] < 1e-4
    assert np.allclose(population_rate_spectrum(dead_time_poisson(dead), 0.0, f, 250), spec / 250, rtol=1e-14)


def test_perfect_integrator_isi_transform_is_inverse_gaussian():
    """White-noise PIF: first passage of a drifted Brownian motion, P_hat(s) = exp(L (v - sqrt(v^2 +
    4 D s)) / (2 D)) times the refractory delay (Cox & Miller 1965; Tuckwell 1988)."""
    tau, sig, mu, theta, tref = 10.0, 3.0, 5.0, 15.0, 1.0
    p = popdens.Population(popdens.PIF(tau, theta, 0.0, tref), popdens.WhiteNoise(sig))
    v, d = mu / tau, sig ** 2 / (2 * tau)  # mV/ms, mV^2/ms
    f = np.array([0.5, 5.0, 50.0, 500.0, 80.0 - 10.0j])
    s = 2j * np.pi * f * 1e-3
    ref = np.exp(theta * (v - np.sqrt(v ** 2 + 4 * d * s)) / (2 * d) - s * tref)
    assert np.max(np.abs(isi_transform(p, mu, f) / ref - 1.0)) < 1e-5
    _, (rate, cv2) = spike_train_spectrum(p, mu, [1.0], with_moments=True)
    mean = theta / v + tref
    assert abs(rate * 1e-3 * mean - 1.0) < 1e-10
    assert abs(cv2 / (theta * 2 * d / v ** 3 / mean ** 2) - 1.0) < 1e-8


@pytest.mark.parametrize("mu,sigma", [(15.0, 5.0), (25.0, 2.0)])
def test_white_noise_lif_zero_frequency_and_high_frequency_limits(mu, sigma):
    """S(0) = r0 CV^2 with the LIF CV^2 double integral (Brunel 2000, J. Comput. Neurosci. 8:183),
    by scipy quadrature; S(f) -> r0 at high frequency (common practice)."""
    tau, th, vr, tref = 20.0, 20.0, 10.0, 2.0
    yt, yr = (th - mu) / sigma, (vr - mu) / sigma
    nu = 1.0 / (tref + tau * math.sqrt(math.pi) * quad(lambda x: erfcx(-x), yr, yt, epsrel=1e-13)[0])

    def inner(x):  # e^{x^2} int_{-inf}^x e^{y^2} (1 + erf y)^2 dy
        return quad(lambda y: math.exp(x * x - y * y) * erfcx(-y) ** 2, -np.inf, x, epsrel=1e-12, limit=200)[0]

    cv2_ref = 2 * math.pi * (nu * tau) ** 2 * quad(inner, yr, yt, epsrel=1e-11, limit=200)[0]
    p = popdens.Population(popdens.LIF(tau, th, vr, tref), popdens.WhiteNoise(sigma))
    spec, (rate, cv2) = spike_train_spectrum(p, mu, [0.0, 2e4], with_moments=True)
    assert abs(cv2 / cv2_ref - 1.0) < 1e-6
    assert abs(spec[0] / (rate * cv2) - 1.0) < 1e-12
    assert abs(spec[1] / rate - 1.0) < 1e-2


def test_invalid_input():
    p = dead_time_poisson()
    with pytest.raises(ValueError, match="freqs"):
        spike_train_spectrum(p, 0.0, [1.0 + 1.0j])
    with pytest.raises(ValueError, match="freqs"):
        spike_train_spectrum(p, 0.0, [np.inf])
    with pytest.raises(ValueError, match="`n`"):
        population_rate_spectrum(p, 0.0, [1.0], 0)


@pytest.mark.slow
def test_population_rate_spectrum_matches_monte_carlo_periodogram(rng):
    """White-noise LIF, regular firing (CV^2 = 0.04): 500 neurons over 40 s, rate in 1 ms bins,
    periodograms of 80 segments of 0.5 s averaged in 10 Hz bands (400 values each, relative
    standard error 1/sqrt(400) = 5 %); every band within 4 SE of S(f)/N, aliased by the binning."""
    p = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(2.0))
    mu, n, b, seg = 25.0, 500, 1.0, 500
    res = popdens.montecarlo(p, mu, t_end=40000.0, n=n, dt=0.1, seed=rng, record_interval=b)
    a = res.rate[1:].reshape(-1, seg)  # 80 segments of 0.5 s
    a = a - a.mean(axis=1, keepdims=True)
    per = np.abs(np.fft.rfft(a, axis=1) * b * 1e-3) ** 2 / (seg * b * 1e-3)  # Hz
    f = np.fft.rfftfreq(seg, b * 1e-3)
    bands = [(10.0, 20.0), (30.0, 40.0), (40.0, 50.0), (80.0, 90.0), (120.0, 130.0), (300.0, 310.0)]
    k = np.arange(-40, 41)
    for lo, hi in bands:
        sel = (f >= lo) & (f < hi)
        est = per[:, sel].mean()
        # binning: E[periodogram] = sum_k S(f + k/b) sinc^2((f + k/b) b); S -> r0 far out
        fk = (f[sel][:, None] + k[None, :] * 1000.0 / b).ravel()
        sk = spike_train_spectrum(p, mu, np.abs(fk)) / n
        pred = np.mean((sk * np.sinc(fk * b * 1e-3) ** 2).reshape(-1, k.size).sum(axis=1))
        se = pred / math.sqrt(per[:, sel].size)
        assert abs(est - pred) < 4 * se, (lo, est, pred, se)


def test_binned_rate_spectrum_integrates_to_the_bernoulli_count_variance():
    """Bins of b = 1 ms, shorter than the 3 ms dead time, hold at most one spike per neuron, so
    Var[A_b] = (r0/b - r0^2)/n exactly (Bernoulli count, independent neurons).  The variance of a
    sequence sampled every b is the integral of its spectrum over [-1/2b, 1/2b] (Parseval); the
    folded spectrum integrated by the trapezoidal rule at 10 Hz must give it within 1e-3."""
    pop, n, b = dead_time_poisson(3.0), 40, 1e-3
    f = np.linspace(0.0, 500.0, 51)
    sb = population_rate_spectrum(pop, 0.0, f, n, bin_width=1.0)
    r0 = 1000.0 / (3.0 + 1.0 / (50.0 * math.exp(-1.0) * 1e-3))  # Hz: 1 / (dead time + 1/hazard)
    var = 2.0 * np.trapezoid(sb, f)
    assert abs(var / ((r0 / b - r0 ** 2) / n) - 1.0) < 1e-3
    with pytest.raises(ValueError, match="Nyquist"):
        population_rate_spectrum(pop, 0.0, [600.0], n, bin_width=1.0)


# ------------------------------------------------------------------ shot noise (exactly renewal)
def _counting_pif(law):
    a, nu, tref, gap = 0.5, 0.8, 2.0, 2.0  # mV, 1/ms, ms, mV (gap = 4 fixed jumps)
    pop = popdens.Population(popdens.PIF(10.0, gap, 0.0, tref), popdens.ShotNoise(nu * 1e3, a, amplitudes=law))
    return pop, a, nu, tref, gap


def test_shot_noise_spectrum_of_a_counting_integrator_is_the_erlang_renewal_spectrum():
    """PIF without drive, fixed PSPs: each ISI is t_ref plus 4 exponential waits, so
    P_hat(s) = exp(-s t_ref) (nu/(nu + s))^4 and S = r Re[(1 + P_hat)/(1 - P_hat)] (Cox 1962); the grid
    aligns with the jumps, so the operator is exact up to round-off."""
    pop, a, nu, tref, gap = _counting_pif("fixed")
    f = np.array([0.0, 10.0, 100.0, 300.0, 1000.0])
    spec, (rate, cv2) = spike_train_spectrum(pop, 0.0, f, with_moments=True)
    k = round(gap / a)
    s = 2j * math.pi * f * 1e-3
    p_hat = np.exp(-s * tref) * (nu / (nu + s)) ** k
    r0 = 1e3 / (tref + k / nu)
    ref = np.empty(f.size)
    ref[1:] = r0 * ((1 + p_hat[1:]) / (1 - p_hat[1:])).real
    ref[0] = r0 * (k / nu ** 2) / (tref + k / nu) ** 2  # r0 CV^2, Erlang variance k/nu^2
    assert np.allclose(spec, ref, rtol=1e-9)  # closed form above
    assert rate == pytest.approx(r0, rel=1e-12)


def test_shot_noise_spectrum_with_exponential_jumps_matches_the_compound_count():
    """PIF without drive, exponential PSPs of mean a: 1 + Poisson(D/a) inputs end an interval, so
    P_hat(s) = exp(-s t_ref) nu/(nu + s) exp(-(D/a) s/(nu + s)) (the generating function of the compound
    count; Feller 1968).  The jumps are not aligned with the grid: first order in h, extrapolated from
    two grids; P_hat within 5e-4, which (1 + P)/(1 - P) amplifies near P = 1: measured -0.23 %, +0.04 %,
    -0.01 % at 10, 100, 300 Hz."""
    pop, a, nu, tref, gap = _counting_pif("exponential")
    f = np.array([0.0, 10.0, 100.0, 300.0])
    spec, (rate, cv2) = spike_train_spectrum(pop, 0.0, f, with_moments=True)
    s = 2j * math.pi * f[1:] * 1e-3
    p_hat = np.exp(-s * tref) * nu / (nu + s) * np.exp(-(gap / a) * s / (nu + s))
    mean = tref + (1 + gap / a) / nu
    r0 = 1e3 / mean
    assert spec[1:] == pytest.approx(r0 * ((1 + p_hat) / (1 - p_hat)).real, rel=5e-3)  # closed form above
    assert spec[0] == pytest.approx(r0 * (1 + 2 * gap / a) / nu ** 2 / mean ** 2, rel=2e-3)  # r0 CV^2


@pytest.mark.slow
def test_shot_noise_population_spectrum_matches_the_twin_periodogram():
    """LIF with fixed 0.5 mV PSPs (2000 + 500 Hz input, mu 5 mV, 22.5 Hz, CV 0.52): 500 neurons over
    40 s, rate in 1 ms bins, periodograms of 80 segments of 0.5 s averaged in 10 Hz bands (400 values,
    relative SE 5 %); every band within 4 SE of the binned S(f)/N."""
    pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.ShotNoise(2000.0, 0.5, 500.0, 0.5))
    mu, n, b, seg = 5.0, 500, 1.0, 500
    res = popdens.montecarlo(pop, mu, t_end=40000.0, n=n, seed=5, record_interval=b, progress=False)
    a = res.rate[1:].reshape(-1, seg)
    a = a - a.mean(axis=1, keepdims=True)
    per = np.abs(np.fft.rfft(a, axis=1) * b * 1e-3) ** 2 / (seg * b * 1e-3)  # Hz
    f = np.fft.rfftfreq(seg, b * 1e-3)
    for lo, hi in [(10.0, 20.0), (30.0, 40.0), (80.0, 90.0), (300.0, 310.0)]:
        sel = (f >= lo) & (f < hi)
        est = per[:, sel].mean()
        pred = population_rate_spectrum(pop, mu, f[sel], n, bin_width=b).mean()
        se = pred / math.sqrt(per[:, sel].size)
        print(f"{lo:g}-{hi:g} Hz: twin {est:.4g}, theory {pred:.4g} +- {se:.2g}")
        assert abs(est - pred) < 4 * se, (lo, est, pred, se)  # twin, 4 SE
