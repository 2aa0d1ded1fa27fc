"""The agreement statistics can fail: they flag a wrong prediction and pass a right one.

References outside the code under test: scipy's Pearson chi-square (``scipy.stats.power_divergence``),
the density solver (an independent computation of the same model) as the right prediction, and
for calibration the uniform distribution of p-values under the null hypothesis.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from scipy import stats

import popdens
from popdens import drive, hazard
from popdens.twins.agreement import _pooled_chi2, agreement

POP = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0), popdens.EscapeNoise(hazard.Exponential(20.0, 2.0)))
SINE = drive.Sine(mean=16.0, amplitude=2.0, frequency=10.0)   # mV, Hz: about 3 Hz modulated by about 2 Hz


def _scaled_modulation(res, factor):
    """The same prediction with its modulation about the mean scaled by ``factor`` (a wrong prediction)."""
    r = res.rate.copy()
    m = r[1:].mean()
    r[1:] = m + factor * (r[1:] - m)
    return dataclasses.replace(res, rate=r)


@pytest.fixture(scope="module")
def runs():
    pred = popdens.simulate(POP, SINE, 600.0, 0.1, record_interval=1.0, progress=False)
    twin = popdens.montecarlo(POP, SINE, 600.0, 10_000, dt=0.1, seed=3, record_interval=1.0, progress=False)
    return pred, twin


def test_right_prediction_agrees_and_ten_percent_wrong_modulation_is_flagged(runs):
    pred, twin = runs
    right = agreement(pred, twin, drive=SINE)
    assert right.agrees, right.verdict
    m = right.modulation
    assert m.amplitude_ci_hz[0] <= m.predicted_amplitude_hz <= m.amplitude_ci_hz[1]
    # amplitude standard error ~ sqrt(2 r / (N T)) = sqrt(2 * 3 / (1e4 * 0.5 s)) ~ 0.035 Hz (Poisson;
    # common practice), so 10 % of ~2 Hz is ~6 SE: detectable at level 0.01
    wrong = agreement(_scaled_modulation(pred, 1.10), twin, drive=SINE)
    assert not wrong.agrees, wrong.verdict
    assert wrong.modulation.p_value < 0.005
    assert "DISAGREES" in wrong.verdict
    # (not exactly 1.1: the fit's weights follow the predicted rate)
    assert wrong.modulation.predicted_amplitude_hz == pytest.approx(1.10 * m.predicted_amplitude_hz, rel=0.02)


def test_a_rate_five_percent_too_high_fails_the_mean_rate_test(runs):
    pred, twin = runs
    off = agreement(dataclasses.replace(pred, rate=pred.rate * 1.05), twin, drive=SINE)
    # over 600 bins of ~30 expected spikes the excess is 0.05 * sqrt(30 * 600) ~ 6.7 Poisson SE in total
    # (the blocked t-test, 19 degrees of freedom, gave p from 8e-7 to 6e-4 over four seeds)
    assert off.mean_p_value < 0.0033 and not off.agrees
    assert off.rate_excess == pytest.approx(1 / 1.05 - 1 + agreement(pred, twin).rate_excess / 1.05, rel=1e-9)
    right = agreement(pred, twin)
    assert right.mean_p_value > 0.01 and right.p_value > 0.01


def test_chi_square_flags_a_prediction_with_the_wrong_shape(runs):
    """A prediction delayed by 15 ms (a 54 degree phase error at 10 Hz) keeps its mean but not its shape."""
    pred, twin = runs
    late = pred.rate.copy()
    late[16:] = pred.rate[1:-15]
    assert agreement(dataclasses.replace(pred, rate=late), twin).p_value < 1e-6


def test_pooled_chi_square_equals_scipy_pearson_when_no_pooling_is_needed(rng):
    expected = rng.uniform(6.0, 40.0, 200)
    observed = rng.poisson(expected).astype(float)
    observed *= expected.sum() / observed.sum()  # scipy requires equal totals
    chi2, dof = _pooled_chi2(observed, expected)
    ref = stats.power_divergence(observed, expected, lambda_="pearson")
    assert dof == 200
    assert chi2 == pytest.approx(ref.statistic, rel=1e-12)


def test_sparse_bins_are_pooled_to_five_expected_spikes():
    expected = np.full(100, 0.5)          # ten bins make one group of 5 expected spikes
    observed = expected.copy()
    observed[:10] = 1.0                   # first group: 10 observed for 5 expected -> (10-5)^2/5 = 5
    chi2, dof = _pooled_chi2(observed, expected)
    assert dof == 10
    assert chi2 == pytest.approx(5.0)


def test_misuse_is_a_clear_error(runs):
    pred, twin = runs
    with pytest.raises(ValueError, match="`alpha`"):
        agreement(pred, twin, alpha=1.5)
    with pytest.raises(ValueError, match="`twin`"):
        agreement(pred, pred)
    other = popdens.montecarlo(POP, SINE, 600.0, 100, dt=0.1, seed=1, record_interval=2.0, progress=False)
    with pytest.raises(ValueError, match="output times"):
        agreement(pred, other)


@pytest.mark.slow
def test_p_values_are_calibrated_under_the_null_hypothesis():
    """Measured (DEVELOPERS.md): share of p < 0.05 and p < 0.01 over 200 independent twins."""
    pred = popdens.simulate(POP, SINE, 500.0, 0.1, record_interval=1.0, progress=False)
    p_chi, p_mean, p_mod = [], [], []
    for seed in range(200):
        twin = popdens.montecarlo(POP, SINE, 500.0, 2000, dt=0.1, seed=seed, record_interval=1.0, progress=False)
        a = agreement(pred, twin, drive=SINE)
        p_chi.append(a.p_value)
        p_mean.append(a.mean_p_value)
        p_mod.append(a.modulation.p_value)
    for p in (np.array(p_chi), np.array(p_mean), np.array(p_mod)):
        print(f"share p<0.05: {np.mean(p < 0.05):.3f}, p<0.01: {np.mean(p < 0.01):.3f}, "
              f"KS vs uniform p = {stats.kstest(p, 'uniform').pvalue:.3g}")
        # binomial(200, 0.05): mean 10, sd 3.1 -> accept 2 to 20 rejections (about 3 sd)
        assert 2 <= np.sum(p < 0.05) <= 20
