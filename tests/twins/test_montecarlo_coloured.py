"""Coloured-noise Monte Carlo twin: the exact current step, free-membrane variance, exact PIF rate,
and the effective-boundary theory against the twin (the table in the contributor guide)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import dblquad, quad

import popdens
from popdens.twins._coloured import ColouredEnsemble, ou_step_moments
from references import window_isi_cv


def rate_and_se(mc, t_end):
    """Mean rate (Hz) and its standard error from the spread of per-neuron spike counts
    (independent neurons: SE = sample std / sqrt(N), central limit theorem)."""
    counts = np.bincount(mc.spike_ids, minlength=mc.n_neurons) / (t_end * 1e-3)
    return counts.mean(), counts.std(ddof=1) / np.sqrt(counts.size)


@pytest.mark.parametrize("h,tau_s", [(0.1, 2.0), (0.01, 0.2), (1e-4, 1.0), (3.0, 0.5)])
def test_ou_step_moments_match_the_covariance_integrals(h, tau_s):
    """Noise of (I(h), int_0^h I) for dI = -I/tau_s dt + c dW, by scipy quadrature of the Ito isometry:
    var n1 = c^2 int e^{-2x/tau}, var n2 = c^2 int (tau (1 - e^{-x/tau}))^2, cov = c^2 int e^{-x/tau} tau (1 - e^{-x/tau})."""
    c = 1.7
    decay, s1, reg, s2 = ou_step_moments(h, tau_s, c)
    v1 = c * c * quad(lambda x: math.exp(-2 * x / tau_s), 0, h, epsrel=1e-13)[0]
    v2 = c * c * quad(lambda x: (tau_s * -math.expm1(-x / tau_s)) ** 2, 0, h, epsrel=1e-13)[0]
    cov = c * c * quad(lambda x: math.exp(-x / tau_s) * tau_s * -math.expm1(-x / tau_s), 0, h, epsrel=1e-13)[0]
    assert decay == pytest.approx(math.exp(-h / tau_s), rel=1e-14)
    assert s1 ** 2 == pytest.approx(v1, rel=1e-10)
    assert reg * s1 ** 2 == pytest.approx(cov, rel=1e-10)
    assert s2 ** 2 + reg ** 2 * s1 ** 2 == pytest.approx(v2, rel=1e-8)


def test_free_membrane_variance_of_filtered_noise(rng):
    """No threshold in reach: Var u = sigma^2 tau_m / (2 (tau_m + tau_s)) for a leaky membrane driven by an
    Ornstein-Uhlenbeck current (the double integral of the kernel against the current's covariance,
    checked here by scipy's dblquad), and Var I = sigma^2 tau_m / (2 tau_s).  SE of a sample variance of
    N independent Gaussians: var sqrt(2/(N-1))."""
    tau_m, tau_s, sigma = 10.0, 3.0, 2.0
    var_i = sigma ** 2 * tau_m / (2 * tau_s)
    # symmetric in s <-> t: twice the triangle s < t, where the covariance is smooth
    kern = 2.0 * dblquad(lambda s, t: math.exp(-(s + t) / tau_m) * math.exp(-(t - s) / tau_s) / tau_m ** 2,
                         0, 40 * tau_m, 0, lambda t: t, epsabs=1e-12, epsrel=1e-10)[0]
    assert kern * var_i == pytest.approx(sigma ** 2 * tau_m / (2 * (tau_m + tau_s)), rel=1e-6)
    pop = popdens.Population(popdens.LIF(tau_m, 1e3, 0.0, 0.0), popdens.ColouredNoise(sigma, tau_s))
    n = 20000
    ens = ColouredEnsemble(pop, n, 0.05, rng)
    popdens.twins._escape.seed_compiled_rng(5)
    no = (np.zeros(1), np.zeros(1, dtype=np.int64))
    m = int(20 * tau_m / 0.05) + 1
    ens.run(np.zeros(m), np.full(m, sigma), 0.0, False, *no, 0)
    se = math.sqrt(2.0 / (n - 1))
    assert abs(np.var(ens.u) / (kern * var_i) - 1.0) < 4 * se
    assert abs(np.var(ens.cur) / var_i - 1.0) < 4 * se


def test_perfect_integrator_rate_is_exact_whatever_the_noise():
    """PIF without refractoriness: u(T) - u(0) = int (mu + I) dt / tau_m - N (theta - reset), and the
    integral of the zero-mean current grows only like sqrt(T), so the rate is mu / (tau_m (theta - reset))."""
    pop = popdens.Population(popdens.PIF(10.0, 20.0, 0.0, 0.0), popdens.ColouredNoise(3.0, 2.0))
    t_end, n = 2000.0, 400
    mc = popdens.montecarlo(pop, 2.0, t_end=t_end, n=n, seed=3, record_spikes=True)
    r, se = rate_and_se(mc, t_end)
    exact = 1000.0 * 2.0 / (10.0 * 20.0)
    # per neuron the count is exact up to the spread of int I dt / tau_m / (theta - reset): SE from the twin
    assert mc.success
    assert abs(r - exact) <= 4.0 * se + 1.0 / (t_end * 1e-3)


def test_lif_rate_against_effective_boundary_theory_at_tau_ratio_0p1():
    """The claim in the guide: within 2 % of the twin for tau_s/tau_m <= 0.1 (measured -0.1 % here);
    tolerance 2 % plus 2 SE.  The white-noise rate is 44 % too high (measured) and must fail it."""
    pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.ColouredNoise(4.0, 2.0))
    t_end = 1000.0
    mc = popdens.montecarlo(pop, 18.0, t_end=t_end, n=2000, seed=4, record_spikes=True)
    r, se = rate_and_se(mc, t_end)
    corr = float(popdens.gain(pop, 18.0))
    white = float(popdens.gain(popdens.Population(pop.neuron, popdens.WhiteNoise(4.0)), 18.0))
    print(f"twin {r:.4g} +- {se:.2g} Hz, corrected {corr:.4g}, white {white:.4g}")
    assert abs(corr - r) <= 0.02 * r + 2.0 * se
    assert abs(white - r) > 0.2 * r


# ------------------------------------------------------------------ slow: the tables of the guide
LIF_TABLE = (popdens.LIF(20.0, 20.0, 10.0, 2.0), 18.0, 4.0)
EIF_TABLE = (popdens.EIF(20.0, 15.0, 2.0, 30.0, 10.0, 2.0), 14.0, 4.0)


@pytest.mark.slow
@pytest.mark.parametrize("model,ratio", [(m, x) for m in ("LIF", "EIF") for x in (0.01, 0.05, 0.1, 0.25, 0.5)]
                         + [("LIF", 0.15), ("LIF", 0.2)])
def test_rate_against_twin_over_tau_ratio(model, ratio):
    """Default (``gain``), two-dimensional plane, effective-boundary and white-noise rates against the twin,
    tau_s/tau_m = 0.01 ... 0.5.  4000 neurons, 2 s, default step (tau_s/20 or finer); SE from the
    per-neuron count spread (twin, central limit theorem).  Claim: the default within 2 % + 2 SE at every
    ratio (LIF: the effective boundary shift, Fourcaud & Brunel 2002, up to 0.1, the plane from 0.15,
    blended between; EIF: the plane); the LIF's boundary shift, the default before beyond 0.1, is bounded
    by what was measured (+-1 % of slack)."""
    nrn, mu, sigma = LIF_TABLE if model == "LIF" else EIF_TABLE
    pop = popdens.Population(nrn, popdens.ColouredNoise(sigma, ratio * nrn.tau_m))
    t_end = 2000.0
    mc = popdens.montecarlo(pop, mu, t_end=t_end, n=4000, seed=7, record_spikes=True, record_interval=t_end)
    r, se = rate_and_se(mc, t_end)
    default = float(popdens.gain(pop, mu))
    plane = float(popdens.gain(pop, mu, method="plane"))
    shift = float(popdens.gain(pop, mu, method="threshold-integration"))  # effective boundary (none for the EIF)
    white = float(popdens.gain(popdens.Population(nrn, popdens.WhiteNoise(sigma)), mu))
    err = {name: x / r - 1.0 for name, x in (("default", default), ("plane", plane), ("shift", shift),
                                                ("white", white))}
    print(f"{model} tau_s/tau_m={ratio}: twin {r:.4f} +- {se:.4f} Hz ({100 * se / r:.2f} %); "
          + ", ".join(f"{k} {100 * e:+.2f} %" for k, e in err.items()))
    # measured (this seed, SE 0.20-0.36 %): see the table in the contributor guide ("Synaptic filtering")
    assert abs(default - r) <= 0.02 * r + 2.0 * se
    assert abs(plane - r) <= 0.025 * r + 2.0 * se  # the plane at every ratio, both models
    if model == "LIF":
        bound = {0.01: 0.02, 0.05: 0.02, 0.1: 0.02, 0.15: 0.035, 0.2: 0.05, 0.25: 0.07, 0.5: 0.17}[ratio]
        assert abs(shift - r) <= bound * r + 2.0 * se
        assert abs(err["default"]) < abs(err["white"])  # the correction buys accuracy at every ratio
        if ratio >= 0.15:
            assert abs(err["default"]) < abs(err["shift"])  # the plane beats the shift where it is the default
    elif ratio >= 0.05:
        assert abs(err["default"]) < abs(err["white"])  # EIF: the plane buys accuracy where white noise is off


@pytest.mark.slow
@pytest.mark.parametrize("ratio", [0.05, 0.25, 0.5])
def test_eif_isi_cv_against_twin(ratio):
    """ISI CV of the EIF of the table on the plane (passage-time moments from the stationary entry
    distribution of the current) against the twin (3000 neurons, 3 s after burn-in; intervals weighted
    for the window, SE from 20 batches of neurons).  Measured +0.62 / +0.59 / +0.58 % (2.0 / 2.1 / 1.7
    SE), where the effective renewal problem's CV (white noise for a spike cut-off) is -0.2 / -4.0 /
    -8.4 %.  Unweighted, the pooled intervals gave +1.1 / +1.2 / +1.3 % (3-4 SE): the window's bias
    against long intervals (``window_isi_cv``)."""
    nrn, mu, sigma = EIF_TABLE
    pop = popdens.Population(nrn, popdens.ColouredNoise(sigma, ratio * nrn.tau_m))
    t_end = 3000.0
    mc = popdens.montecarlo(pop, mu, t_end=t_end, n=3000, seed=11, record_spikes=True, record_interval=t_end,
                            burn_in=300.0)
    cv, se = window_isi_cv(mc.spike_ids, mc.spike_times, t_end, mc.n_neurons)
    plane = popdens.stationary(pop, mu).cv
    renewal = popdens.stationary(pop, mu, method="threshold-integration").cv
    print(f"EIF tau_s/tau_m={ratio}: twin CV {cv:.4f} +- {se:.4f}; plane {100 * (plane / cv - 1):+.2f} %, "
          f"effective renewal {100 * (renewal / cv - 1):+.2f} %")
    assert abs(plane - cv) <= 4.0 * se  # twin, 4 SE
    if ratio >= 0.25:
        assert abs(plane - cv) < abs(renewal - cv)


def fit_sine(t, y, f):
    """Least-squares amplitude and phase of the component sin(2 pi f t + phase) (t in ms)."""
    w = 2 * np.pi * f * t * 1e-3
    a = np.column_stack([np.ones_like(t), np.sin(w), np.cos(w)])
    c = np.linalg.lstsq(a, y, rcond=None)[0]
    return np.hypot(c[1], c[2]), np.arctan2(c[2], c[1]), y - a @ c


def sine_response(pop, mu, f, eps, n, dt, rec, seed):
    """Amplitude (Hz/mV, corrected for the bin's sinc attenuation), phase (rad) and their SE from a
    twin driven by mu + eps sin(2 pi f t): SE of a fitted coefficient sqrt(2/M) x residual s.d. (M bins)."""
    period = 1000.0 / f
    t_end = 1050.0
    res = popdens.montecarlo(pop, popdens.drive.Sine(mean=mu, amplitude=eps, frequency=f), t_end=t_end, n=n,
                             dt=dt, seed=seed, record_interval=rec)
    keep = res.t >= 50.0
    t, y = res.t[keep] - rec / 2, res.rate[keep]
    m = int(np.floor((t[-1] - t[0]) / period) * period / rec)
    amp, phase, resid = fit_sine(t[:m], y[:m], f)
    x = math.pi * f * rec * 1e-3
    att = math.sin(x) / x
    se = math.sqrt(2.0 / m) * np.std(resid)
    return amp / eps / att, phase, se / eps / att, se / amp


@pytest.mark.slow
def test_transfer_against_twin_where_the_theory_holds():
    """Effective-boundary transfer (Schuecker, Diesmann & Helias 2015) at 10 Hz, tau_s = 2 ms
    (2 pi f tau_s = 0.13): amplitude and phase within 4 SE of a twin of 20000 neurons."""
    pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.ColouredNoise(4.0, 2.0))
    amp, ph, se_a, se_p = sine_response(pop, 18.0, 10.0, 0.3, 20000, 0.1, 0.5, 5)
    chi = popdens.transfer(pop, 18.0, [10.0])[0]
    print(f"10 Hz: twin {amp:.4f} +- {se_a:.4f} Hz/mV, {ph:.3f} +- {se_p:.3f} rad; theory {abs(chi):.4f}, "
          f"{np.angle(chi):.3f}")
    assert abs(amp - abs(chi)) < 4 * se_a
    assert abs(ph - np.angle(chi)) < 4 * se_p


@pytest.mark.slow
def test_high_frequency_response_is_finite_and_lag_free():
    """At 2 kHz (2 pi f tau_s = 25) the twin's response is flat and without lag (Fourcaud & Brunel 2002):
    phase within 4 SE of 0, amplitude within 20 % of high_frequency_limit (measured -15 %: first order
    in k = 0.32), while the effective-boundary transfer function has fallen to a fifth of it."""
    pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.ColouredNoise(4.0, 2.0))
    amp, ph, se_a, se_p = sine_response(pop, 18.0, 2000.0, 0.5, 20000, 0.025, 0.025, 6)
    lim = popdens.high_frequency_limit(pop, 18.0)
    chi = popdens.transfer(pop, 18.0, [2000.0])[0]
    print(f"2 kHz: twin {amp:.4f} +- {se_a:.4f} Hz/mV, {ph:.3f} +- {se_p:.3f} rad; limit {lim:.4f}; "
          f"effective-boundary {abs(chi):.4f}")
    assert abs(ph) < 4 * se_p
    assert abs(amp / lim - 1.0) < 0.2 + 4 * se_a / lim
    assert abs(chi) < 0.3 * amp


@pytest.mark.slow
@pytest.mark.parametrize("f,eps", [(10.0, 0.5), (100.0, 1.0)])
def test_eif_transfer_on_the_plane_against_twin(f, eps):
    """EIF of the table, tau_s/tau_m = 0.25: the linearised (potential, current) plane against a twin of
    20000 neurons driven by mu + eps sin(2 pi f t): amplitude and phase within 4 SE (SE of the fitted
    sine); the white-noise response (what the EIF used before) is printed beside it.  Measured: 10 Hz twin
    3.651 +- 0.070 Hz/mV, -0.533 +- 0.019 rad, plane 3.575, -0.527; 100 Hz twin 0.553 +- 0.036, -1.514 +-
    0.064, plane 0.541, -1.576."""
    nrn, mu, sigma = EIF_TABLE
    pop = popdens.Population(nrn, popdens.ColouredNoise(sigma, 5.0))
    amp, ph, se_a, se_p = sine_response(pop, mu, f, eps, 20000, 0.1, 0.5, 8)
    chi = popdens.transfer(pop, mu, [f], method="plane")[0]
    white = popdens.transfer(popdens.Population(nrn, popdens.WhiteNoise(sigma)), mu, [f])[0]
    print(f"EIF {f:g} Hz: twin {amp:.4f} +- {se_a:.4f} Hz/mV, {ph:.3f} +- {se_p:.3f} rad; plane {abs(chi):.4f}, "
          f"{np.angle(chi):.3f}; white {abs(white):.4f}, {np.angle(white):.3f}")
    assert abs(amp - abs(chi)) < 4 * se_a
    assert abs(ph - np.angle(chi)) < 4 * se_p
