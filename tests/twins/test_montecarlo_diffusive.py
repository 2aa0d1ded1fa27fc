"""White-noise Monte Carlo twin: Siegert rates, first-passage times, agreement with the Fokker--Planck solver."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats
from scipy.special import erfcx

import popdens
from popdens import drive


def siegert_rate(mu, sigma, tau_m, theta, reset, tau_ref):
    """Siegert formula (Siegert 1951; Brunel & Hakim 1999, Neural Comput. 11:1621) for
    tau_m du = (-u + mu) dt + sigma sqrt(tau_m) dW, in Hz."""
    integral = integrate.quad(lambda x: erfcx(-x), (reset - mu) / sigma, (theta - mu) / sigma, limit=200)[0]
    return 1000.0 / (tau_ref + tau_m * np.sqrt(np.pi) * integral)


def rate_and_se(mc, t_end):
    """Mean rate (Hz) and its standard error from the spread of per-neuron spike counts
    (independent neurons: SE = sample std / sqrt(N), central limit theorem)."""
    counts = np.bincount(mc.spike_ids, minlength=mc.n_neurons) / (t_end * 1e-3)
    return counts.mean(), counts.std(ddof=1) / np.sqrt(counts.size)


def lif_white(sigma, tau_ref, tau_m=20.0):
    return popdens.Population(popdens.LIF(tau_m=tau_m, threshold=20.0, reset=10.0, refractory=tau_ref),
                              popdens.WhiteNoise(sigma))


@pytest.mark.parametrize("mu,sigma,tau_ref", [(18.0, 5.0, 2.0), (25.0, 4.0, 0.0), (15.0, 3.0, 2.0)])
def test_stationary_rate_matches_siegert(mu, sigma, tau_ref):
    t_end = 1000.0
    mc = popdens.montecarlo(lif_white(sigma, tau_ref), mu, t_end=t_end, n=4000, dt=0.05, seed=2, burn_in=200.0,
                            record_spikes=True)
    r, se = rate_and_se(mc, t_end)
    exact = siegert_rate(mu, sigma, 20.0, 20.0, 10.0, tau_ref)
    print(f"MC {r:.4g} +- {se:.2g} Hz, Siegert {exact:.4g} Hz")
    assert mc.success
    assert abs(r - exact) <= 4.0 * se


@pytest.mark.parametrize("model", ["QIF", "custom"])
def test_euler_maruyama_path_matches_fokker_planck_stationary_rate(model):
    """Nonlinear drifts (Euler-Maruyama + bridge): MC rate within 4 standard errors (per-neuron
    count spread) of the solver, whose rate is itself checked against the first-passage integral
    in test_fokker_planck.py."""
    if model == "QIF":
        nrn, mu, sigma = popdens.QIF(tau_m=10.0, critical=10.0, cutoff=30.0, reset=0.0, refractory=1.0), 1.0, 3.0
    else:
        nrn = popdens.CustomNeuron("-(u - 2) + 0.02*(u - 2)**2", tau_m=15.0, threshold=18.0, reset=5.0,
                                   refractory=0.5)
        mu, sigma = 10.0, 5.0
    pop = popdens.Population(nrn, popdens.WhiteNoise(sigma))
    pred = popdens.simulate(pop, mu, t_end=1.0)
    mc = popdens.montecarlo(pop, mu, t_end=1000.0, n=4000, dt=0.05, seed=3, burn_in=100.0, record_spikes=True)
    r, se = rate_and_se(mc, 1000.0)
    print(f"{model}: MC {r:.4g} +- {se:.2g} Hz, solver {pred.rate[0]:.4g} Hz")
    assert abs(r - pred.rate[0]) <= 4.0 * se


def test_without_bridge_crossings_are_missed():
    """Discrete sampling alone misses excursions above threshold within a step, so the
    rate is biased low (an O(sqrt(dt)) effect, common practice); the bridge removes it."""
    t_end = 1000.0
    pop = lif_white(5.0, 2.0)
    mc = popdens.montecarlo(pop, 18.0, t_end=t_end, n=4000, dt=0.2, seed=4, burn_in=200.0, record_spikes=True,
                            bridge=False)
    r, se = rate_and_se(mc, t_end)
    exact = siegert_rate(18.0, 5.0, 20.0, 20.0, 10.0, 2.0)  # Siegert (Brunel & Hakim 1999)
    assert exact - r > 4.0 * se


def test_pif_first_passage_times_are_inverse_gaussian():
    """PIF from reset: first-passage time inverse Gaussian with mean a/v and shape a^2/sigma_eff^2,
    sigma_eff^2 = sigma^2/tau_m (Gerstein & Mandelbrot 1964); Kolmogorov-Smirnov vs scipy.stats.invgauss."""
    tau_m, mu, sigma = 20.0, 10.0, 5.0
    pop = popdens.Population(popdens.PIF(tau_m, 20.0, 10.0, 0.0), popdens.WhiteNoise(sigma))
    mc = popdens.montecarlo(pop, mu, t_end=200.0, n=20000, dt=0.05, seed=9, initial="synchronous",
                            record_spikes=True)
    first = np.full(mc.n_neurons, np.inf)
    np.minimum.at(first, mc.spike_ids, mc.spike_times)
    assert np.all(np.isfinite(first))
    a, v, s2 = 10.0, mu / tau_m, sigma ** 2 / tau_m
    lam = a * a / s2
    p = stats.kstest(first, stats.invgauss((a / v) / lam, scale=lam).cdf).pvalue
    assert p > 1e-3


def test_pif_mean_interval_includes_refractory_period():
    """Renewal process: mean ISI = tau_ref + a/v (Gerstein & Mandelbrot 1964); SE = std/sqrt(n)."""
    tau_m, mu, sigma, tau_ref = 20.0, 10.0, 5.0, 3.3
    pop = popdens.Population(popdens.PIF(tau_m, 20.0, 10.0, tau_ref), popdens.WhiteNoise(sigma))
    mc = popdens.montecarlo(pop, mu, t_end=1000.0, n=2000, dt=0.05, seed=13, burn_in=100.0, record_spikes=True)
    isi = mc.isis()
    expected = tau_ref + 10.0 / (mu / tau_m)
    assert abs(isi.mean() - expected) <= 4.0 * isi.std() / np.sqrt(isi.size)
    assert isi.min() >= tau_ref - 1e-9


def test_free_membrane_moments_follow_the_ornstein_uhlenbeck_transient():
    # Below a far threshold the LIF twin is an Ornstein-Uhlenbeck process: from u(0) = reset under a
    # drive ramping linearly from mu0 to mu1 over T, the mean is the exact linear-ramp solution and the
    # variance sigma^2 (1 - exp(-2 T / tau_m)) / 2 (Gillespie 1996, Phys. Rev. E 54:2084; closed form,
    # computed here).  The step of whole free steps is the kernel's fast path; 4 standard errors.
    from popdens.twins._diffusive import DiffusiveEnsemble

    tau_m, sigma, reset, n, dt, n_steps = 10.0, 4.0, 0.0, 40_000, 0.1, 50
    pop = popdens.Population(popdens.LIF(tau_m=tau_m, threshold=500.0, reset=reset, refractory=0.0),
                             popdens.WhiteNoise(sigma))
    ens = DiffusiveEnsemble(pop, n, dt, np.random.default_rng(3))
    mu = np.linspace(10.0, 14.0, n_steps + 1)
    ens.run(mu, np.full(n_steps + 1, sigma), 0.0, False, np.zeros(1), np.zeros(1, dtype=np.int64), 0)
    t, slope = n_steps * dt, (mu[-1] - mu[0]) / (n_steps * dt)
    e = np.exp(-t / tau_m)
    # tau u' = -u + mu0 + slope t  =>  u(t) = mu0 + slope (t - tau) + (reset - mu0 + slope tau) e^{-t/tau}
    mean = mu[0] + slope * (t - tau_m) + (reset - mu[0] + slope * tau_m) * e
    var = 0.5 * sigma ** 2 * (1.0 - e * e)
    assert abs(ens.u.mean() - mean) < 4.0 * np.sqrt(var / n)
    assert abs(ens.u.var(ddof=1) - var) < 4.0 * var * np.sqrt(2.0 / (n - 1))  # SE of a normal variance
    assert stats.kstest((ens.u - mean) / np.sqrt(var), "norm").pvalue > 1e-3


def test_seed_reproducibility_and_independence():
    pop = lif_white(5.0, 2.0)
    d = drive.Step(t=20.0, before=15.0, after=22.0)
    a = popdens.montecarlo(pop, d, t_end=50.0, n=500, seed=21, burn_in=50.0)
    b = popdens.montecarlo(pop, d, t_end=50.0, n=500, seed=21, burn_in=50.0)
    c = popdens.montecarlo(pop, d, t_end=50.0, n=500, seed=22, burn_in=50.0)
    assert np.isnan(a.rate[0])  # a finite diffusive ensemble has no instantaneous rate
    assert np.array_equal(a.rate[1:], b.rate[1:]) and np.array_equal(a.mean_u, b.mean_u)
    assert not np.array_equal(a.rate[1:], c.rate[1:])


def test_synchronous_start_is_refractory_then_fires():
    pop = lif_white(3.0, 3.0, tau_m=10.0)
    mc = popdens.montecarlo(pop, 25.0, t_end=10.0, n=2000, seed=3, initial="synchronous")
    before = mc.t < 2.95
    assert np.all(mc.refractory_fraction[before] == 1.0)
    assert np.all(mc.rate[1:][before[1:]] == 0.0)
    assert np.all(mc.mean_u[before] == 10.0)
    assert mc.rate[-20:].sum() > 0


def test_time_varying_sigma_matches_fokker_planck():
    """Noise amplitude stepping from 2 to 6 mV: MC rate within 4 Poisson standard errors of the
    Fokker--Planck prediction in every 50 ms bin (Poisson count variance is an upper bound for
    CV <= 1, common practice)."""
    sig = drive.Step(t=500.0, before=2.0, after=6.0)
    pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(sig))
    pred = popdens.simulate(pop, 15.0, t_end=1000.0, record_interval=50.0)
    mc = popdens.montecarlo(pop, 15.0, t_end=1000.0, n=2000, seed=5, burn_in=200.0, record_interval=50.0)
    assert pred.rate[-1] > 5 * pred.rate[1]  # the step matters
    assert fraction_within(mc, pred) == 1.0
    # mean potential: SE = std(u)/sqrt(N) with std(u) <= sigma_max/sqrt(2), the free LIF
    # membrane's stationary std (Ornstein-Uhlenbeck, common practice); the threshold only narrows it
    se_u = 6.0 / np.sqrt(2.0) / np.sqrt(mc.n_neurons)
    assert np.all(np.abs(mc.mean_u[1:] - pred.mean_u[1:]) <= 4.0 * se_u)


def fraction_within(mc, pred, n_se=4.0):
    """Fraction of bins where |MC - prediction| <= n_se standard errors; SE of a bin rate
    sqrt(r / (N width)), the Poisson error of the spike count of N independent neurons in a
    short bin (common practice), with the predicted rate r."""
    width = (mc.t[1] - mc.t[0]) * 1e-3
    se = np.sqrt(np.maximum(pred.rate[1:], 1e-12) / (mc.n_neurons * width))
    return float(np.mean(np.abs(mc.rate[1:] - pred.rate[1:]) <= n_se * se))


@pytest.mark.slow
@pytest.mark.parametrize("model", ["LIF", "EIF"])
def test_step_response_agrees_with_fokker_planck(model):
    if model == "LIF":
        nrn = popdens.LIF(tau_m=10.0, threshold=20.0, reset=10.0, refractory=2.0)
        d = drive.Step(t=50.0, before=15.0, after=24.0)
        dt_mc = 0.02
    else:
        nrn = popdens.EIF(tau_m=10.0, soft_threshold=15.0, slope_factor=2.0, cutoff=30.0, reset=10.0, refractory=2.0)
        d = drive.Step(t=50.0, before=8.0, after=14.0)
        dt_mc = 0.005  # Euler-Maruyama near the exponential upswing needs a small step
    pop = popdens.Population(nrn, popdens.WhiteNoise(4.0))
    pred = popdens.simulate(pop, d, t_end=200.0, dt=0.05, record_interval=1.0, n_cells=800)
    mc = popdens.montecarlo(pop, d, t_end=200.0, n=100_000, dt=dt_mc, seed=7, burn_in=200.0, record_interval=1.0)
    frac = fraction_within(mc, pred)
    print(model, "fraction within 4 SE", frac)
    assert frac >= 0.99
