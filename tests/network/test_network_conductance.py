"""Networks with conductance synapses: the merged ConductanceNoise of a cohort, fixed points, the
characteristic matrix at zero frequency, the spiking twin against the single-population conductance
twin, validation, and an E-I network in the high-conductance state against the spiking twin (slow)."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest

import popdens
from popdens.network import (Circuit, Cohort, Pathway, PoissonBackground, fixed_points, montecarlo_network,
                             simulate_network, spectral_matrix, stability)
from popdens.network._conductance_input import conductance_channels, conductance_population
from popdens.network.linear_stability import characteristic_matrix
from popdens.network.states import _rates_of

LIF = popdens.LIF(20.0, 20.0, 10.0, 2.0)
#: Population of a conductance cohort: its white noise only marks it diffusive (sigma_ext = 0).
POP = popdens.Population(LIF, popdens.WhiteNoise(1.0))
E_EXC, E_INH = 70.0, -10.0  # mV above a rest of 0 (0 and -80 mV for a cell resting at -70 mV)


def background(count, weight=0.02, tau=1.0, reversal=E_EXC, rate=10.0):
    return PoissonBackground(rate=rate, weight=weight, count=count, tau_syn=tau, synapse="conductance",
                             reversal=reversal)


def ei_circuit(drive=5.0, delay=1.0, n_e=4000, n_i=2000, c_e=800, c_i=400, w_e=0.04, w_i=0.2, bg_count=2500,
               tau_e=1.0, tau_i=1.2):
    """E and I cohorts of one LIF in the high-conductance state: an excitatory conductance background
    (25 kHz of 0.02 jumps), recurrent excitation (0.04, 1 ms, E_e = 70 mV) and inhibition (0.2, 1.2 ms,
    E_i = -10 mV); at the fixed point tau_eff = 6.3 ms (tau_m / 3.2) and tau_i / tau_eff = 0.19."""
    bg = background(bg_count, tau=tau_e)
    coh = [Cohort(n, POP, size=s, drive=drive, sigma_ext=0.0, background=bg) for n, s in (("E", n_e), ("I", n_i))]
    pws = [Pathway(s, t, w, c, delay=delay, tau_syn=tau, synapse="conductance", reversal=rev)
           for s, w, c, tau, rev in (("E", w_e, c_e, tau_e, E_EXC), ("I", w_i, c_i, tau_i, E_INH)) for t in "EI"]
    return Circuit(coh, pws)


def test_pathways_of_one_reversal_and_time_constant_merge_into_one_channel():
    """Two pathways of one (reversal, tau) with weights 0.02 and 0.05 merge into one channel with the summed
    w nu and w^2 nu (Campbell's theorem: means and variances of independent shot noises add; the
    conductance theory reads a channel only through w nu tau and w^2 nu tau^2, model/conductance.py and
    theory/_conductance.py); the background of the other reversal is the second channel unchanged."""
    src = Cohort("S", POP, size=600, drive=0.0, sigma_ext=0.0, background=background(2000))
    tgt = Cohort("T", POP, size=100, drive=0.0, sigma_ext=0.0, background=background(300, 0.1, 1.5, E_INH))
    net = Circuit([src, tgt], [Pathway("S", "T", 0.02, 500, tau_syn=1.0, synapse="conductance", reversal=E_EXC),
                               Pathway("S", "T", 0.05, 100, tau_syn=1.0, synapse="conductance", reversal=E_EXC)])
    n = conductance_population(net, 1, [40.0, 0.0]).noise
    # by hand: S1 = 0.02*500*40 + 0.05*100*40 = 600 Hz, S2 = 0.0004*20000 + 0.0025*4000 = 18 Hz
    assert math.isclose(n.exc_weight * n.exc_rate, 600.0, rel_tol=1e-12)  # exact arithmetic
    assert math.isclose(n.exc_weight ** 2 * n.exc_rate, 18.0, rel_tol=1e-12)
    assert (n.exc_tau, n.exc_reversal) == (1.0, E_EXC)
    assert np.allclose((n.inh_rate, n.inh_weight, n.inh_tau, n.inh_reversal), (3000.0, 0.1, 1.5, E_INH),
                       rtol=1e-12)  # a single input: its own weight and rate (300 trains at 10 Hz)
    # mean conductance w nu tau (Campbell): 600 Hz * 1 ms = 0.6 leak units
    assert math.isclose(n.mean_conductances()[0], 0.6, rel_tol=1e-12)


def test_cohort_without_recurrence_has_the_single_population_rate():
    """One cohort driven only by a conductance background: its fixed point is the stationary rate of
    the single-population ConductanceNoise (popdens.gain) at the cohort's drive, to the root finder's
    tolerance; the current-based gain through the same plumbing gives that method's single-population rate."""
    c = Circuit([Cohort("E", POP, size=100, drive=-20.0, sigma_ext=0.0, background=background(2000, 0.04))])
    single = popdens.Population(LIF, popdens.ConductanceNoise(20000.0, 0.04, 1.0, E_EXC))
    ref = float(popdens.gain(single, -20.0))
    (fp,) = fixed_points(c, (0.0, 100.0))
    assert abs(fp.rates[0] - ref) < 1e-6 * ref  # single-population conductance theory (Richardson 2004)
    assert np.isnan(fp.sigma[0]) and fp.mu[0] == -20.0

    def current_based(pop, mu):
        return popdens.gain(pop, mu, method="current-based")

    (fp_cb,) = fixed_points(c, (0.0, 100.0), gain=current_based)
    assert abs(fp_cb.rates[0] - float(current_based(single, -20.0))) < 1e-6 * ref


def test_characteristic_matrix_at_zero_is_the_jacobian_of_the_rate_map():
    """M(0)_kl = d Phi_k / d r_l: the conductance entries (central differences of the stationary rate
    in each channel's S1 and S2, merged) against central differences of the whole fixed-point map."""
    c = ei_circuit()
    (fp,) = fixed_points(c, (0.0, 60.0), starts_per_dim=2)
    m0 = characteristic_matrix(c, fp, 1e-9 + 0j).real
    h = 1e-3 * fp.rates[0]
    jac = np.empty((2, 2))
    for l in range(2):
        e = np.zeros(2)
        e[l] = h
        jac[:, l] = (_rates_of(c, popdens.gain, fp.rates + e) - _rates_of(c, popdens.gain, fp.rates - e)) / (2 * h)
    # central differences of step 1e-3 relative: truncation ~1e-6, rate accuracy ~1e-8 / 1e-3 (common practice)
    assert np.allclose(m0, jac, rtol=1e-3, atol=1e-5)
    assert jac[0, 0] > 0 > jac[0, 1]  # excitation raises the rate, inhibition lowers it


def test_network_twin_with_a_conductance_background_matches_the_single_population_twin():
    """One cohort driven only by a conductance background: the network twin (its ring buffers, arrivals
    spread over the step) against the single-population conductance twin (uniform random arrival times)
    within 4 combined SE (SE from the per-neuron count spread)."""
    n, t_end = 800, 1000.0
    c = Circuit([Cohort("E", POP, size=n, drive=-20.0, sigma_ext=0.0, background=background(2000, 0.04))])
    mc = montecarlo_network(c, t_end, dt=0.05, seed=4, record_spikes=True, progress=False)
    net = np.bincount(mc.spike_ids, minlength=n) / (t_end * 1e-3)
    single = popdens.Population(LIF, popdens.ConductanceNoise(20000.0, 0.04, 1.0, E_EXC))
    ref = popdens.montecarlo(single, -20.0, t_end, n, dt=0.05, seed=5, record_spikes=True, progress=False)
    one = np.bincount(ref.spike_ids, minlength=n) / (t_end * 1e-3)
    se = math.hypot(net.std(ddof=1), one.std(ddof=1)) / math.sqrt(n)
    assert abs(net.mean() - one.mean()) < 4 * se  # twin, 4 SE


def test_conductance_inputs_are_validated():
    with pytest.raises(ValueError, match="`sigma_ext` must be 0"):
        Circuit([Cohort("E", POP, size=10, background=background(100))])
    three = Circuit([Cohort("E", POP, size=50, sigma_ext=0.0, background=background(100))],
                    [Pathway("E", "E", 0.1, 5, tau_syn=2.0, synapse="conductance", reversal=E_EXC),
                     Pathway("E", "E", 0.1, 5, tau_syn=3.0, synapse="conductance", reversal=E_INH)])
    with pytest.raises(ValueError, match=r"3 distinct \(`reversal`, `tau_syn`\) pairs.*pathway E->E"):
        conductance_channels(three, 0, [10.0])
    with pytest.raises(ValueError, match="share the `reversal`"):
        conductance_channels(Circuit([Cohort("E", POP, size=50, sigma_ext=0.0, background=background(100))],
                                     [Pathway("E", "E", 0.1, 5, tau_syn=2.0, synapse="conductance",
                                              reversal=E_EXC)]), 0, [10.0])
    mixed = Circuit([Cohort("E", POP, size=50, sigma_ext=0.0, background=background(100)),
                     Cohort("W", POP, size=50, drive=10.0)], [Pathway("E", "W", 0.1, 5)])
    with pytest.raises(NotImplementedError, match="cohorts \\['W'\\] do not receive conductance"):
        montecarlo_network(mixed, 1.0, seed=1)
    silent = Circuit([Cohort("E", POP, size=50, sigma_ext=0.0)],
                     [Pathway("E", "E", 0.1, 5, tau_syn=2.0, synapse="conductance", reversal=E_EXC)])
    with pytest.raises(ValueError, match="cohort 'E': its conductance input has no fluctuations at threshold"):
        simulate_network(silent, 1.0)  # no background, sources silent at t = 0
    c = Circuit([Cohort("E", POP, size=50, drive=-20.0, sigma_ext=0.0, background=background(2000, 0.04))])
    (fp,) = fixed_points(c, (0.0, 100.0))
    with pytest.raises(NotImplementedError, match="not offered for conductance synapses"):
        spectral_matrix(c, fp, [10.0])


# ------------------------------------------------------------------ time integration
def feed_forward(size=1000, after=-15.0):
    """S (background only; drive -20 -> ``after`` mV at 50 ms: 24 -> 51 Hz) inhibits T through conductances
    (0.03 x 200, 1.2 ms, E_i = -10 mV) beside T's excitatory background (62 -> 36 Hz)."""
    s = Cohort("S", POP, size=size, drive=popdens.drive.Step(50.0, -20.0, after), sigma_ext=0.0,
               background=background(2000, 0.04))
    t = Cohort("T", POP, size=size, drive=8.0, sigma_ext=0.0, background=background(2500, 0.02))
    return Circuit([s, t], [Pathway("S", "T", 0.03, 200, delay=1.0, tau_syn=1.2, synapse="conductance",
                                    reversal=E_INH)])


def test_cohort_on_its_background_is_the_single_population_solver():
    """A cohort driven only by its conductance background, through a drive step: simulate_network and
    popdens.simulate of the ConductanceNoise population (same grid) give the same rates to round-off."""
    drive = popdens.drive.Step(50.0, -20.0, -10.0)
    c = Circuit([Cohort("E", POP, size=100, drive=drive, sigma_ext=0.0, background=background(2000, 0.04))])
    res = simulate_network(c, 100.0, solver_options={"E": {"n_cells": 400, "u_min": -40.0}})
    single = popdens.Population(LIF, popdens.ConductanceNoise(20000.0, 0.04, 1.0, E_EXC))
    ref = popdens.simulate(single, drive, 100.0, 0.1, n_cells=400, u_min=-40.0, error_control="off", progress=False)
    assert res.status == 0 and res.rate[0, -1] > 2 * res.rate[0, 0]
    assert np.max(np.abs(res.rate[0] - ref.rate)) < 1e-9 * np.max(ref.rate)  # round-off (measured 8e-12 Hz)
    assert np.all(res.mu[0] == drive(res.t)) and np.all(np.isnan(res.sigma))  # mu: the cohort's drive


def test_integration_relaxes_to_the_fixed_point_from_any_start():
    """Constant input: from three initial rates the E-I conductance network settles on its stable fixed point
    (fixed_points: threshold integration of the rate) within 1e-3, the rate tolerance the Fokker--Planck
    grid aims at (measured -6e-5), and the three end states agree within 2e-5 (measured 8e-6: the moving
    threshold and the two-cell reset differ from a grid placed at the end state only by discretisation);
    mass is conserved to round-off."""
    c = ei_circuit()
    (fp,) = fixed_points(c, (0.0, 60.0), starts_per_dim=2)
    ends = []
    for r0 in (fp.rates, [5.0, 5.0], [30.0, 30.0]):
        res = simulate_network(c, 200.0, initial_rates=r0)
        assert res.status == 0 and res.diagnostics["mass_error"] < 1e-10
        ends.append(res.rate[:, -1])
        assert np.allclose(res.rate[:, -1], fp.rates, rtol=1e-3, atol=0)  # the solver's rate tolerance
    assert np.ptp(ends, axis=0).max() < 2e-5 * fp.rates.max()


def test_mixed_circuit_relaxes_to_its_fixed_point():
    """A conductance cohort E beside a white-noise current cohort W (E -> W current synapses, W -> E
    inhibitory conductances): from rest and from another start the integration reaches the stable fixed
    point within 1e-3 (the solvers' rate tolerance; measured 2e-4 to 4.5e-4 after 300 ms); W's mu and sigma
    are its current input, E's mu its drive and sigma NaN."""
    e = Cohort("E", POP, size=1000, drive=5.0, sigma_ext=0.0, background=background(2500, 0.02))
    w = Cohort("W", popdens.Population(LIF, popdens.WhiteNoise(4.0)), size=1000, drive=12.0, sigma_ext=4.0)
    c = Circuit([e, w], [Pathway("E", "W", 0.05, 100, delay=1.0),
                         Pathway("W", "E", 0.05, 100, delay=1.0, tau_syn=1.2, synapse="conductance", reversal=E_INH)])
    (fp,) = fixed_points(c, (0.0, 300.0), starts_per_dim=3)
    assert stability(c, fp).stable
    for r0 in ([0.0, 0.0], [30.0, 5.0]):
        res = simulate_network(c, 300.0, initial_rates=r0)
        assert res.status == 0 and res.diagnostics["mass_error"] < 1e-10
        assert np.allclose(res.rate[:, -1], fp.rates, rtol=1e-3, atol=0)
        assert res.mu[0, -1] == 5.0 and math.isnan(res.sigma[0, -1])
        assert res.mu[1, -1] == pytest.approx(fp.mu[1], rel=1e-3) and res.sigma[1, -1] == pytest.approx(fp.sigma[1],
                                                                                                         rel=1e-3)


def twin_bins(c, t_end, bin_ms, seeds, size=None):
    """Mean binned rates (Hz) of the spiking twin over independent seeds and their SE (spread over seeds)."""
    runs = np.array([montecarlo_network(c, t_end, dt=0.05, seed=s, record_interval=bin_ms, progress=False).rate[:, 1:]
                     for s in seeds])
    return runs.mean(axis=0), runs.std(axis=0, ddof=1) / math.sqrt(len(seeds))


def test_feed_forward_transient_against_the_twin():
    """S's drive steps at 50 ms, and T's inhibitory conductance follows S's rate: the mean field's 2.5-ms
    bins against the twin's (1000 + 1000 neurons, six seeds; SE from the spread over seeds).  Measured: 56
    and 51 of 60 bins within 4 SE (S and T); the misses are the fast transient after the step (the
    effective-time-constant theory's response to fast input is too weak, as the single population's), e.g.
    T's trough 7.2 against 2.2 +- 0.4 Hz.  Asserted: 80 % of the bins, and the rates of the last 50 ms within
    3 % or 4 SE of the fixed point after the step (the theory's error here, contributor guide)."""
    c = feed_forward()
    (fp0,) = fixed_points(c, (0.0, 200.0))
    mf = simulate_network(c, 150.0, record_interval=2.5, initial_rates=fp0.rates)
    m, se = twin_bins(c, 150.0, 2.5, range(6))
    inside = np.abs(mf.rate[:, 1:] - m) < 4 * se
    print("bins within 4 SE:", inside.sum(axis=1), "of", inside.shape[1])
    assert np.all(inside.mean(axis=1) >= 0.8)  # twin, 4 SE
    (fp1,) = fixed_points(Circuit([dataclasses.replace(c.cohorts[0], drive=-15.0), c.cohorts[1]], c.pathways),
                          (0.0, 200.0))
    late = slice(-20, None)
    for k in range(2):
        tw, tw_se = m[k, late].mean(), math.sqrt(np.sum(se[k, late] ** 2)) / 20
        print(f"{c.names[k]}: last 50 ms mean field {mf.rate[k, late].mean():.3f}, twin {tw:.3f} +- {tw_se:.3f}, "
              f"fixed point {fp1.rates[k]:.3f} Hz")
        # settling on the fixed point: -0.3 % (S) and -0.5 % (T) over 100-150 ms, within 3e-4 after 400 ms
        assert abs(mf.rate[k, late].mean() - fp1.rates[k]) < 5e-3 * fp1.rates[k]
        assert abs(fp1.rates[k] - tw) < max(0.03 * tw, 4 * tw_se)  # twin, 3 % or 4 SE


# ------------------------------------------------------------------ slow: E-I network against the twin
def twin_rates(c, t_end, seed, bin_ms=None):
    mc = montecarlo_network(c, t_end, dt=0.05, seed=seed, record_spikes=True, record_interval=bin_ms,
                            progress=False)
    blocks = 10
    out = []
    for k, (a, b) in enumerate(((0, c.cohorts[0].size), (c.cohorts[0].size, c.cohorts[0].size + c.cohorts[1].size))):
        sel = (mc.spike_ids >= a) & (mc.spike_ids < b)
        t = mc.spike_times[sel]
        per = np.histogram(t, bins=blocks, range=(0.0, t_end))[0] / ((b - a) * t_end / blocks * 1e-3)
        out.append((per.mean(), per.std(ddof=1) / math.sqrt(blocks)))
    return out, mc


@pytest.mark.slow
def test_ei_network_in_the_high_conductance_state_against_the_twin():
    """Mean-field rates within 3 % (or 4 SE) of the spiking twin (4000 E + 2000 I, 2 s; SE over ten
    200-ms blocks, which carries the network's own rate fluctuations); the current-based mean field
    (white noise at the fixed tau_m) is printed beside it (measured +12 %)."""
    c = ei_circuit()
    (fp,) = fixed_points(c, (0.0, 60.0), starts_per_dim=2)
    pop = conductance_population(c, 0, fp.rates)
    assert 2.0 < 20.0 / pop.noise.effective_time_constant(20.0) < 5.0  # high-conductance regime
    assert 1.2 <= pop.noise.effective_time_constant(20.0) / 4.0  # tau_i <= tau_eff / 4
    (cb,) = fixed_points(c, (0.0, 60.0), gain=lambda p, m: popdens.gain(p, m, method="current-based"),
                         starts_per_dim=2)
    rates, _ = twin_rates(c, 2000.0, seed=5)
    for k, (r, se) in enumerate(rates):
        print(f"cohort {c.names[k]}: twin {r:.3f} +- {se:.3f} Hz, conductance mean field {fp.rates[k]:.3f} Hz "
              f"({fp.rates[k] / r - 1:+.1%}), current-based {cb.rates[k]:.3f} Hz ({cb.rates[k] / r - 1:+.1%})")
        assert abs(fp.rates[k] - r) < max(0.03 * r, 4 * se)  # twin, 3 % or 4 SE


@pytest.mark.slow
@pytest.mark.parametrize("delay", [1.0, 4.0])
def test_stability_verdict_agrees_with_the_twin(delay):
    """Delay 1 ms: stable (leading root -214 1/s at 136 Hz), and the twin stays at the fixed point (mean
    within 4 %); delay 4 ms: unstable (+65 1/s at 72 Hz), and the twin oscillates far from it (mean rate
    more than 50 % above the fixed point, 1-ms rate fluctuations larger than the mean; measured 38 Hz
    mean and 82 Hz s.d. against a fixed point of 13 Hz)."""
    c = ei_circuit(delay=delay)
    (fp,) = fixed_points(c, (0.0, 60.0), starts_per_dim=2)
    st = stability(c, fp)
    rates, mc = twin_rates(c, 1000.0, seed=7, bin_ms=1.0)
    x = mc.rate[0, 1:]
    print(f"delay {delay} ms: {st!r}; twin mean {x.mean():.2f} Hz, s.d. {x.std():.2f} Hz; fixed point {fp.rates[0]:.2f}")
    if delay == 1.0:
        assert st.stable
        assert abs(rates[0][0] - fp.rates[0]) < 0.04 * fp.rates[0]  # twin at the fixed point
    else:
        assert not st.stable and 50.0 < st.frequency < 100.0
        assert x.mean() > 1.5 * fp.rates[0] and x.std() > x.mean()  # twin oscillates (common practice)


def test_inhibition_factor_scales_conductances_that_reverse_below_threshold():
    # the stability map's `inhibition` axis: inhibitory conductance synapses are those reversing below
    # the target's threshold (E_INH; here the only weights to scale, all conductance jumps being > 0)
    from popdens.network.parameters import CircuitParameter

    c = ei_circuit()
    scaled = CircuitParameter("inhibition").apply(c, 2.0)
    for before, after in zip(c.pathways, scaled.pathways):
        factor = 2.0 if before.reversal < LIF.threshold else 1.0
        assert after.weight == pytest.approx(factor * before.weight, rel=1e-15)
    assert sum(p.reversal < LIF.threshold for p in c.pathways) == 2


@pytest.mark.slow
def test_ei_network_drive_step_against_the_twin():
    """The E-I network in the high-conductance state (stable, delay 1 ms), drive 5 -> 8 mV at 100 ms: the mean
    field's 5-ms bins against the twin's (4000 + 2000 neurons, ten seeds of 300 ms; SE from the spread over
    seeds, which carries the network's own fluctuations), and the rates of the last 100 ms against the fixed
    point after the step within 3 % or 4 SE (the fixed point's error against the twin, above)."""
    c = ei_circuit(drive=popdens.drive.Step(100.0, 5.0, 8.0))
    (fp0,) = fixed_points(ei_circuit(), (0.0, 60.0), starts_per_dim=2)
    (fp1,) = fixed_points(ei_circuit(drive=8.0), (0.0, 60.0), starts_per_dim=2)
    mf = simulate_network(c, 300.0, record_interval=5.0, initial_rates=fp0.rates)
    m, se = twin_bins(c, 300.0, 5.0, range(10))
    inside = np.abs(mf.rate[:, 1:] - m) < 4 * se
    late = slice(-20, None)
    for k in range(2):
        print(f"{c.names[k]}: " + " ".join(f"{a:.1f}/{b:.1f}+-{e:.1f}" for a, b, e in zip(mf.rate[k, 1:], m[k], se[k])))
        tw, tw_se = m[k, late].mean(), math.sqrt(np.sum(se[k, late] ** 2)) / 20
        print(f"{c.names[k]}: {inside[k].sum()} of {inside.shape[1]} bins within 4 SE; last 100 ms mean field "
              f"{mf.rate[k, late].mean():.3f}, twin {tw:.3f} +- {tw_se:.3f}, fixed point {fp1.rates[k]:.3f} Hz")
        assert inside[k].mean() >= 0.8  # twin, 4 SE
        assert abs(fp1.rates[k] - tw) < max(0.03 * tw, 4 * tw_se)  # twin, 3 % or 4 SE
        assert abs(mf.rate[k, late].mean() - fp1.rates[k]) < 2e-3 * fp1.rates[k]  # settled on the fixed point
