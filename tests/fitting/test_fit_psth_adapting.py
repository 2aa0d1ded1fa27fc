"""The spike-train likelihood and fit of adapting escape-noise neurons (adaptation history in the intensity)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad

import popdens
from popdens import SpikeTrains, drive, hazard
from popdens.fitting import psth_loglik

#: The stimulus of the fits: two sines (stimulus units), drive = scale * stimulus + offset (mV).
STIM = drive.Sine(mean=0.0, amplitude=1.0, frequency=3.0) + drive.Sine(mean=0.0, amplitude=2.0 / 3.0, frequency=11.0)
#: Spike trains (ms) at the midpoints of the steps of both dt below (x.005 ms).
TRAINS = [[3.005, 40.005, 51.305, 140.005, 260.505], [10.005, 95.405], [20.005, 33.505, 44.005, 210.005]]


def _continuous_loglik(trains, duration, hazard_at):
    """Point-process log-likelihood sum log lambda(t_i) - int lambda (Brown et al. 2002, eq. 2.1), each
    trial from its first spike, by scipy quadrature; ``hazard_at(s, earlier)`` is the hazard (Hz) at ``s``
    ms after the last spike given the times (ms, before it, relative to it) of the earlier spikes."""
    ll, n_terms = 0.0, 0
    for tr in trains:
        for j in range(len(tr)):
            earlier = [tr[j] - t for t in tr[:j]]
            end = tr[j + 1] - tr[j] if j + 1 < len(tr) else duration - tr[j]
            breaks = [p for p in (2.0,) if p < end]
            ll -= quad(lambda s: hazard_at(s, earlier), 0.0, end, points=breaks or None, limit=400)[0] * 1e-3
            if j + 1 < len(tr):
                ll += math.log(hazard_at(end, earlier) * 1e-3)
                n_terms += 1
    return ll, n_terms


@pytest.mark.parametrize("kind", ["threshold", "current"])
def test_adapting_loglik_converges_to_the_continuous_likelihood(kind):
    # Exact intensity of an adapting LIF with exponential escape (rate 20 Hz, width 2 mV) at a constant
    # drive of 19 mV, reset 10 mV, refractory 2 ms, every earlier spike adding its kernel J exp(-t/tau):
    # a moving threshold (Naud & Gerstner 2012) or an adaptation current w subtracted from the drive, for
    # which the LIF potential after the refractory period is closed form,
    # u(s) = mu + A e^{-s/tau_w} + (reset - mu - A) e^{-s/tau_m}, A = -W tau_w / (tau_w - tau_m)
    # (variation of constants; W the current when the refractory period ends).
    # The discrete-time likelihood minus n log(dt) converges to it at second order (spikes at midpoints).
    mu, tau_m, theta, width, r0, reset, ref, tau_a, jump = 19.0, 10.0, 20.0, 2.0, 20.0, 10.0, 2.0, 50.0, 1.5
    term = (popdens.MovingThreshold(tau=tau_a, jump=jump) if kind == "threshold"
            else popdens.Adaptation(tau=tau_a, jump=jump))
    cell = popdens.LIF(tau_m=tau_m, threshold=theta, reset=reset, refractory=ref, adaptation=[term])
    pop = popdens.Population(cell, popdens.EscapeNoise(hazard.Exponential(rate=r0, width=width)))

    def hazard_at(s, earlier):
        if s < ref:
            return 0.0
        kernel = jump * sum(math.exp(-(s + e) / tau_a) for e in [0.0] + earlier)
        if kind == "threshold":
            u, shift = mu + (reset - mu) * math.exp(-(s - ref) / tau_m), kernel
        else:
            w_end = jump * sum(math.exp(-(ref + e) / tau_a) for e in [0.0] + earlier)
            a = -w_end * tau_a / (tau_a - tau_m)
            x = s - ref
            u, shift = mu + a * math.exp(-x / tau_a) + (reset - mu - a) * math.exp(-x / tau_m), 0.0
        return r0 * math.exp((u - theta - shift) / width)

    ll_c, n_terms = _continuous_loglik(TRAINS, 300.0, hazard_at)
    sp = SpikeTrains(TRAINS, duration=300.0)
    errors = [abs(psth_loglik(pop, sp, 0.0, dt=dt, offset=mu, history=0.0) - n_terms * math.log(dt) - ll_c)
              for dt in (0.01, 0.002)]
    # second order: the error falls ~25x from dt = 0.01 to 0.002 ms
    assert errors[1] < 1e-5 and errors[1] < errors[0] / 10.0, errors
    # and the adaptation matters: the likelihood without it differs by far more
    plain = popdens.Population(popdens.LIF(tau_m=tau_m, threshold=theta, reset=reset, refractory=ref), pop.noise)
    assert abs(psth_loglik(plain, sp, 0.0, dt=0.01, offset=mu) - n_terms * math.log(0.01) - ll_c) > 100 * errors[0]


def _adapting_pop(rate=20.0, width=2.0):
    cell = popdens.LIF(tau_m=10.0, threshold=20.0, reset=14.0, refractory=3.0,
                       adaptation=[popdens.Adaptation(tau=100.0, jump=3.0)])
    return popdens.Population(cell, popdens.EscapeNoise(hazard.Exponential(rate=rate, width=width)))


def _twin_trains(pop, n, t_end, seed, scale=3.0, offset=25.0):
    d = drive.Sum((drive.Constant(offset), drive.Sine(0.0, scale, 3.0), drive.Sine(0.0, scale * 2.0 / 3.0, 11.0)))
    mc = popdens.montecarlo(pop, d, t_end=t_end, n=n, seed=seed, record_spikes=True)
    return SpikeTrains([mc.spike_times[mc.spike_ids == i] for i in range(n)], duration=t_end)


def test_adapting_fit_recovers_the_hazard_and_the_model_without_adaptation_fails_the_rescaling_test():
    # data from the adapting Monte Carlo twin (stationary start, so spikes before the recording left
    # adaptation that the default history of 5 x 100 ms lets decay); estimates within 3 SE of the truth,
    # the time-rescaling test (Brown et al. 2002) accepts the fitted adapting model and rejects the same
    # neuron fitted without adaptation (an adaptation current of 3 mV per spike, 100 ms)
    pop = _adapting_pop()
    sp = _twin_trains(pop, 30, 3000.0, seed=21)
    start = _adapting_pop(rate=30.0, width=1.5)
    fit = popdens.fit_psth(start, sp, STIM, ["rate", "width", "scale"], scale=2.5, offset=25.0, predict=False)
    for name, value in (("rate", 20.0), ("width", 2.0), ("scale", 3.0)):
        assert abs(fit.estimates[name] - value) < 3.0 * fit.se[name], (name, fit.estimates[name], fit.se[name])
    assert fit.goodness["p_value"] > 0.01
    assert "adaptation history" in fit.diagnostics["loglik"]
    plain_cell = popdens.LIF(tau_m=10.0, threshold=20.0, reset=14.0, refractory=3.0)
    plain = popdens.Population(plain_cell, start.noise)
    wrong = popdens.fit_psth(plain, sp, STIM, ["rate", "width", "scale"], scale=2.5, offset=25.0, predict=False)
    # measured p-values of the model without adaptation: 2e-5, 6e-5, 4e-5 for seeds 21-23 (fitted model: 0.99,
    # 0.60, 0.52); 30 neurons x 3 s, ~1550 spikes
    assert wrong.goodness["p_value"] < 1e-3, wrong.goodness["p_value"]


def _adaptation_recovery(n_sets, n=30, t_end=3000.0, seed0=300):
    """Estimates and SEs of rate, width, scale and the adaptation current's jump and tau over twin data sets."""
    pop = _adapting_pop()
    cell = popdens.LIF(tau_m=10.0, threshold=20.0, reset=14.0, refractory=3.0,
                       adaptation=[popdens.Adaptation(tau=150.0, jump=2.0)])
    start = popdens.Population(cell, popdens.EscapeNoise(hazard.Exponential(rate=30.0, width=1.5)))
    free = ["rate", "width", "scale", "adaptation[0].jump", "adaptation[0].tau"]
    est, se = [], []
    for k in range(n_sets):
        fit = popdens.fit_psth(start, _twin_trains(pop, n, t_end, seed=seed0 + k), STIM, free, scale=2.5,
                               offset=25.0, predict=False)
        est.append([fit.estimates[x] for x in free])
        se.append([fit.se[x] for x in free])
    truth = {"rate": 20.0, "width": 2.0, "scale": 3.0, "adaptation[0].jump": 3.0, "adaptation[0].tau": 100.0}
    return truth, np.array(est), np.array(se), fit


def test_adapting_fit_frees_the_jump_and_time_constant_of_the_adaptation():
    # the adaptation current's jump (3 mV) and time constant (100 ms) fitted with the hazard and the drive
    # scale from one data set of the adapting twin (30 neurons x 3 s): within 3 SE of the truth
    truth, est, se, fit = _adaptation_recovery(1)
    for i, (name, value) in enumerate(truth.items()):
        assert abs(est[0, i] - value) < 3.0 * se[0, i], (name, est[0, i], se[0, i])
    assert fit.units["adaptation[0].jump"] == "mV" and fit.units["adaptation[0].tau"] == "ms"
    term = fit.population.neuron.adaptation[0]
    assert isinstance(term, popdens.Adaptation)
    assert (term.jump, term.tau) == (fit.estimates["adaptation[0].jump"], fit.estimates["adaptation[0].tau"])


def test_adaptation_parameter_names_are_checked():
    pop = _adapting_pop()
    sp = SpikeTrains(TRAINS, duration=300.0)
    with pytest.raises(ValueError, match=r"adaptation\[1\]\.jump"):
        popdens.fit_psth(pop, sp, STIM, ["adaptation[1].jump"], offset=19.0, history=10.0)
    with pytest.raises(ValueError, match=r"start value must be > 0"):
        popdens.fit_psth(pop, sp, STIM, {"adaptation[0].jump": 0.0}, offset=19.0, history=10.0)


@pytest.mark.slow
def test_adaptation_parameters_recovered_without_bias_over_20_data_sets():
    # 20 data sets of the adapting twin (30 neurons x 3 s, ~1550 spikes each): the 95 % Wald intervals of
    # every free parameter cover the truth in >= 16 of 20 (P(<= 15 | binomial(20, 0.95)) = 0.3 %) and the
    # mean estimate lies within 3 standard errors of that mean (SE / sqrt(20)) of the truth (normal theory)
    n_sets = 20
    truth, est, se, _ = _adaptation_recovery(n_sets, seed0=40000)
    for i, (name, value) in enumerate(truth.items()):
        covered = int(np.sum(np.abs(est[:, i] - value) <= 1.959964 * se[:, i]))
        bias = est[:, i].mean() - value
        print(f"adaptation fit {name}: covered {covered}/{n_sets}, bias/SE {bias / se[:, i].mean():+.3f}, "
              f"SD / mean SE {est[:, i].std(ddof=1) / se[:, i].mean():.3f}", flush=True)
        assert covered >= 16, (name, covered)
        assert abs(bias) < 3.0 * se[:, i].mean() / np.sqrt(n_sets), (name, bias)


def test_history_errors():
    pop = _adapting_pop()
    plain = popdens.Population(popdens.LIF(tau_m=10.0, threshold=20.0, reset=14.0, refractory=3.0),
                               pop.noise)
    sp = SpikeTrains(TRAINS, duration=300.0)
    with pytest.raises(ValueError, match="`history`"):
        psth_loglik(pop, sp, 0.0, offset=19.0, history=300.0)
    with pytest.raises(ValueError, match="`history`"):
        psth_loglik(pop, sp, 0.0, offset=19.0, history=-1.0)
    with pytest.raises(ValueError, match="`history` is for adapting neurons"):
        psth_loglik(plain, sp, 0.0, offset=19.0, history=50.0)
    # the default history (5 x 100 ms) is longer than this recording
    with pytest.raises(ValueError, match="`history`"):
        psth_loglik(pop, sp, 0.0, offset=19.0)
