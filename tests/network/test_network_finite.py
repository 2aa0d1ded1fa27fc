"""Finite cohorts in networks (simulate_network(..., finite_size=True)) and the predicted spectral matrix.

Default tests check the contract and closed forms; the comparisons with the spiking twin are slow
(``--runslow``) and state their standard errors beside each check.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import popdens
from popdens import hazard
from popdens.network import Circuit, Cohort, Pathway, simulate_network
from popdens.network.spectra import spectral_matrix

CELL = popdens.LIF(tau_m=10.0, threshold=20.0, reset=0.0, refractory=2.0)
ESCAPE = popdens.Population(CELL, popdens.EscapeNoise(hazard.Exponential(rate=20.0, width=2.0)))
SATURATING = popdens.Population(CELL, popdens.EscapeNoise(hazard.ErfEscape(max_rate=60.0, width=3.0)))


def recurrent(n, total_weight, drive, tau_syn=5.0, pop=SATURATING):
    """One all-to-all recurrent cohort of n neurons; ``total_weight`` = J C (mV)."""
    return Circuit([Cohort("E", pop, size=n, drive=drive)],
                   [Pathway("E", "E", weight=total_weight / (n - 1), in_degree=n - 1, delay=1.0, tau_syn=tau_syn)])


def escape_ei(n_e=400, n_i=100, j_e=20.0, j_i=30.0, drive=20.0):
    """All-to-all E-I circuit of escape-noise cohorts (total weights J C in mV); invented parameters."""
    paths = []
    for tgt, n_t in (("E", n_e), ("I", n_i)):
        paths.append(Pathway("E", tgt, j_e / n_e, n_e - 1 if tgt == "E" else n_e, delay=1.5, tau_syn=2.0))
        paths.append(Pathway("I", tgt, -j_i / n_i, n_i - 1 if tgt == "I" else n_i, delay=1.5, tau_syn=2.0))
    return Circuit([Cohort("E", ESCAPE, size=n_e, drive=drive), Cohort("I", ESCAPE, size=n_i, drive=drive)], paths)


# ----------------------------------------------------------------------------------------- contract

def test_finite_network_is_reproducible_and_records_whole_spikes():
    c = recurrent(50, 20.0, 14.0)
    a = simulate_network(c, 100.0, finite_size=True, seed=4, burn_in=20.0)
    b = simulate_network(c, 100.0, finite_size=True, seed=4, burn_in=20.0)
    d = simulate_network(c, 100.0, finite_size=True, seed=5, burn_in=20.0)
    assert a.method == "mesoscopic" and a.sizes == (50,) and a.success
    np.testing.assert_array_equal(a.rate, b.rate)
    assert not np.array_equal(a.rate, d.rate)
    counts = a.rate[0, 1:] * 50 * a.dt * 1e-3
    np.testing.assert_allclose(counts, np.round(counts), atol=1e-9)
    assert a.diagnostics["finite_size"] == ["E"] and a.diagnostics["burn_in_ms"] == pytest.approx(20.0)


def test_huge_cohorts_follow_the_mean_field():
    """N = 1e9 neurons per cohort: the realised activities follow the deterministic integration within
    5 Poisson standard errors sqrt(r / (N b)) in every 1 ms bin (common practice)."""
    c = escape_ei(n_e=10**9, n_i=10**9)
    det = simulate_network(c, 50.0, record_interval=1.0, initial_rates=[9.0, 9.0])
    fin = simulate_network(c, 50.0, record_interval=1.0, initial_rates=[9.0, 9.0], finite_size=True, seed=1,
                           burn_in=0.0)
    se = np.sqrt(np.maximum(det.rate[:, 1:], 1e-3) / (1e9 * 1e-3))
    assert np.all(np.abs(fin.rate[:, 1:] - det.rate[:, 1:]) <= 5 * se + 1e-6 * det.rate[:, 1:])


def test_finite_size_arguments_are_checked():
    white = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(5.0))
    with pytest.raises(ValueError, match="`finite_size`"):
        simulate_network(Circuit([Cohort("E", white)]), 10.0, finite_size=True)
    with pytest.raises(ValueError, match="`seed`"):
        simulate_network(recurrent(50, 20.0, 14.0), 10.0, seed=3)
    with pytest.raises(ValueError, match="`burn_in`"):
        simulate_network(recurrent(50, 20.0, 14.0), 10.0, finite_size=True, burn_in=-1.0)
    adapting = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0, adaptation=[popdens.Adaptation(100.0, 1.0)]),
                                  popdens.EscapeNoise(hazard.Exponential(20.0, 2.0)))
    with pytest.raises(ValueError, match="`finite_size`: cohort 'A' has adapting neurons"):
        simulate_network(Circuit([Cohort("A", adapting, size=50, drive=15.0)]), 10.0, finite_size=True)


# ------------------------------------------------------------------------------- spectral matrix

def test_spectral_matrix_of_uncoupled_cohorts_is_the_renewal_spectrum_over_n():
    """No coupling: C = diag(S_k / N_k) exactly (independent renewal neurons; Cox 1962)."""
    c = Circuit([Cohort("A", ESCAPE, size=300, drive=22.0), Cohort("B", ESCAPE, size=50, drive=18.0)])
    state = popdens.fixed_points(c)[0]
    f = np.array([1.0, 20.0, 150.0])
    spec = spectral_matrix(c, state, f)
    np.testing.assert_allclose(spec[:, 0, 0].real, popdens.population_rate_spectrum(ESCAPE, 22.0, f, 300), rtol=1e-12)
    np.testing.assert_allclose(spec[:, 1, 1].real, popdens.population_rate_spectrum(ESCAPE, 18.0, f, 50), rtol=1e-12)
    assert np.all(spec[:, 0, 1] == 0)


def test_spectral_matrix_of_one_recurrent_cohort_is_the_closed_loop_formula():
    """One cohort with exponential synapses and delay: S_A = (S/N) / |1 - tau_m J C chi(f) K(f) e^{-2 pi i f d}|^2
    (linear response of renewal neurons to their population's feedback; Lindner, Doiron & Longtin 2005),
    with chi from ``popdens.transfer`` and K = 1/(1 + 2 pi i f tau_s) written out here."""
    n, jc, tau_s, d = 200, 20.0, 5.0, 1.0
    c = recurrent(n, jc, 14.0, tau_syn=tau_s, pop=ESCAPE)
    state = popdens.fixed_points(c)[0]
    f = np.array([2.0, 30.0, 120.0])
    chi = popdens.transfer(ESCAPE, float(state.mu[0]), f)  # Hz/mV
    loop = CELL.tau_m * jc * chi * np.exp(-2j * np.pi * f * d * 1e-3) / (1 + 2j * np.pi * f * tau_s * 1e-3) * 1e-3
    ref = popdens.population_rate_spectrum(ESCAPE, float(state.mu[0]), f, n) / np.abs(1.0 - loop) ** 2
    np.testing.assert_allclose(spectral_matrix(c, state, f)[:, 0, 0].real, ref, rtol=1e-10)


def test_spectral_matrix_is_hermitian_and_positive():
    c = escape_ei()
    state = popdens.fixed_points(c)[0]
    spec = spectral_matrix(c, state, np.array([3.0, 40.0, 300.0]))
    np.testing.assert_allclose(spec, np.conj(np.swapaxes(spec, 1, 2)), atol=1e-15)
    assert np.all(np.linalg.eigvalsh(spec) > 0)
    with pytest.raises(ValueError, match="`freqs`"):
        spectral_matrix(c, state, [0.0, 1.0])
    with pytest.raises(ValueError, match="`sizes`"):
        spectral_matrix(c, state, [1.0], sizes=[10])


# ------------------------------------------------------------------------------ against the twin

def dwell_times(rate, low, high):
    """Completed stays (in bins) in the low and the high state, with hysteresis thresholds."""
    state, since, stays = None, None, {0: [], 1: []}
    for i, x in enumerate(rate):
        new = 1 if x > high else 0 if x < low else state
        if new != state:
            if state is not None and since is not None:
                stays[state].append(i - since)
            since = i if state is not None else None
            state = new
    return np.array(stays[0], dtype=float), np.array(stays[1], dtype=float)


@pytest.mark.slow
def test_bistable_cohort_switches_with_the_twins_dwell_times():
    """300 neurons, recurrent excitation (instantaneous synapses) with three fixed points: finite-size noise makes the activity
    switch between the low and the high state.  Mean dwell times (10 ms bins; thresholds halfway
    between each stable state and the unstable one) of the mesoscopic run and the spiking twin agree
    within 20 %, with >= 100 stays each (SE of a mean of exponential stays: mean / sqrt(count))."""
    c = recurrent(300, 34.0, 14.4, tau_syn=0.0)
    states = sorted(float(s.rates[0]) for s in popdens.fixed_points(c, rate_range=(0.0, 70.0)))
    assert len(states) == 3
    low, high = 0.5 * (states[0] + states[1]), 0.5 * (states[1] + states[2])
    me = simulate_network(c, 300_000.0, finite_size=True, seed=1, record_interval=10.0)
    tw = popdens.montecarlo_network(c, 300_000.0, seed=2, record_interval=10.0)
    for k, (a, b) in enumerate(zip(dwell_times(me.rate[0, 1:], low, high), dwell_times(tw.rate[0, 1:], low, high))):
        assert a.size >= 100 and b.size >= 100, (k, a.size, b.size)
        print(f"state {k}: mean dwell {a.mean() * 10:.0f} ms ({a.size} stays) vs twin {b.mean() * 10:.0f} ms "
              f"({b.size} stays)")
        assert abs(a.mean() / b.mean() - 1.0) <= 0.2, (k, a.mean(), b.mean())


@pytest.mark.slow
def test_finite_size_shift_of_the_mean_rate_falls_like_one_over_n():
    """A recurrent cohort near its fold: finite-size fluctuations lower the mean rate below the
    mean-field fixed point, by an amount ~ 1/N (expansion in 1/N of the stochastic dynamics; Buice &
    Chow 2013, from memory).  Mesoscopic run and twin agree within 4 SE at every N (SE: standard
    deviation of 100 ms bin means / sqrt(bins), bins nearly independent); the weighted log-log slope of
    the shift against N is -1 within 3 of its standard errors (propagated from the shifts' SEs)."""
    sizes = np.array([100, 200, 400, 800])
    shifts = {"meso": [], "twin": []}
    errors = {"meso": [], "twin": []}
    for n in sizes:
        c = recurrent(int(n), 30.0, 15.0)
        r_mf = float(popdens.fixed_points(c, rate_range=(0.0, 70.0))[0].rates[0])
        me = simulate_network(c, 40_000.0, finite_size=True, seed=int(n), record_interval=100.0).rate[0, 1:]
        tw = popdens.montecarlo_network(c, 40_000.0, seed=int(n) + 1, record_interval=100.0).rate[0, 1:]
        for name, x in (("meso", me), ("twin", tw)):
            shifts[name].append(r_mf - x.mean())
            errors[name].append(x.std() / math.sqrt(x.size))
        se = math.hypot(errors["meso"][-1], errors["twin"][-1])
        assert abs(me.mean() - tw.mean()) <= 4 * se, (n, me.mean(), tw.mean(), se)
    for name in shifts:
        s, e = np.array(shifts[name]), np.array(errors[name])
        assert np.all(s > 0), (name, s)
        w = (s / e) ** 2  # 1 / var(log s)
        x = np.log(sizes) - np.sum(w * np.log(sizes)) / w.sum()
        slope = np.sum(w * x * np.log(s)) / np.sum(w * x * x)
        slope_se = 1.0 / math.sqrt(np.sum(w * x * x))
        print(f"{name}: shifts {np.round(s, 3)} Hz (SE {np.round(e, 3)}), slope {slope:.2f} +- {slope_se:.2f}")
        assert abs(slope + 1.0) <= 3 * slope_se, (name, slope, slope_se)


def _cross_se(p_ii, p_jj, c_ij, m):
    """SEs of the real and imaginary parts of an averaged cross-periodogram of m segments of a
    Gaussian process (Bendat & Piersol 2010, "Random Data", ch. 9):
    var Re = (S_ii S_jj + Re^2 - Im^2)/(2m), var Im = (S_ii S_jj - Re^2 + Im^2)/(2m)."""
    re, im = c_ij.real, c_ij.imag
    return (np.sqrt(np.maximum(p_ii * p_jj + re ** 2 - im ** 2, 0) / (2 * m)),
            np.sqrt(np.maximum(p_ii * p_jj - re ** 2 + im ** 2, 0) / (2 * m)))


def _agreement(est, pred, sel):
    """Fractions of frequencies within 4 SE: [S_EE, S_II, Re S_EI, Im S_EI]."""
    m = est.segments
    x, p = est.cross[sel], pred
    out = [float(np.mean(np.abs(x[:, k, k].real - p[:, k, k].real) <= 4 * p[:, k, k].real / np.sqrt(m)))
           for k in range(2)]
    se_re, se_im = _cross_se(p[:, 0, 0].real, p[:, 1, 1].real, p[:, 0, 1], m)
    out.append(float(np.mean(np.abs(x[:, 0, 1].real - p[:, 0, 1].real) <= 4 * se_re)))
    out.append(float(np.mean(np.abs(x[:, 0, 1].imag - p[:, 0, 1].imag) <= 4 * se_im)))
    return out


def _binned(pred, f, rates, sizes, b_ms):
    """Prediction for rates averaged over bins of b ms: the non-flat part times sinc^2 (bins of
    0.1 ms: the folded terms are below 1e-3 of it up to 500 Hz)."""
    w = np.sinc(f * b_ms * 1e-3) ** 2
    out = pred * w[:, None, None]
    for k, (r, n) in enumerate(zip(rates, sizes)):
        out[:, k, k] += r / n * (1.0 - w)
    return out


@pytest.mark.slow
def test_escape_ei_spectral_matrix_against_twin_and_mesoscopic_run():
    """All-to-all E-I escape network (400 + 100 neurons) in its asynchronous state, 60 s recorded
    every 0.1 ms, 60 segments of 1 s: predicted spectra and cross-spectrum of E and I from 1 to 500 Hz
    within 4 SE of the twin's in >= 95 % of the frequencies, and of the mesoscopic run's."""
    c = escape_ei()
    state = popdens.fixed_points(c)[0]
    tw = popdens.montecarlo_network(c, 60_000.0, seed=2, record_interval=0.1).spectra(1000.0)
    me = simulate_network(c, 60_000.0, finite_size=True, seed=3, record_interval=0.1).spectra(1000.0)
    sel = tw.freqs <= 500.0
    pred = _binned(spectral_matrix(c, state, tw.freqs[sel]), tw.freqs[sel], state.rates, (400, 100), 0.1)
    for name, est in (("twin", tw), ("mesoscopic", me)):
        frac = _agreement(est, pred, sel)
        print(f"{name}: within 4 SE of the spectral matrix: S_EE {frac[0]:.3f}, S_II {frac[1]:.3f}, "
              f"Re S_EI {frac[2]:.3f}, Im S_EI {frac[3]:.3f} ({est.segments} segments)")
        assert min(frac) >= 0.95


@pytest.mark.slow
def test_diffusive_ei_spectral_matrix_against_twin():
    """Sparse E-I network of white-noise LIF neurons (Brunel 2000 model A; 2000 + 500 neurons, in-degrees
    200 and 50, g = 5) in its asynchronous state, 40 s recorded every 0.1 ms: predicted spectra and
    cross-spectrum within 4 SE of the twin's in >= 95 % of the frequencies from 1 to 500 Hz."""
    lif = popdens.Population(popdens.LIF(tau_m=20.0, threshold=20.0, reset=10.0, refractory=2.0),
                             popdens.WhiteNoise(5.0))
    g, j = 5.0, 0.1
    c = Circuit([Cohort("E", lif, size=2000, drive=24.0), Cohort("I", lif, size=500, drive=24.0)],
                [Pathway("E", "E", j, 200, 1.5), Pathway("E", "I", j, 200, 1.5),
                 Pathway("I", "E", -g * j, 50, 1.5), Pathway("I", "I", -g * j, 50, 1.5)])
    state = popdens.fixed_points(c)[0]
    assert popdens.stability(c, state).stable
    tw = popdens.montecarlo_network(c, 40_000.0, seed=2, record_interval=0.1).spectra(1000.0)
    sel = tw.freqs <= 500.0
    pred = _binned(spectral_matrix(c, state, tw.freqs[sel]), tw.freqs[sel], state.rates, (2000, 500), 0.1)
    frac = _agreement(tw, pred, sel)
    print(f"twin: within 4 SE of the spectral matrix: S_EE {frac[0]:.3f}, S_II {frac[1]:.3f}, "
          f"Re S_EI {frac[2]:.3f}, Im S_EI {frac[3]:.3f} ({tw.segments} segments)")
    assert min(frac) >= 0.95
