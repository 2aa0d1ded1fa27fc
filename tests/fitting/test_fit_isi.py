"""ISI fits under constant drive: white noise (passage-time density) and escape noise (renewal density)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

import popdens
from popdens import SpikeTrains, hazard
from popdens.fitting import isi_loglik


def test_white_noise_pif_fit_equals_the_inverse_gaussian_closed_form():
    # PIF with white noise: ISI - refractory is inverse Gaussian with mean d tau/mu and shape d^2 tau/sigma^2
    # (Gerstein & Mandelbrot 1964).  Its MLE is closed form, m = mean(x), 1/lambda = mean(1/x - 1/m), with
    # var(m) = m^3/(n lambda), var(lambda) = 2 lambda^2/n (Tweedie 1957), mapped to (mu, sigma) by the delta method.
    tau, d, mu, sig, ref, n = 20.0, 10.0, 8.0, 3.0, 2.0, 4000
    m, lam = d * tau / mu, d * d * tau / sig ** 2
    x = stats.invgauss.rvs(m / lam, scale=lam, size=n, random_state=np.random.default_rng(11))
    pop = popdens.Population(popdens.PIF(tau_m=tau, threshold=d, reset=0.0, refractory=ref), popdens.WhiteNoise(2.0))
    fit = popdens.fit_isi(pop, x + ref, ["mu", "sigma"], mu=5.0)
    mh = x.mean()
    lh = 1.0 / np.mean(1.0 / x - 1.0 / mh)
    assert fit.estimates["mu"] == pytest.approx(d * tau / mh, rel=2e-4)
    assert fit.estimates["sigma"] == pytest.approx(d * math.sqrt(tau / lh), rel=2e-4)
    se_mu = d * tau / mh ** 2 * math.sqrt(mh ** 3 / (n * lh))
    se_sigma = 0.5 * d * math.sqrt(tau) * lh ** -1.5 * math.sqrt(2.0 * lh ** 2 / n)
    assert fit.se["mu"] == pytest.approx(se_mu, rel=0.02)
    assert fit.se["sigma"] == pytest.approx(se_sigma, rel=0.02)
    # the log-likelihood is the sum of log inverse-Gaussian densities (scipy), 1/ms
    assert fit.loglik == pytest.approx(np.sum(stats.invgauss.logpdf(x, mh / lh, scale=lh)), abs=0.05)
    assert fit.goodness["p_value"] > 0.01


def test_white_noise_lif_recovered_from_the_twin():
    # diffusive Monte Carlo twin, 40 neurons x 10 s at mu = 18 mV, sigma = 4 mV (~16 Hz): estimates
    # within 3 SE
    cell = popdens.LIF(tau_m=20.0, threshold=20.0, reset=10.0, refractory=2.0)
    pop = popdens.Population(cell, popdens.WhiteNoise(sigma=4.0))
    mc = popdens.montecarlo(pop, 18.0, t_end=10000.0, n=40, seed=2, record_spikes=True)
    sp = SpikeTrains([mc.spike_times[mc.spike_ids == i] for i in range(40)], duration=10000.0)
    fit = popdens.fit_isi(pop, sp, ["mu", "sigma"], mu=15.0)
    for name, value in (("mu", 18.0), ("sigma", 4.0)):
        assert abs(fit.estimates[name] - value) < 3.0 * fit.se[name], (name, fit.estimates[name], fit.se[name])
    assert fit.goodness["p_value"] > 0.01
    assert len(fit.plot().axes) == 2


def test_escape_noise_isi_fit_recovers_the_hazard():
    # escape-noise twin at constant drive, 30 neurons x 10 s; the renewal ISI density on the exact
    # exponential-hazard LIF; estimates within 3 SE
    cell = popdens.LIF(tau_m=10.0, threshold=20.0, reset=10.0, refractory=3.0)
    pop = popdens.Population(cell, popdens.EscapeNoise(hazard.Exponential(rate=20.0, width=2.0)))
    mc = popdens.montecarlo(pop, 19.0, t_end=10000.0, n=30, seed=4, record_spikes=True, dt=0.02)
    sp = SpikeTrains([mc.spike_times[mc.spike_ids == i] for i in range(30)], duration=10000.0)
    start = popdens.Population(cell, popdens.EscapeNoise(hazard.Exponential(rate=10.0, width=3.0)))
    fit = popdens.fit_isi(start, sp, ["rate", "width"], mu=19.0)
    for name, value in (("rate", 20.0), ("width", 2.0)):
        assert abs(fit.estimates[name] - value) < 3.0 * fit.se[name], (name, fit.estimates[name], fit.se[name])


def test_isi_loglik_of_escape_noise_is_the_renewal_density():
    # renewal density p(t) = h(u(t)) exp(-int_0^t h) along u(t) = mu + (reset - mu) exp(-(t - ref)/tau)
    # (Gerstner 2000), integrated with scipy quad, at five intervals
    cell = popdens.LIF(tau_m=10.0, threshold=20.0, reset=10.0, refractory=3.0)
    pop = popdens.Population(cell, popdens.EscapeNoise(hazard.Exponential(rate=20.0, width=2.0)))
    from scipy.integrate import quad

    def h(s):
        return 0.0 if s < 3.0 else 20e-3 * math.exp((19.0 + (10.0 - 19.0) * math.exp(-(s - 3.0) / 10.0) - 20.0) / 2.0)

    isis = np.array([4.0, 12.0, 30.0, 55.5, 120.0] * 2)
    ref = sum(math.log(h(t)) - quad(h, 0.0, t, points=[3.0], limit=200)[0] for t in isis)
    assert isi_loglik(pop, isis, mu=19.0) == pytest.approx(ref, abs=1e-6)


def test_isi_fit_errors():
    pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(4.0))
    with pytest.raises(ValueError, match="at least 10"):
        popdens.fit_isi(pop, [10.0, 20.0], ["mu"], mu=18.0)
    with pytest.raises(ValueError, match="`isis` must be > 0"):
        popdens.fit_isi(pop, [-1.0] + [10.0] * 20, ["mu"], mu=18.0)
    with pytest.raises(ValueError, match="`free`: 'rate' is not a parameter"):
        popdens.fit_isi(pop, [10.0] * 20, ["rate"], mu=18.0)
