"""Spike-train (PSTH) likelihood and fit of escape-noise neurons under a known stimulus."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.stats import kstest

import popdens
from popdens import SpikeTrains, drive, hazard
from popdens.fitting import psth_loglik
from popdens.fitting.psth import _Binned
from popdens.fitting.rescaling import ks_uniform


def _pop(refractory=5.0, reset=14.0, rate=20.0, width=2.0):
    cell = popdens.LIF(tau_m=10.0, threshold=20.0, reset=reset, refractory=refractory)
    return popdens.Population(cell, popdens.EscapeNoise(hazard.Exponential(rate=rate, width=width)))


#: The stimulus of the fits: two sines (stimulus units), drive = scale * stimulus + offset (mV).
STIM = drive.Sine(mean=0.0, amplitude=1.0, frequency=3.0) + drive.Sine(mean=0.0, amplitude=2.0 / 3.0, frequency=11.0)


def _twin_trains(pop, n, t_end, seed, scale=3.0, offset=20.0):
    d = drive.Sum((drive.Constant(offset), drive.Sine(0.0, scale, 3.0), drive.Sine(0.0, scale * 2.0 / 3.0, 11.0)))
    mc = popdens.montecarlo(pop, d, t_end=t_end, n=n, seed=seed, record_spikes=True)
    return SpikeTrains([mc.spike_times[mc.spike_ids == i] for i in range(n)], duration=t_end)


def test_loglik_converges_to_the_continuous_point_process_likelihood():
    # Point-process log-likelihood sum log lambda(t_i) - int lambda dt (Brown et al. 2002, eq. 2.1),
    # computed here with scipy quadrature along the closed-form LIF trajectory after each spike;
    # the discrete-time likelihood at step dt equals it plus n log(dt) up to O(dt).
    pop = _pop(refractory=2.0, reset=10.0)
    mu, tau, theta, w, r0, ref = 19.0, 10.0, 20.0, 2.0, 20.0, 2.0
    trains = [[3.005, 40.005, 51.305, 140.005, 260.505], [10.005, 95.405], [20.005, 33.505, 210.005]]
    duration = 300.0

    def h(s):  # hazard (Hz) at time s (ms) since the last spike
        if s < ref:
            return 0.0
        u = mu + (10.0 - mu) * math.exp(-(s - ref) / tau)
        return r0 * math.exp((u - theta) / w)

    ll_c, n_terms = 0.0, 0
    for tr in trains:
        for a, b in zip(tr[:-1], tr[1:]):
            ll_c += math.log(h(b - a) * 1e-3) - quad(h, 0.0, b - a, points=[ref], limit=200)[0] * 1e-3
            n_terms += 1
        ll_c -= quad(h, 0.0, duration - tr[-1], points=[ref], limit=200)[0] * 1e-3
    sp = SpikeTrains(trains, duration=duration)
    errors = []
    for dt in (0.01, 0.001):
        ll_d = psth_loglik(pop, sp, 0.0, dt=dt, scale=1.0, offset=mu)
        errors.append(abs(ll_d - n_terms * math.log(dt) - ll_c))
    # measured 2e-7 at dt = 0.01 (spikes at the steps' midpoints, where the schemes agree to second
    # order) and 1.8e-5 at dt = 0.001 (spikes a quarter step off the midpoints: first order)
    assert errors[0] < 1e-5 and errors[1] < 1e-4, errors


def test_rescaled_intervals_are_exponential_under_the_true_model_and_not_without_refractoriness():
    # Time-rescaling theorem (Brown et al. 2002) with the discrete-time correction (Haslinger, Pipa &
    # Brown 2010): under the true model the KS p-values over repetitions are uniform (KS test on them);
    # the same model without its 5 ms refractory period is rejected (measured power 100 % at this size).
    # 25 data sets of 20 neurons x 2 s (~17 Hz, ~680 intervals each).
    pop, wrong = _pop(), _pop(refractory=0.0)
    p_true, p_wrong = [], []
    for rep in range(25):
        sp = _twin_trains(pop, 20, 2000.0, seed=100 + rep)
        for model, out in ((pop, p_true), (wrong, p_wrong)):
            data = _Binned(sp, STIM, 0.1)
            data.loglik(model, {"scale": 3.0, "offset": 20.0}, record=True,
                        uniforms=np.random.default_rng(rep).uniform(size=data.bins.size))
            out.append(ks_uniform(data.rescaled)["p_value"])
    assert kstest(p_true, "uniform").pvalue > 0.01, p_true
    assert np.mean(np.array(p_wrong) < 0.05) >= 0.9, p_wrong


def test_fit_recovers_hazard_and_drive_scale_of_the_twin():
    # parameter recovery from Monte Carlo twin data (40 neurons x 3 s): estimates within 3 standard
    # errors of the truth (the SEs from the observed information); KS accepts the fitted model
    pop = _pop()
    sp = _twin_trains(pop, 40, 3000.0, seed=7)
    start = _pop(rate=30.0, width=1.5)
    fit = popdens.fit_psth(start, sp, STIM, ["rate", "width", "scale"], scale=2.0, offset=20.0)
    truth = {"rate": 20.0, "width": 2.0, "scale": 3.0}
    for name, value in truth.items():
        assert abs(fit.estimates[name] - value) < 3.0 * fit.se[name], (name, fit.estimates[name], fit.se[name])
    assert fit.goodness["p_value"] > 0.01
    assert fit.aic == pytest.approx(2 * 3 - 2 * fit.loglik)
    fig = fit.plot()
    assert len(fig.axes) == 2


def test_unidentifiable_and_invalid_requests_are_clear_errors():
    pop = _pop()
    sp = _twin_trains(pop, 10, 1000.0, seed=3)
    # rate and offset trade off when the reset memory is short (the hazard sees (u - threshold)/width)
    with pytest.raises((ValueError, popdens.ConvergenceError), match="identifiable|maximum|kink|settle"):
        popdens.fit_psth(pop, sp, STIM, ["rate", "width", "scale", "offset"], scale=3.0, offset=20.0)
    with pytest.raises(ValueError, match="not a parameter"):
        popdens.fit_psth(pop, sp, STIM, ["sigma"])
    with pytest.raises(ValueError, match="escape noise"):
        popdens.fit_psth(popdens.Population(pop.neuron, popdens.WhiteNoise(3.0)), sp, STIM, ["sigma"])
    with pytest.raises(ValueError, match="two spikes within one step"):
        popdens.fit_psth(pop, SpikeTrains([[1.0, 1.05, 30.0]], duration=100.0), STIM, ["rate"], dt=0.1)
