"""Finite-size (mesoscopic) integration: the contract of ``simulate(..., n=...)`` and quick checks.

The long statistical comparisons with the Monte Carlo twin are in ``test_mesoscopic_twin.py`` (slow).
"""

from __future__ import annotations

import numpy as np
import pytest

import popdens
from popdens import drive, hazard
from popdens.solvers.refractory import RefractoryDensitySolver


def lif_pop(tau_ref=2.0):
    return popdens.Population(popdens.LIF(tau_m=10.0, threshold=20.0, reset=0.0, refractory=tau_ref),
                              popdens.EscapeNoise(hazard.Exponential(rate=20.0, width=2.0)))


STEP = drive.Step(t=20.0, before=15.0, after=22.0)


def test_without_n_the_front_end_is_the_deterministic_solver_stepped_by_hand():
    """n=None runs today's solver: the same numbers as advancing it directly, in two calls split at the
    drive's jump (t = 20 ms: the first ends at its left limit, the second starts after it)."""
    pop = lif_pop()
    res = popdens.simulate(pop, STEP, t_end=60.0, dt=0.1, n=None)
    sol = RefractoryDensitySolver(pop, 0.1)
    sol.initialize(15.0)
    before, _, _ = sol.advance(np.full(201, 15.0))
    after, _, _ = sol.advance(np.full(401, 22.0))
    rate = np.concatenate([before, after])
    assert res.method == "refractory-density" and res.n_neurons is None and res.trial_rates is None
    np.testing.assert_array_equal(res.rate[1:], rate)


@pytest.mark.parametrize("tau_ref", [2.0, 0.0])
def test_huge_population_follows_the_deterministic_solver(tau_ref):
    """N = 1e9: the realised activity is the expected one up to binomial noise (without a refractory
    period a neuron may fire twice within a step: those spikes count as in the infinite solver).

    Standard error of a 1 ms bin: sqrt(r / (N b)) (Poisson count of N independent neurons; common
    practice); every bin within 5 SE of the infinite-population solution.
    """
    pop = lif_pop(tau_ref)
    det = popdens.simulate(pop, STEP, t_end=60.0, dt=0.1, record_interval=1.0)
    fin = popdens.simulate(pop, STEP, t_end=60.0, dt=0.1, record_interval=1.0, n=10**9, seed=3, burn_in=20.0)
    assert fin.success and fin.method == "mesoscopic" and fin.n_neurons == 10**9
    se = np.sqrt(np.maximum(det.rate[1:], 1e-3) / (1e9 * 1e-3))
    assert np.all(np.abs(fin.rate[1:] - det.rate[1:]) <= 5.0 * se)


def test_counts_are_whole_spikes_and_runs_are_reproducible():
    pop = lif_pop()
    a = popdens.simulate(pop, STEP, t_end=40.0, n=50, seed=11, burn_in=30.0)
    b = popdens.simulate(pop, STEP, t_end=40.0, n=50, seed=11, burn_in=30.0)
    c = popdens.simulate(pop, STEP, t_end=40.0, n=50, seed=12, burn_in=30.0)
    np.testing.assert_array_equal(a.rate, b.rate)
    assert not np.array_equal(a.rate, c.rate)
    counts = a.rate[1:] * 50 * 0.1e-3  # spikes per step
    np.testing.assert_allclose(counts, np.round(counts), atol=1e-9)
    assert np.all(counts >= 0) and np.all(counts <= 50)
    # the corrected age structure is a probability distribution at every record
    assert np.all((a.refractory_fraction >= -1e-9) & (a.refractory_fraction <= 1 + 1e-9))


def test_trials_hold_independent_realisations_the_first_being_rate():
    pop = lif_pop()
    res = popdens.simulate(pop, STEP, t_end=40.0, n=50, seed=5, trials=4, record_interval=1.0, burn_in=30.0)
    one = popdens.simulate(pop, STEP, t_end=40.0, n=50, seed=5, record_interval=1.0, burn_in=30.0)
    assert res.trial_rates.shape == (4, 41)
    np.testing.assert_array_equal(res.trial_rates[0], res.rate)
    np.testing.assert_array_equal(one.rate, res.rate)
    assert len({tuple(r) for r in res.trial_rates[:, 1:]}) == 4
    assert res.trial_mean().shape == (41,) and np.all(res.trial_variance()[1:] >= 0)
    assert res.diagnostics["trials"] == 4
    with pytest.raises(ValueError, match="one realisation"):
        one.trial_mean()


def test_synchronous_start_fires_everyone_then_no_one_while_refractory():
    """All N neurons fire at t = 0 (known exactly): none can fire during the 2 ms refractory period."""
    pop = lif_pop(tau_ref=2.0)
    res = popdens.simulate(pop, 20.0, t_end=10.0, dt=0.1, n=200, seed=1, initial="synchronous")
    assert res.refractory_fraction[0] == pytest.approx(1.0)
    assert np.all(res.rate[1:20] == 0.0)  # steps ending before 1.95 ms (newborns enter at age dt/2)


def test_stationary_variance_of_1ms_bins_matches_the_renewal_closed_form():
    """Bins no wider than the refractory period hold at most one spike per neuron, so the count of
    one neuron per bin is Bernoulli(r0 b) and Var[A_b] = (r0/b - r0^2) / N exactly (renewal theory,
    independent neurons).  Samples every 25 ms (past the correlation time, correlation ~ r0 b); the
    standard error of the sample variance uses the fourth moment (common practice)."""
    pop = lif_pop()
    mu, n, b = 24.0, 100, 1e-3
    r0 = float(popdens.gain(pop, mu))
    # dt = 0.5 ms: its discretisation error in the rate (~3e-3) is far below the 4 SE tolerance (~18 %)
    res = popdens.simulate(pop, mu, t_end=20000.0, dt=0.5, n=n, seed=8, record_interval=1.0)
    x = res.rate[1::25]
    var = x.var(ddof=1)
    c = x - x.mean()
    se = np.sqrt((np.mean(c ** 4) - var ** 2) / x.size)
    expected = (r0 / b - r0 ** 2) / n
    assert abs(var - expected) <= 4.0 * se
    assert abs(x.mean() - r0) <= 4.0 * np.sqrt(expected / x.size)


@pytest.mark.parametrize("kwargs,match", [
    (dict(seed=1), "`seed`"),
    (dict(trials=3), "`trials`"),
    (dict(n=0), "`n`"),
    (dict(n=10, trials=0), "`trials`"),
    (dict(n=10, counts="gauss"), "`counts`"),
    (dict(n=10, method="fokker-planck"), "`method`"),
    (dict(n=10, burn_in=-1.0), "`burn_in`"),
    (dict(n=10, u_min=-5.0), "unknown option"),
])
def test_misuse_names_the_parameter(kwargs, match):
    with pytest.raises(ValueError, match=match):
        popdens.simulate(lif_pop(), 15.0, t_end=5.0, **kwargs)


def test_adapting_neurons_are_refused_naming_the_parameter():
    nrn = popdens.LIF(10.0, 20.0, 0.0, 2.0, adaptation=[popdens.Adaptation(tau=100.0, jump=1.0)])
    pop = popdens.Population(nrn, popdens.EscapeNoise(hazard.Exponential(20.0, 2.0)))
    with pytest.raises(ValueError, match="`adaptation`"):
        popdens.simulate(pop, 15.0, t_end=5.0, n=100)


def test_white_noise_populations_have_no_finite_size_integrator():
    pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(4.0))
    with pytest.raises(ValueError, match="`n`.*escape noise only"):
        popdens.simulate(pop, 15.0, t_end=5.0, n=100)


def test_spectrum_of_a_result_has_the_stated_convention():
    """Independent Poisson-like counts: a white spectrum at the level of the per-bin variance times
    the bin width (the definition S = <|X|^2>/T; Percival & Walden 1993)."""
    rng = np.random.default_rng(1)
    b = 1.0  # ms
    rates = rng.poisson(2.0, size=(3, 8001)) / (b * 1e-3)
    res = popdens.Result(t=np.arange(8001) * b, rate=rates[0], mean_u=np.zeros(8001),
                         refractory_fraction=np.zeros(8001), drive=np.zeros(8001), method="test",
                         trial_rates=rates)
    est = res.spectrum(segment=500.0)
    assert est.segments == 48 and est.freqs[0] == pytest.approx(2.0) and est.freqs[-1] == pytest.approx(500.0)
    level = 2.0 / (b * 1e-3) ** 2 * (b * 1e-3)  # Var[rate] * b  (Hz)
    # mean over 250 frequencies of 48-segment averages: SE = level / sqrt(48 * 250)
    assert abs(est.power.mean() - level) <= 4.0 * level / np.sqrt(48 * 250)
