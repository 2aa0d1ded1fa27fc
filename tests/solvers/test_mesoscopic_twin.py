"""Finite-size integration against the Monte Carlo twin of the same N (slow).

Every comparison states its standard error:

* a trial mean: sqrt(var1/M1 + var2/M2) from the two trial variances;
* a trial variance: sqrt((m4 - s^4 (M-3)/(M-1)) / M) per estimate (fourth central moment m4;
  common practice), combined in quadrature;
* an averaged periodogram of M segments: S / sqrt(M) (periodogram ordinates of a stationary process
  are exponentially distributed; Percival & Walden 1993, ch. 6), with S the prediction or the mean
  of the two estimates.

The twin's trials are disjoint groups of N neurons of one large Monte Carlo run (the neurons are
independent, so each group is an independent population of N).
"""

from __future__ import annotations

import numpy as np
import pytest

import popdens
from popdens import drive, hazard

pytestmark = pytest.mark.slow

B = 1.0  # ms, bins of every comparison


def lif_pop():
    return popdens.Population(popdens.LIF(tau_m=10.0, threshold=20.0, reset=0.0, refractory=2.0),
                              popdens.EscapeNoise(hazard.Exponential(rate=20.0, width=2.0)))


def twin_trials(pop, d, t_end, n, trials, seed, burn_in):
    """Rates (Hz, shape (trials, bins)) of ``trials`` disjoint groups of ``n`` twin neurons."""
    mc = popdens.montecarlo(pop, d, t_end, n=n * trials, seed=seed, record_interval=B, burn_in=burn_in,
                            record_spikes=True)
    assert mc.success
    nb = int(round(t_end / B))
    cnt = np.zeros((trials, nb))
    np.add.at(cnt, (mc.spike_ids // n, np.minimum((mc.spike_times // B).astype(int), nb - 1)), 1.0)
    return cnt / (n * B * 1e-3)


def se_of_variance(x):
    m = x.shape[0]
    c = x - x.mean(axis=0)
    s2 = x.var(axis=0, ddof=1)
    return np.sqrt(np.maximum(np.mean(c ** 4, axis=0) - s2 ** 2 * (m - 3) / (m - 1), 0.0) / m)


def within(a, b, se, n_se=4.0):
    return float(np.mean(np.abs(a - b) <= n_se * se))


@pytest.mark.parametrize("n", [100, 1000])
def test_stationary_variance_and_spectrum_agree_with_twin_and_renewal_theory(n):
    """Uncoupled population at constant drive: the variance of the activity in 1 ms bins equals
    the Bernoulli closed form (r0/b - r0^2)/N (bins shorter than the refractory period) and the
    spectrum of the 1 ms activity from 1 to 500 Hz the folded renewal spectrum S(f)/N
    (``population_rate_spectrum(..., bin_width=1)``); mesoscopic run and twin agree with both and
    with each other within 4 SE in >= 99 % of the frequencies."""
    pop, mu, t_end = lif_pop(), 24.0, 40_000.0
    me = popdens.simulate(pop, mu, t_end, n=n, seed=21, record_interval=B)
    mc = popdens.montecarlo(pop, mu, t_end, n=n, seed=22, record_interval=B)
    r0 = float(popdens.gain(pop, mu))
    var_ref = (r0 / 1e-3 - r0 ** 2) / n
    for res in (me, mc):
        x = res.rate[1::25]  # samples 25 ms apart: correlation ~ r0 b = 0.03
        c = x - x.mean()
        se = np.sqrt((np.mean(c ** 4) - x.var(ddof=1) ** 2) / x.size)
        print(f"N = {n} {res.method}: variance of 1 ms bins {x.var(ddof=1):.2f} Hz^2 vs closed form "
              f"{var_ref:.2f} (SE {se:.2f})")
        assert abs(x.var(ddof=1) - var_ref) <= 4.0 * se, res.method
    sm, sc = me.spectrum(1000.0), mc.spectrum(1000.0)
    ref = popdens.population_rate_spectrum(pop, mu, sm.freqs, n, bin_width=B)
    m = sm.segments
    pooled = 0.5 * (sm.power + sc.power) * np.sqrt(2.0 / m)
    fractions = (within(sm.power, ref, ref / np.sqrt(m)), within(sc.power, ref, ref / np.sqrt(m)),
                 within(sm.power, sc.power, pooled))
    print(f"N = {n}: spectrum 1-500 Hz ({m} segments, SE {100 / np.sqrt(m):.0f} %) within 4 SE: mesoscopic vs "
          f"renewal {fractions[0]:.3f}, twin vs renewal {fractions[1]:.3f}, mesoscopic vs twin {fractions[2]:.3f}; "
          f"ratio of the averaged spectra {sm.power.mean() / sc.power.mean():.3f}")
    assert min(fractions) >= 0.99


@pytest.mark.parametrize("counts", ["binomial", "poisson"])
@pytest.mark.parametrize("d", [drive.Step(t=50.0, before=15.0, after=22.0),
                               drive.Pulse(t=50.0, duration=10.0, base=16.0, amplitude=10.0)], ids=["step", "pulse"])
def test_step_and_pulse_trial_mean_and_variance_agree_with_twin(d, counts):
    """240 trials of N = 100 neurons: trial mean and trial variance in every 1 ms bin within 4 SE of
    the twin's in >= 99 % of the 200 bins, for both spike-count distributions; the trial mean also
    within 4 SE of the infinite population (independent neurons: the exact mean is the deterministic
    solution for every N)."""
    pop, n, m, t_end = lif_pop(), 100, 240, 200.0
    me = popdens.simulate(pop, d, t_end, n=n, trials=m, seed=31, record_interval=B, burn_in=150.0, counts=counts)
    x = me.trial_rates[:, 1:]
    y = twin_trials(pop, d, t_end, n, m, seed=32, burn_in=300.0)
    se_mean = np.sqrt(x.var(axis=0, ddof=1) / m + y.var(axis=0, ddof=1) / m)
    se_var = np.hypot(se_of_variance(x), se_of_variance(y))
    det = popdens.simulate(pop, d, t_end, record_interval=B).rate[1:]
    fractions = (within(x.mean(axis=0), y.mean(axis=0), se_mean),
                 within(x.var(axis=0, ddof=1), y.var(axis=0, ddof=1), se_var),
                 within(x.mean(axis=0), det, np.sqrt(np.maximum(x.var(axis=0, ddof=1), 1.0) / m)))
    ratio = x.var(axis=0, ddof=1).sum() / y.var(axis=0, ddof=1).sum()
    print(f"{counts}: bins within 4 SE: trial mean vs twin {fractions[0]:.3f}, trial variance vs twin "
          f"{fractions[1]:.3f}, trial mean vs infinite population {fractions[2]:.3f}; summed variance "
          f"mesoscopic / twin {ratio:.3f}")
    assert min(fractions) >= 0.99


def test_trial_mean_converges_to_the_infinite_population():
    """Step response, 1 ms bins pooled over 20 ms windows: the RMS distance between trial mean and
    the deterministic solution shrinks like its standard error, 1/sqrt(N M) (no bias is visible for
    independent neurons, whose exact mean is the deterministic solution at every N)."""
    pop, d, t_end, m = lif_pop(), drive.Step(t=50.0, before=15.0, after=22.0), 200.0, 100
    det = popdens.simulate(pop, d, t_end, record_interval=20.0).rate[1:]
    sizes, rms = (10, 100, 1000, 10_000), []
    for n in sizes:
        me = popdens.simulate(pop, d, t_end, n=n, trials=m, seed=n, record_interval=20.0, burn_in=100.0)
        x = me.trial_rates[:, 1:]
        z = (x.mean(axis=0) - det) / np.sqrt(x.var(axis=0, ddof=1) / m)
        rms.append(float(np.sqrt(np.mean((x.mean(axis=0) - det) ** 2))))
        print(f"N = {n}: RMS(trial mean - infinite) {rms[-1]:.4f} Hz, chi-square {np.sum(z ** 2):.1f} (10 dof)")
        # chi-square with 10 degrees of freedom: P(chi2 > 35) < 2e-4
        assert np.sum(z ** 2) < 35.0, (n, z)
    slope = np.polyfit(np.log(sizes), np.log(rms), 1)[0]
    print(f"log-log slope of the RMS distance against N: {slope:.2f} (-0.5: sampling error only, no bias)")


def test_binomial_and_poisson_counts_in_a_synchronous_volley():
    """Where the two count models and the twin part: all N = 100 neurons fire at t = 0 under a strong
    drive with a sharp escape function (width 0.5 mV), so that the whole population fires again in a
    volley at ~10 ms with up to 13 % of it in one 0.1 ms bin; 400 trials, counts per 0.1 ms bin, both
    integrated at h = 0.025 ms.

    * Trial means: within 4 SE of the twin's in >= 99 % of the bins, for both models (the expected
      fraction f of a step is exact here: one known cohort).
    * Variances while the volley rises (f below 5 % per bin, up to its first tenth of the
      population): within 4 SE of the twin's in >= 95 % of the bins.  Per step, Binomial and Poisson
      differ by the factor 1 / (1 - f) (Poisson variance N f against N f (1 - f)), below 2 % there.
    * Past the peak both exceed the twin's variance (printed: 1.13 binomial, 1.18 Poisson at h =
      0.025 ms; 1.65 binomial with both at h = 0.1 ms): the count of the N neurons is drawn as
      Binomial(N, f) while only the R neurons still waiting can fire, each with probability
      p = N f / R, whose count has variance R p (1 - p) < N f (1 - f) -- the approximation of the
      mesoscopic equations that matters when the per-step firing probability of the eligible
      neurons is not small (Schwalger et al. 2017 assume small steps)."""
    pop = popdens.Population(popdens.LIF(tau_m=10.0, threshold=20.0, reset=0.0, refractory=2.0),
                             popdens.EscapeNoise(hazard.Exponential(rate=20.0, width=0.5)))
    mu, n, m, t_end, dt = 40.0, 100, 400, 15.0, 0.1
    # both at h = dt / 4 (at dt = 0.1 ms the volley's time-step error is 25 % of its tail, the same in
    # both), spikes counted per 0.1 ms bin (at most one per neuron: refractory 2 ms)
    h = dt / 4
    mc = popdens.montecarlo(pop, mu, t_end, n=n * m, dt=h, seed=2, initial="synchronous", record_spikes=True)
    nb = int(round(t_end / dt))
    y = np.zeros((m, nb))
    np.add.at(y, (mc.spike_ids // n, np.minimum((mc.spike_times / dt - 1e-9).astype(int), nb - 1)), 1.0)
    f = popdens.simulate(pop, mu, t_end, dt=h, initial="synchronous", error_control="off",
                         record_interval=dt).rate[1:] * dt * 1e-3
    peak = int(np.argmax(f))
    rising = np.flatnonzero((np.arange(nb) < peak) & (f < 0.05) & (np.cumsum(f) < 0.1) & (y.mean(axis=0) > 0.2))
    tail = np.arange(peak, nb)
    for counts in ("binomial", "poisson"):
        x = popdens.simulate(pop, mu, t_end, dt=h, n=n, trials=m, seed=1, initial="synchronous", counts=counts,
                             record_interval=dt).trial_rates[:, 1:] * n * dt * 1e-3  # spikes per bin
        se_mean = np.sqrt((x.var(axis=0, ddof=1) + y.var(axis=0, ddof=1)) / m)
        frac_mean = within(x.mean(axis=0), y.mean(axis=0), np.maximum(se_mean, 1e-12))
        se_var = np.hypot(se_of_variance(x), se_of_variance(y))
        frac_var = within(x.var(axis=0, ddof=1)[rising], y.var(axis=0, ddof=1)[rising], se_var[rising])
        excess = x.var(axis=0, ddof=1)[tail].sum() / y.var(axis=0, ddof=1)[tail].sum()
        print(f"{counts}: steps with the mean within 4 SE {frac_mean:.3f}; rising volley ({rising.size} steps) "
              f"variance within 4 SE {frac_var:.3f}; past the peak (f = {f[peak]:.3f}) variance / twin's "
              f"{excess:.2f}")
        assert frac_mean >= 0.99, counts
        assert rising.size >= 5 and frac_var >= 0.95, counts
