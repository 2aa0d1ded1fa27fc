"""Parameter recovery over repeated data sets from the Monte Carlo twins: coverage of the 95 % intervals,
bias, and the power of the time-rescaling test.

The slow tests hold the numbers quoted in DEVELOPERS.md (100 data sets per parameter set); the
default suite runs a small version.  Coverage of a nominal 95 % interval over n independent data sets is
binomial(n, 0.95); the check asks for its central 99 % range from scipy (89-100 of 100: P(100 of 100) =
0.6 %), so a correct fit fails it with probability ~1 %.  Bias: |mean(estimate) - truth|
below a third of the mean standard error (the standard error of that mean is SE/10 for 100 data sets,
so a correct fit passes with margin).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import kstest

import popdens
from popdens import SpikeTrains, drive, hazard

STIM = drive.Sine(mean=0.0, amplitude=1.0, frequency=3.0) + drive.Sine(mean=0.0, amplitude=2.0 / 3.0, frequency=11.0)

#: Escape noise, spike trains under the two-sine stimulus: (neuron, hazard, offset, free and truth).
ESCAPE_SETS = [
    (dict(tau_m=10.0, threshold=20.0, reset=14.0, refractory=5.0), (20.0, 2.0), 20.0, {"rate": 20.0, "width": 2.0, "scale": 3.0}),
    (dict(tau_m=20.0, threshold=15.0, reset=0.0, refractory=2.0), (10.0, 1.0), 14.0, {"rate": 10.0, "width": 1.0, "scale": 3.0}),
    (dict(tau_m=5.0, threshold=20.0, reset=10.0, refractory=3.0), (50.0, 4.0), 16.0, {"rate": 50.0, "width": 4.0, "scale": 3.0}),
]
#: White noise, ISIs under constant drive: (neuron, mu, sigma).
WHITE_SETS = [
    (dict(tau_m=20.0, threshold=20.0, reset=10.0, refractory=2.0), 18.0, 4.0),   # fluctuation driven
    (dict(tau_m=20.0, threshold=20.0, reset=10.0, refractory=2.0), 24.0, 2.0),   # mean driven
    (dict(tau_m=10.0, threshold=15.0, reset=0.0, refractory=3.0), 14.0, 6.0),    # noisy, low rate
]


def _escape_data(nrn, hz, offset, n, t_end, seed):
    pop = popdens.Population(popdens.LIF(**nrn), popdens.EscapeNoise(hazard.Exponential(*hz)))
    d = drive.Sum((drive.Constant(offset), drive.Sine(0.0, 3.0, 3.0), drive.Sine(0.0, 2.0, 11.0)))
    mc = popdens.montecarlo(pop, d, t_end=t_end, n=n, seed=seed, record_spikes=True)
    return pop, SpikeTrains([mc.spike_times[mc.spike_ids == i] for i in range(n)], duration=t_end)


def _escape_coverage(k, n_sets, n, t_end):
    nrn, hz, offset, truth = ESCAPE_SETS[k]
    est = {name: [] for name in truth}
    se = {name: [] for name in truth}
    for rep in range(n_sets):
        pop, sp = _escape_data(nrn, hz, offset, n, t_end, seed=1000 * k + rep)
        start = popdens.Population(pop.neuron, popdens.EscapeNoise(hazard.Exponential(hz[0] * 1.5, hz[1] * 0.8)))
        fit = popdens.fit_psth(start, sp, STIM, list(truth), scale=2.5, offset=offset, predict=False)
        for name in truth:
            est[name].append(fit.estimates[name])
            se[name].append(fit.se[name])
    return truth, {n_: np.array(v) for n_, v in est.items()}, {n_: np.array(v) for n_, v in se.items()}


def _white_coverage(k, n_sets, n, t_end):
    nrn, mu, sigma = WHITE_SETS[k]
    pop = popdens.Population(popdens.LIF(**nrn), popdens.WhiteNoise(sigma))
    truth = {"mu": mu, "sigma": sigma}
    est = {name: [] for name in truth}
    se = {name: [] for name in truth}
    for rep in range(n_sets):
        mc = popdens.montecarlo(pop, mu, t_end=t_end, n=n, seed=5000 + 1000 * k + rep, record_spikes=True, dt=0.02)
        sp = SpikeTrains([mc.spike_times[mc.spike_ids == i] for i in range(n)], duration=t_end)
        fit = popdens.fit_isi(pop, sp, ["mu", "sigma"], mu=mu - 2.0)
        for name in truth:
            est[name].append(fit.estimates[name])
            se[name].append(fit.se[name])
    return truth, {n_: np.array(v) for n_, v in est.items()}, {n_: np.array(v) for n_, v in se.items()}


def _report(label, truth, est, se):
    # also the spread of the estimates over the data sets against the mean SE: their ratio estimates
    # how well the observed information predicts the sampling error (its own standard error is about
    # 1/sqrt(2 (n - 1)), 7 % for 100 data sets; normal theory, common practice)
    rows = []
    for name, value in truth.items():
        covered = np.mean(np.abs(est[name] - value) <= 1.959964 * se[name])
        bias = est[name].mean() - value
        spread = est[name].std(ddof=1) / se[name].mean()
        rows.append((name, covered, bias, se[name].mean()))
        print(f"{label} {name}: coverage {covered:.2f}, bias {bias:+.4g} (mean SE {se[name].mean():.4g}, "
              f"bias/SE {bias / se[name].mean():+.3f}), SD of estimates / mean SE {spread:.3f} "
              f"(+/- {1.0 / np.sqrt(2.0 * (est[name].size - 1)):.3f})", flush=True)
    return rows


def _coverage_range(n_sets):
    """The central 99 % range of binomial(n_sets, 0.95): covered counts a correct 95 % interval gives."""
    from scipy.stats import binom

    return binom.ppf(0.005, n_sets, 0.95) / n_sets, binom.isf(0.005, n_sets, 0.95) / n_sets


#: Set 0's scale interval covers the truth in 100 of its 100 data sets (seeds 0-99), inside the range
#: (P = 0.6 %).  Its standard errors are right: their mean equals the inverse expected information at
#: the truth within 1 %, and the spread of the estimates equals that of the one-step estimates
#: x0 + I^-1 score(x0) of the same data sets (0.150 vs 0.152 mV/unit for seeds 0-199): these seeds'
#: scores vary less than the information says (variance / information 0.73 for seeds 0-99; 1.02 for
#: the next 500 data sets).  See DEVELOPERS.md.


@pytest.mark.slow
@pytest.mark.parametrize("k", range(3))
def test_escape_psth_fit_coverage_and_bias_over_100_data_sets(k):
    truth, est, se = _escape_coverage(k, 100, 30, 4000.0)
    lo, hi = _coverage_range(100)
    for name, covered, bias, mean_se in _report(f"escape set {k}", truth, est, se):
        assert lo <= covered <= hi, (name, covered)  # binomial 99 % range
        assert abs(bias) < mean_se / 3.0, (name, bias, mean_se)  # the bias's own SE is SE / sqrt(n_sets)


@pytest.mark.slow
@pytest.mark.parametrize("k", range(3))
def test_white_isi_fit_coverage_and_bias_over_100_data_sets(k):
    truth, est, se = _white_coverage(k, 100, 20, 5000.0)
    for name, covered, bias, mean_se in _report(f"white set {k}", truth, est, se):
        lo, hi = _coverage_range(100)
        assert lo <= covered <= hi, (name, covered)  # binomial 99 % range
        assert abs(bias) < mean_se / 3.0, (name, bias, mean_se)


def test_escape_psth_fit_coverage_small():
    # default-suite version: 8 data sets of 10 neurons x 2 s; P(>= 6 of 8 covered | 95 %) = 0.994
    truth, est, se = _escape_coverage(0, 8, 10, 2000.0)
    for name, value in truth.items():
        assert np.sum(np.abs(est[name] - value) <= 1.959964 * se[name]) >= 6, name


#: A neuron reset to its resting drive (reset 20 mV = offset, threshold 22 mV) with a 5 ms refractory
#: period: after a spike its potential is where it was, so the dead time is the only trace a spike leaves;
#: width and scale enter only as their ratio, so the fits free `rate` and `scale`.
DEAD_TIME = (dict(tau_m=10.0, threshold=22.0, reset=20.0, refractory=5.0), (40.0, 2.0), 20.0)


def _dead_time_pvalues(n, t_end, n_sets, seed0):
    """Time-rescaling p-values of the true model at the truth, refitted, and of the model without refractoriness."""
    from popdens.fitting.psth import _Binned
    from popdens.fitting.rescaling import ks_uniform

    nrn, hz, offset = DEAD_TIME
    pop = popdens.Population(popdens.LIF(**nrn), popdens.EscapeNoise(hazard.Exponential(*hz)))
    wrong = popdens.Population(popdens.LIF(**{**nrn, "refractory": 0.0}), pop.noise)
    d = drive.Sum((drive.Constant(offset), drive.Sine(0.0, 3.0, 3.0), drive.Sine(0.0, 2.0, 11.0)))
    p_truth, p_refit, p_wrong = [], [], []
    for rep in range(n_sets):
        mc = popdens.montecarlo(pop, d, t_end=t_end, n=n, seed=seed0 + rep, record_spikes=True)
        sp = SpikeTrains([mc.spike_times[mc.spike_ids == i] for i in range(n)], duration=t_end)
        for model, out in ((pop, p_refit), (wrong, p_wrong)):
            fit = popdens.fit_psth(model, sp, STIM, ["rate", "scale"], scale=3.0, offset=offset, predict=False,
                                   seed=rep)
            out.append(fit.goodness["p_value"])
        data = _Binned(sp, STIM, 0.1)
        data.loglik(pop, {"scale": 3.0, "offset": offset}, record=True,
                    uniforms=np.random.default_rng(rep).uniform(size=data.bins.size))
        p_truth.append(ks_uniform(data.rescaled)["p_value"])
    return np.array(p_truth), np.array(p_refit), np.array(p_wrong)


@pytest.mark.slow
def test_time_rescaling_power_against_a_model_fitted_without_refractoriness():
    # 100 data sets of 20 neurons x 2 s (~700 intervals each) from the twin of the dead-time neuron above:
    # the true model's time-rescaling p-values at the true parameters (discrete-time correction; Brown et
    # al. 2002, Haslinger et al. 2010) are uniform (KS test on them, p > 0.01); refitted, it is rejected at
    # 5 % in at most 5 % + 3 SE of the data sets (a KS test with parameters fitted to the same data is
    # conservative: Lilliefors 1967); the same neuron fitted without its refractory period (nothing else
    # can make up for it here) is rejected at 5 % in >= 90 % of the data sets
    p_truth, p_refit, p_wrong = _dead_time_pvalues(20, 2000.0, 100, 77000)
    power = np.mean(p_wrong < 0.05)
    uniform_p = kstest(p_truth, "uniform").pvalue
    print(f"dead-time neuron: KS uniformity of true-model p-values p = {uniform_p:.3f}; refitted true model "
          f"rejected in {np.mean(p_refit < 0.05):.2f}; power against the model fitted without refractoriness "
          f"{power:.2f}; median p-value of that model {np.median(p_wrong):.2g}", flush=True)
    assert uniform_p > 0.01
    assert np.mean(p_refit < 0.05) <= 0.05 + 3 * np.sqrt(0.05 * 0.95 / 100)  # binomial SE
    assert power >= 0.9


@pytest.mark.slow
def test_time_rescaling_power_against_a_model_fitted_without_adaptation():
    # 100 data sets from the adapting twin (escape LIF with an adaptation current of 3 mV per spike,
    # 100 ms; 30 neurons x 3 s, ~1550 spikes each): the true model's KS p-values (time rescaling with
    # the discrete-time correction; Brown et al. 2002, Haslinger et al. 2010) are uniform (KS test on
    # them, p > 0.01), and the same neuron fitted without adaptation is rejected at 5 % in >= 90 %.
    # (A model fitted without its refractory period is no such test here: for escape set 0 the
    # fitted rate, width and scale make up for it and the test rejected it in 1 of 100 data sets,
    # as the hazard just after the reset is small; see DEVELOPERS.md.)
    from popdens.fitting.psth import _Binned
    from popdens.fitting.rescaling import ks_uniform

    cell = popdens.LIF(tau_m=10.0, threshold=20.0, reset=14.0, refractory=3.0,
                       adaptation=[popdens.Adaptation(tau=100.0, jump=3.0)])
    pop = popdens.Population(cell, popdens.EscapeNoise(hazard.Exponential(rate=20.0, width=2.0)))
    plain = popdens.Population(popdens.LIF(tau_m=10.0, threshold=20.0, reset=14.0, refractory=3.0), pop.noise)
    d = drive.Sum((drive.Constant(25.0), drive.Sine(0.0, 3.0, 3.0), drive.Sine(0.0, 2.0, 11.0)))
    p_true, p_wrong = [], []
    for rep in range(100):
        mc = popdens.montecarlo(pop, d, t_end=3000.0, n=30, seed=88000 + rep, record_spikes=True)
        sp = SpikeTrains([mc.spike_times[mc.spike_ids == i] for i in range(30)], duration=3000.0)
        fit_w = popdens.fit_psth(plain, sp, STIM, ["rate", "width", "scale"], scale=3.0, offset=25.0,
                                 predict=False, seed=rep)
        p_wrong.append(fit_w.goodness["p_value"])
        data = _Binned(sp, STIM, 0.1, k_count=5000)  # the default history, 5 x 100 ms
        data.loglik(pop, {"scale": 3.0, "offset": 25.0}, record=True,
                    uniforms=np.random.default_rng(rep).uniform(size=data.bins.size))
        p_true.append(ks_uniform(data.rescaled)["p_value"])
    power = np.mean(np.array(p_wrong) < 0.05)
    uniform_p = kstest(p_true, "uniform").pvalue
    print(f"KS uniformity of true-model p-values: p = {uniform_p:.3f}; power against the model fitted without "
          f"adaptation {power:.2f}; median p-value of that model {np.median(p_wrong):.2g}", flush=True)
    assert uniform_p > 0.01
    assert power >= 0.9
