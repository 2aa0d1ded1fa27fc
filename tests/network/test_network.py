"""Tests of popdens.network (circuit, integrate, twin): specification, validation, mean-field time integration, Monte Carlo twin."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.optimize import fsolve
from scipy.special import erfcx

import popdens
from popdens.network import (Cohort, Circuit, CircuitResult, Pathway, PoissonBackground, montecarlo_network,
                             simulate_network)

LIF_E = popdens.LIF(tau_m=20.0, threshold=20.0, reset=10.0, refractory=2.0)


def siegert(mu, sigma, tau=20.0, theta=20.0, reset=10.0, tref=2.0):
    """Stationary LIF rate (Hz) under white noise.

    Siegert formula (Siegert 1951; Brunel 2000, J. Comput. Neurosci. 8:183, eq. 21):
    1/nu = tref + tau sqrt(pi) int_{(reset-mu)/sigma}^{(theta-mu)/sigma} exp(x^2)(1 + erf x) dx,
    with exp(x^2)(1 + erf x) = erfcx(-x); quadrature by scipy.
    """
    val, _ = quad(lambda x: erfcx(-x), (reset - mu) / sigma, (theta - mu) / sigma, limit=200)
    return 1000.0 / (tref + tau * math.sqrt(math.pi) * val)


def ei_circuit(n_e=2000, n_i=500, c_e=200, c_i=50, j=0.1, g=4.0, drive=18.0, sigma=5.0, delay=1.5, tau_syn=0.0):
    """A sparse excitatory-inhibitory demo circuit (invented numbers)."""
    pop = popdens.Population(LIF_E, popdens.WhiteNoise(sigma))
    asm = [Cohort("E", pop, size=n_e, drive=drive), Cohort("I", pop, size=n_i, drive=drive)]
    pw = [Pathway("E", "E", j, c_e, delay, tau_syn), Pathway("E", "I", j, c_e, delay, tau_syn),
          Pathway("I", "E", -g * j, c_i, delay, tau_syn), Pathway("I", "I", -g * j, c_i, delay, tau_syn)]
    return Circuit(asm, pw)


def siegert_fixed_point(circuit, guess):
    """Self-consistent rates with the independent Siegert formula (scipy fsolve)."""
    def resid(r):
        mu, sg = circuit.stationary_input(r)
        return r - np.array([siegert(m, s) for m, s in zip(mu, sg)])
    r = fsolve(resid, guess, xtol=1e-12)
    assert np.max(np.abs(resid(r))) < 1e-8
    return r


# --------------------------------------------------------------------------- specification
def test_stationary_input_matches_the_diffusion_approximation_formula():
    # mu = mu_ext + tau sum J C nu, sigma^2 = sigma_ext^2 + tau sum J^2 C nu (Brunel 2000, eqs. 4-5),
    # computed by hand here; rates in Hz -> 1/ms
    c = ei_circuit(j=0.2, g=5.0, drive=12.0, sigma=3.0)
    c2 = Circuit(list(c.cohorts[:1]) + [Cohort("I", c.cohorts[1].population, size=500, drive=12.0,
                                                      background=PoissonBackground(rate=800.0, weight=0.3, count=10))],
                 c.pathways)
    re, ri = 7.0, 21.0
    mu, sg = c2.stationary_input([re, ri])
    mu_e = 12.0 + 20.0 * (0.2 * 200 * re - 1.0 * 50 * ri) * 1e-3
    var_e = 9.0 + 20.0 * (0.04 * 200 * re + 1.0 * 50 * ri) * 1e-3
    mu_i = mu_e + 20.0 * 0.3 * 10 * 800.0 * 1e-3
    var_i = var_e + 20.0 * 0.09 * 10 * 800.0 * 1e-3
    assert mu == pytest.approx([mu_e, mu_i], rel=1e-14)
    assert sg == pytest.approx(np.sqrt([var_e, var_i]), rel=1e-14)


def test_escape_cohorts_get_mean_input_only():
    esc = popdens.Population(LIF_E, popdens.EscapeNoise(popdens.hazard.Exponential(10.0, 2.0)))
    c = Circuit([Cohort("X", esc, size=10, drive=5.0)], [Pathway("X", "X", 0.5, 4, 1.0)])
    wm, wv = c.coupling()
    assert wm[0, 0] == pytest.approx(20.0 * 0.5 * 4 * 1e-3)  # tau J C / 1000 (mV/Hz)
    assert wv[0, 0] == 0.0
    mu, sg = c.stationary_input([10.0])
    assert mu[0] == pytest.approx(5.0 + 0.4) and np.isnan(sg[0])


@pytest.mark.parametrize("make, match", [
    (lambda p: Circuit([Cohort("E", p)], [Pathway("E", "X", 0.1, 10)]), "unknown target cohort 'X'"),
    (lambda p: Circuit([Cohort("E", p)], [Pathway("Y", "E", 0.1, 10)]), "unknown source cohort 'Y'"),
    (lambda p: Pathway("E", "E", 0.1, -3), "`in_degree` must be a positive integer"),
    (lambda p: Pathway("E", "E", 0.1, 2.5), "`in_degree` must be a positive integer"),
    (lambda p: Pathway("E", "E", 0.1, 10, delay=-1.0), "`delay` must be >= 0"),
    (lambda p: Pathway("E", "E", 0.1, 10, tau_syn=-2.0), "`tau_syn` must be >= 0"),
    (lambda p: Pathway("E", "E", float("nan"), 10), "`weight` must be finite"),
    (lambda p: Pathway("", "E", 0.1, 10), "`source` must be a non-empty string"),
    (lambda p: Circuit([Cohort("E", p), Cohort("E", p)]), "names must be unique"),
    (lambda p: Circuit([]), "at least one Cohort"),
    (lambda p: Circuit([Cohort("E", p, size=10)], [Pathway("E", "E", 0.1, 10)]), "exceeds the 9 distinct"),
    (lambda p: Cohort("E", p, size=0), "`size` must be a positive integer"),
    (lambda p: Cohort("E", p, sigma_ext=-1.0), "`sigma_ext` must be >= 0"),
    (lambda p: Cohort("E", "not a population"), "`population` must be a popdens.Population"),
    (lambda p: Cohort("E", popdens.Population(LIF_E, popdens.EscapeNoise(popdens.hazard.Exponential(1., 1.))),
                        sigma_ext=2.0), "`sigma_ext` applies to white-noise"),
    (lambda p: PoissonBackground(rate=-1.0, weight=0.1, count=5), "`rate` must be >= 0"),
    (lambda p: Circuit([Cohort("E", p)]).index("Q"), "unknown cohort 'Q'"),
])
def test_validation_errors_name_the_problem(make, match):
    pop = popdens.Population(LIF_E, popdens.WhiteNoise(5.0))
    with pytest.raises(ValueError, match=match):
        make(pop)


def test_integrator_errors():
    c = ei_circuit(delay=0.05)
    with pytest.raises(ValueError, match="shorter than the step"):
        simulate_network(c, 10.0, dt=0.1)
    with pytest.raises(ValueError, match="whole number"):
        montecarlo_network(ei_circuit(delay=0.15), 10.0, dt=0.1)
    with pytest.raises(ValueError, match="`initial_rates`"):
        simulate_network(ei_circuit(), 10.0, initial_rates=[1.0])
    with pytest.raises(ValueError, match="unknown cohort"):
        simulate_network(ei_circuit(), 10.0, solver_options={"Z": {}})
    with pytest.raises(ValueError, match="`circuit`"):
        montecarlo_network("E-I", 10.0)
    pop0 = popdens.Population(LIF_E, popdens.WhiteNoise(5.0))
    with pytest.raises(ValueError, match="sigma > 0"):
        simulate_network(Circuit([Cohort("E", pop0, sigma_ext=0.0)]), 10.0)


# --------------------------------------------------------------------------- mean-field integration
def test_mean_field_integration_settles_on_the_siegert_fixed_point():
    # Siegert self-consistency (Brunel 2000) solved independently with scipy; the Fokker-Planck
    # network integration must settle on it (FP discretisation error ~1e-4 relative, measured)
    c = ei_circuit(g=5.0, drive=18.0)
    r_star = siegert_fixed_point(c, [10.0, 10.0])
    res = simulate_network(c, 300.0, initial_rates=[0.0, 0.0], record_interval=1.0)
    assert res.success and res.diagnostics["mass_error"] < 1e-9
    assert res.rate[:, -1] == pytest.approx(r_star, rel=2e-3)
    mu, sg = c.stationary_input(res.rate[:, -1])
    assert res.mu[:, -1] == pytest.approx(mu, rel=1e-4) and res.sigma[:, -1] == pytest.approx(sg, rel=1e-4)


def test_mean_field_filter_and_delay_against_closed_form():
    # An escape population with a vanishing coupling does not change its rate; the exponential filter
    # of a delayed step is 1 - exp(-(t - d)/tau_s) (closed form), checked through the recorded drive.
    esc = popdens.Population(LIF_E, popdens.EscapeNoise(popdens.hazard.Exponential(20.0, 2.0)))
    src = Cohort("S", esc, size=10, drive=popdens.drive.Step(t=5.0, before=10.0, after=25.0))
    tgt = Cohort("T", esc, size=10, drive=0.0)
    c = Circuit([src, tgt], [Pathway("S", "T", 1e-9, 1, delay=3.0, tau_syn=4.0)])
    res = simulate_network(c, 60.0, dt=0.05)
    r_s = res.rate_of("S")
    # drive of T per unit coupling equals the filtered, delayed rate of S
    filt = (res.mu[1] - 0.0) / (20.0 * 1e-9 * 1 * 1e-3)
    # reference: filter the solver's own rate of S (step means at midpoints, linear interpolation)
    t = res.t
    # past rate 0 (initial_rates default), step means at step midpoints, linear in between
    mids = np.concatenate([[-0.025], t[1:] - 0.025])
    vals = np.concatenate([[0.0], r_s[1:]])
    a = lambda s: np.interp(s - 3.0, mids, vals, left=0.0)
    # reference ODE tau_s s' = a(t - d) - s solved by scipy (solve_ivp, rtol 1e-10)
    from scipy.integrate import solve_ivp
    sol = solve_ivp(lambda ti, y: (a(ti) - y) / 4.0, (0.0, 60.0), [0.0], t_eval=t[::100], rtol=1e-10,
                    atol=1e-10, max_step=0.05)
    ref = sol.y[0]
    assert filt[::100] == pytest.approx(ref, rel=2e-3, abs=1e-3)


# --------------------------------------------------------------------------- Monte Carlo twin
def test_montecarlo_network_reproducible_and_seed_sensitive():
    c = ei_circuit(n_e=400, n_i=100, c_e=40, c_i=10)
    a = montecarlo_network(c, 50.0, seed=7, burn_in=20.0, record_spikes=True)
    b = montecarlo_network(c, 50.0, seed=7, burn_in=20.0, record_spikes=True)
    d = montecarlo_network(c, 50.0, seed=8, burn_in=20.0, record_spikes=True)
    assert np.array_equal(a.spike_times, b.spike_times) and np.array_equal(a.spike_ids, b.spike_ids)
    assert np.array_equal(a.rate[:, 1:], b.rate[:, 1:])
    assert not (a.spike_times.size == d.spike_times.size and np.array_equal(a.spike_ids, d.spike_ids))
    # bookkeeping: every spike counted in its cohort's rate
    n_e_spk = np.sum(a.spike_ids < 400)
    assert n_e_spk == pytest.approx(np.sum(a.rate_of("E")[1:]) * 400 * 0.1e-3, abs=1e-6)


def test_fixed_in_degree_connectivity():
    from popdens.twins._escape import seed_compiled_rng
    from popdens.twins._network import csr_by_source, draw_in_degree

    seed_compiled_rng(3)
    src = draw_in_degree(50, 60, 20, True, np.arange(60, dtype=np.int32)).reshape(50, 20)
    for t in range(50):
        assert len(set(src[t])) == 20 and t not in src[t]  # distinct partners, no self-connection
    ptr, tg = csr_by_source(src.ravel(), 20, 60)
    assert ptr[-1] == 1000
    for s in range(60):
        assert all(s in src[t] for t in tg[ptr[s]:ptr[s + 1]])


def test_montecarlo_single_neuron_limit_matches_siegert():
    # no pathways, weak coupling absent: each neuron is an independent LIF with white noise.
    # Siegert formula (Brunel 2000) vs N = 2000 neurons over 1 s; Poisson SE sqrt(nu / (N T)) ~ 0.1 Hz.
    pop = popdens.Population(LIF_E, popdens.WhiteNoise(4.0))
    c = Circuit([Cohort("E", pop, size=2000, drive=19.0)])
    res = montecarlo_network(c, 1000.0, seed=11, burn_in=100.0)
    nu = siegert(19.0, 4.0)
    se = math.sqrt(nu / (2000 * 1.0))
    assert abs(res.mean_rate()[0] - nu) < 4 * se + 0.005 * nu  # 4 SE plus the O(dt) bias of the step


def test_sparse_ei_network_mean_field_vs_montecarlo():
    # Asynchronous irregular state of a sparse E-I network: mean-field (Siegert) rates vs the spiking
    # network within 5 % (finite-size and shot-noise corrections of the diffusion approximation are
    # O(J/sigma) ~ 2 % here; Poisson SE of the 1 s mean ~ 0.5 %)
    c = ei_circuit(n_e=2000, n_i=500, c_e=200, c_i=50, j=0.1, g=4.0, drive=18.0, sigma=5.0)
    r_star = siegert_fixed_point(c, [10.0, 10.0])
    res = montecarlo_network(c, 1000.0, seed=5, burn_in=200.0, record_interval=1.0)
    assert res.mean_rate() == pytest.approx(r_star, rel=0.05)
    assert res.diagnostics["n_synapses"] == 2500 * 250


def test_poisson_background_matches_its_diffusion_approximation():
    # Poisson input of rate nu_x through C_x synapses of weight J_x equals white noise with
    # mu = tau J C nu, sigma^2 = tau J^2 C nu (Brunel 2000); J_x = 0.1 mV << sigma keeps shot-noise
    # corrections small. Siegert reference, N = 2000, 1 s; 4 SE + 3 % for the diffusion approximation.
    pop = popdens.Population(LIF_E, popdens.WhiteNoise(1.0))
    bg = PoissonBackground(rate=10.0, weight=0.1, count=900)  # mu = 18 mV, sigma = sqrt(18*0.1) mV
    c = Circuit([Cohort("E", pop, size=2000, drive=0.0, sigma_ext=0.0, background=bg)])
    mu, sg = c.stationary_input([0.0])
    assert mu[0] == pytest.approx(18.0) and sg[0] == pytest.approx(math.sqrt(1.8))
    res = montecarlo_network(c, 1000.0, seed=2, burn_in=100.0)
    nu = siegert(mu[0], sg[0])
    assert abs(res.mean_rate()[0] - nu) < 4 * math.sqrt(nu / 2000) + 0.03 * nu


def test_result_plot_and_save(tmp_path):
    res = simulate_network(ei_circuit(), 5.0)
    ax = res.plot()
    assert len(ax.get_lines()) == 2 and "Hz" in ax.get_ylabel()
    path = res.save(tmp_path / "run")
    with np.load(path) as data:
        assert np.array_equal(data["rate"], res.rate)
    assert isinstance(res, CircuitResult) and "mean-field" in repr(res)


def test_escape_noise_network_mean_field_vs_montecarlo():
    # Escape-noise cohorts receive the mean recurrent input only in the mean field; with many weak
    # synapses (J = 0.05 mV, C = 100) the spiking twin's shot noise is small against the escape noise.
    # Reference: refractory-density integration; Poisson SE of the 1 s mean with N = 2000 ~ 0.1 Hz;
    # tolerance 4 SE + 2 % (shot noise, measured).
    esc = popdens.Population(LIF_E, popdens.EscapeNoise(popdens.hazard.Exponential(20.0, 2.0)))
    c = Circuit([Cohort("X", esc, size=2000, drive=16.0), Cohort("Y", esc, size=1000, drive=17.0)],
                [Pathway("X", "Y", 0.05, 100, 1.0), Pathway("Y", "X", -0.05, 100, 2.0, tau_syn=3.0),
                 Pathway("X", "X", 0.05, 100, 1.0)])
    mf = simulate_network(c, 400.0, record_interval=1.0)
    mc = montecarlo_network(c, 1000.0, seed=4, burn_in=200.0)
    ref = mf.rate[:, -1]
    for k, n in enumerate((2000, 1000)):
        se = math.sqrt(ref[k] / (n * 1.0))
        assert abs(mc.mean_rate()[k] - ref[k]) < 4 * se + 0.02 * ref[k]


def test_step_response_of_the_network_mean_field_vs_montecarlo():
    # A step of the external drive of E: both rates over time (5 ms bins) from the mean-field
    # integration vs the spiking network. Tolerance per bin: 5 SE (Poisson SE sqrt(nu / (N T_bin)))
    # plus 5 % of the rate for the finite-size and shot-noise corrections of the diffusion approximation,
    # with exponential synapses (tau_syn = 1 ms) on every pathway.
    c0 = ei_circuit(n_e=4000, n_i=1000, c_e=200, c_i=50, g=4.0, tau_syn=1.0)
    e = c0.cohorts[0]
    step = popdens.drive.Step(t=100.0, before=16.0, after=20.0)
    c = Circuit([Cohort("E", e.population, size=4000, drive=step), c0.cohorts[1]], c0.pathways)
    fp = fixed_points_of(c)
    mf = simulate_network(c, 300.0, initial_rates=fp, record_interval=5.0)
    mc = montecarlo_network(c, 300.0, seed=9, burn_in=300.0, record_interval=5.0)
    for k, n in enumerate((4000, 1000)):
        se = np.sqrt(mf.rate[k, 1:] / (n * 5e-3))
        # A recurrent network amplifies the Poisson fluctuations of its rate (finite-size noise fed
        # back through the loop; Brunel & Hakim 1999): the Poisson SE is scaled by the ratio of the
        # twin's bin-to-bin spread to it, measured on the plateaus before (5-95 ms) and after
        # (150-300 ms) the step, where the mean field is constant (ratio 1 to 4 here); the second
        # ratio also applies to the rise.
        err = np.abs(mc.rate[k, 1:] - mf.rate[k, 1:])
        t = mc.t[1:]
        for plateau, part in (((t > 5.0) & (t < 95.0), t < 100.0), (t > 150.0, t >= 100.0)):
            se[part] *= max(1.0, float(np.std(mc.rate[k, 1:][plateau], ddof=1) / np.mean(se[plateau])))
        assert np.all(err < 5 * se + 0.05 * mf.rate[k, 1:])
    # the step is visible: the E rate rises by more than 15 of its SE
    assert mf.rate[0, -1] - mf.rate[0, 10] > 15 * math.sqrt(mf.rate[0, -1] / (4000 * 5e-3))


def fixed_points_of(c):
    return siegert_fixed_point(c, [10.0, 10.0])


def test_blocked_mean_field_steps_equal_single_steps(monkeypatch):
    # advancing the solvers over blocks shorter than the delay must give the same numbers as single steps
    import popdens.network.integrate as net

    c = ei_circuit(g=5.0, drive=18.0, tau_syn=0.7, delay=1.0)
    d = popdens.drive.Step(t=5.0, before=18.0, after=21.0)
    c = Circuit([Cohort("E", c.cohorts[0].population, size=2000, drive=d), c.cohorts[1]], c.pathways)
    a = simulate_network(c, 30.0, initial_rates=[3.0, 8.0])
    monkeypatch.setattr(net, "MAX_BLOCK_STEPS", 1)
    b = simulate_network(c, 30.0, initial_rates=[3.0, 8.0])
    assert np.allclose(a.rate, b.rate, rtol=1e-12, atol=1e-12)
    assert np.allclose(a.mu, b.mu, rtol=1e-13)


def test_mixed_models_and_noise_in_one_network():
    # LIF and EIF with white noise and a LIF with escape noise coupled weakly in one circuit: each
    # cohort's parameters must reach the compiled kernel. Mean-field integration (dt = 0.05 ms) vs the
    # spiking twin: 4 Poisson SE (N = 1000, 0.5 s) + 3 % (Euler-Maruyama bias for the EIF and shot noise).
    eif = popdens.EIF(tau_m=10.0, soft_threshold=-50.0, slope_factor=2.0, cutoff=-30.0, reset=-60.0,
                      refractory=1.0, rest=-65.0)
    pops = {
        "L": popdens.Population(LIF_E, popdens.WhiteNoise(4.0)),
        "F": popdens.Population(eif, popdens.WhiteNoise(3.0)),
        "X": popdens.Population(LIF_E, popdens.EscapeNoise(popdens.hazard.Exponential(20.0, 2.0))),
    }
    drives = {"L": 18.0, "F": 12.0, "X": 16.0}
    asm = [Cohort(k, p, size=1000, drive=drives[k]) for k, p in pops.items()]
    pw = [Pathway("L", "F", 0.05, 100, 1.0), Pathway("F", "X", 0.05, 100, 1.5, tau_syn=2.0),
          Pathway("X", "L", -0.05, 100, 1.0)]
    c = Circuit(asm, pw)
    mf = simulate_network(c, 150.0, dt=0.05, record_interval=1.0)
    mc = montecarlo_network(c, 500.0, dt=0.05, seed=21, burn_in=100.0)
    ref = mf.rate[:, -1]
    assert np.all(ref > 2.0)  # every cohort fires
    for k in range(3):
        assert abs(mc.mean_rate()[k] - ref[k]) < 4 * math.sqrt(ref[k] / 500) + 0.03 * ref[k], c.names[k]


def test_synapse_kinds_are_validated_and_unsupported_analyses_say_so():
    pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(3.0))
    with pytest.raises(ValueError, match="`synapse`"):
        Pathway("E", "E", 0.1, 10, synapse="chemical")
    with pytest.raises(ValueError, match="`reversal`"):
        Pathway("E", "E", 0.1, 10, tau_syn=2.0, synapse="conductance")
    with pytest.raises(ValueError, match="`reversal` applies"):
        Pathway("E", "E", 0.1, 10, reversal=70.0)
    with pytest.raises(ValueError, match="`tau_syn`"):
        Pathway("E", "E", 0.1, 10, tau_syn=2.0, synapse="shot")
    with pytest.raises(ValueError, match="`weight`"):
        Pathway("E", "E", -0.1, 10, tau_syn=2.0, synapse="conductance", reversal=-10.0)
    with pytest.raises(ValueError, match="one `synapse` kind"):
        Circuit([Cohort("E", pop, size=50)], [Pathway("E", "E", 0.1, 10), Pathway("E", "E", 0.2, 10, synapse="shot")])
    c = Circuit([Cohort("E", pop, size=50, sigma_ext=0.0)], [Pathway("E", "E", 0.1, 10, synapse="shot")])
    assert c.synapse_kind(0) == "shot"
