"""Conductance Monte Carlo twin: conductance moments (Campbell's theorem), the deterministic limit against the
LIF's closed-form period with the effective time constant, and the stationary-rate theories against the twin
(the table in the contributor guide comes from the slow test)."""

from __future__ import annotations

import math

import numpy as np
import pytest

import popdens
from popdens.twins._conductance import ConductanceEnsemble
from popdens.twins._escape import seed_compiled_rng
from references import window_isi_cv

LIF = popdens.LIF(20.0, 20.0, 10.0, 2.0)


def rate_and_se(mc, t_end):
    """Mean rate (Hz) and its standard error from the spread of per-neuron spike counts
    (independent neurons: SE = sample std / sqrt(N), central limit theorem)."""
    counts = np.bincount(mc.spike_ids, minlength=mc.n_neurons) / (t_end * 1e-3)
    return counts.mean(), counts.std(ddof=1) / np.sqrt(counts.size)


def noise_for(ge0, gi0, tau_e, tau_i):
    """Mean conductances ge0, gi0 (leak units) with w tau fixed (0.04, 0.25 ms), so that the white-limit
    intensity w^2 nu tau^2 = g0 w tau is the same for every pair of time constants."""
    we, wi = 0.04 / tau_e, 0.25 / tau_i
    return popdens.ConductanceNoise(exc_rate=ge0 / (we * tau_e) * 1e3, exc_weight=we, exc_tau=tau_e, exc_reversal=70.0,
                                    inh_rate=gi0 / (wi * tau_i) * 1e3, inh_weight=wi, inh_tau=tau_i,
                                    inh_reversal=-10.0)


def test_conductances_follow_campbells_theorem(rng):
    """After 15 time constants: mean w nu tau, variance w^2 nu tau / 2 across neurons (Campbell's theorem);
    SE of the mean from the sample std, of the variance from the spread of squared deviations."""
    noise = popdens.ConductanceNoise(4000.0, 0.05, 2.0, 70.0, inh_rate=1500.0, inh_weight=0.1, inh_tau=4.0,
                                     inh_reversal=-10.0)
    pop = popdens.Population(popdens.LIF(20.0, 1e3, 0.0, 0.0), noise)
    n = 20000
    ens = ConductanceEnsemble(pop, n, 0.05, rng)
    ens.g_e[:] = 0.0  # start empty: the stationary state must be reached by the dynamics
    ens.g_i[:] = 0.0
    seed_compiled_rng(4)
    no = (np.zeros(1), np.zeros(1, dtype=np.int64))
    ens.run(np.zeros(int(60.0 / 0.05) + 1), None, 0.0, False, *no, 0)
    for g, w, nu, tau in ((ens.g_e, 0.05, 4.0, 2.0), (ens.g_i, 0.1, 1.5, 4.0)):
        dev2 = (g - g.mean()) ** 2
        assert abs(g.mean() - w * nu * tau) < 4 * g.std() / math.sqrt(n)  # Campbell, 4 SE
        assert abs(dev2.mean() - w * w * nu * tau / 2) < 4 * dev2.std() / math.sqrt(n)  # Campbell, 4 SE


def test_deterministic_limit_fires_with_the_effective_time_constant():
    """Tiny weights at a huge rate: nearly constant conductances g_e0 = 1, g_i0 = 0.5 (relative s.d.
    sqrt(w / 2 g0) = 0.2 % and 0.3 %, slow: 20 ms), so the
    LIF relaxes to E_0 = (g_e0 E_e + g_i0 E_i)/G with tau_eff = tau_m/G, G = 2.5, and fires with the period
    t_ref + tau_eff ln((E_0 - reset)/(E_0 - threshold)) (closed form of the linear equation)."""
    noise = popdens.ConductanceNoise(5e6, 1e-5, 20.0, 70.0, inh_rate=2.5e6, inh_weight=1e-5, inh_tau=20.0,
                                     inh_reversal=-10.0)
    pop = popdens.Population(LIF, noise)
    g = 1.0 + 1.0 + 0.5
    e0 = (70.0 - 5.0) / g
    period = 2.0 + 20.0 / g * math.log((e0 - 10.0) / (e0 - 20.0))
    t_end = 200.0
    mc = popdens.montecarlo(pop, 0.0, t_end=t_end, n=10, seed=3, record_spikes=True, progress=False, burn_in=50.0,
                            dt=0.01)
    isi = mc.isis().mean()  # the neurons fire in step: counts in a window would be quantised
    # closed form; spikes are found at the end of 0.01 ms steps (0.1 % of the period) and the conductances
    # fluctuate by 0.2-0.3 %
    assert isi == pytest.approx(period, rel=3e-3)


def test_rate_against_the_twin_in_the_high_conductance_regime():
    """tau_eff = tau_m / 3.05 = 6.6 ms, synapses 0.5 / 1 ms: the 'filtered' theory within 4 SE of the twin
    (500 neurons, 1 s; SE ~1.3 %; the slow test below checks 3 % at SE 0.4 %), the naive current-based
    approximation more than 4 SE off (measured +21 %, table in the contributor guide)."""
    pop = popdens.Population(LIF, noise_for(0.8, 1.25, 0.5, 1.0))
    t_end = 1000.0
    mc = popdens.montecarlo(pop, 10.0, t_end=t_end, n=500, seed=11, record_spikes=True, progress=False,
                            burn_in=200.0)
    r, se = rate_and_se(mc, t_end)
    theory = float(popdens.gain(pop, 10.0))
    naive = float(popdens.gain(pop, 10.0, method="current-based"))
    print(f"twin {r:.4g} +- {se:.2g} Hz, filtered {theory:.4g}, current-based {naive:.4g}")
    assert abs(theory - r) < 4 * se  # twin, 4 SE
    assert abs(naive - r) > 4 * se  # twin, 4 SE: the correction matters here
    # ISI CV of the effective renewal problem against the twin's intervals, weighted for the 1 s window
    # (about 12 mean intervals: unweighted, long intervals are under-represented); SE from 20 groups of
    # neurons.  Measured with 1000 neurons x 2 s: 0.798 vs 0.794 +- 0.005 (unweighted)
    twin_cv, twin_se = window_isi_cv(mc.spike_ids, mc.spike_times, t_end, mc.n_neurons)
    cv = popdens.stationary(pop, 10.0).cv
    print(f"ISI CV: twin {twin_cv:.4f} +- {twin_se:.4f}, effective renewal {cv:.4f}")
    assert abs(cv - twin_cv) < 4 * twin_se  # twin, 4 SE


def test_step_size_bias_is_small():
    """The same neurons at dt = 0.02 and 0.01 ms give rates within 4 combined SE (step bias below the noise)."""
    pop = popdens.Population(LIF, noise_for(0.8, 1.25, 0.5, 1.0))
    t_end = 500.0
    out = []
    for dt in (0.02, 0.01):
        mc = popdens.montecarlo(pop, 10.0, t_end=t_end, n=300, seed=5, record_spikes=True, progress=False,
                                burn_in=100.0, dt=dt)
        out.append(rate_and_se(mc, t_end))
    (r1, s1), (r2, s2) = out
    assert abs(r1 - r2) < 4 * math.hypot(s1, s2)  # twin, 4 combined SE


REGIMES = {  # mean conductances (leak units) and drive (mV): tau_eff = tau_m / 2, / 3.05, / 4.5
    "G2": (0.4, 0.6, 14.0), "G3": (0.8, 1.25, 10.0), "G4.5": (1.4, 2.1, 4.0),
}
TAUS = [(0.2, 0.4), (0.5, 1.0), (1.0, 2.0), (2.0, 5.0)]


@pytest.mark.slow
@pytest.mark.parametrize("regime", sorted(REGIMES))
def test_rate_against_the_twin_over_synaptic_time_constants(regime):
    """The table in the contributor guide: 2000 neurons, 2 s (SE 0.3-0.6 %).  Where the synaptic time
    constants are short against tau_eff (tau_i / tau_eff <= 0.25, where the first-order boundary shift holds
    for current input too) the 'filtered' rate is within 3 % of the twin; the 'diffusion' (no shift) and
    naive current-based errors are printed beside it."""
    ge0, gi0, mu = REGIMES[regime]
    t_end = 2000.0
    for tau_e, tau_i in TAUS:
        noise = noise_for(ge0, gi0, tau_e, tau_i)
        pop = popdens.Population(LIF, noise)
        mc = popdens.montecarlo(pop, mu, t_end=t_end, n=2000, seed=3, record_spikes=True, progress=False,
                                burn_in=300.0)
        r, se = rate_and_se(mc, t_end)
        rates = {m: float(popdens.gain(pop, mu, method=m)) for m in ("filtered", "diffusion", "current-based")}
        ratio = tau_i / noise.effective_time_constant(20.0)
        print(f"{regime} tau {tau_e}/{tau_i} ms (tau_i/tau_eff {ratio:.3f}): twin {r:.3f} +- {se:.3f} Hz; "
              + ", ".join(f"{m} {100 * (v - r) / r:+.1f} %" for m, v in rates.items()))
        if ratio <= 0.25:
            assert abs(rates["filtered"] - r) < 0.03 * r  # twin (SE <= 0.6 %): 3 % target


@pytest.mark.slow
@pytest.mark.parametrize("f", [10.0, 100.0])
def test_transfer_against_the_twin(f):
    """The 'filtered' transfer function (tau_eff = 6.6 ms, synapses 0.5 / 1 ms) against a twin of 20000
    neurons driven by mu + 0.5 sin(2 pi f t) (SE of the fitted coefficients sqrt(2/M) x residual s.d.): within
    4 SE at 10 Hz (2 pi f tau_i = 0.06; measured 2.8 SE in amplitude, 1.1 SE in phase); at 100 Hz (0.63) the
    first-order theory is reported, not required (measured 19 % low and 0.3 rad late)."""
    from test_montecarlo_coloured import sine_response

    pop = popdens.Population(LIF, noise_for(0.8, 1.25, 0.5, 1.0))
    amp, ph, se_a, se_p = sine_response(pop, 10.0, f, 0.5, 20000, 0.02, 0.5, 5)
    chi = popdens.transfer(pop, 10.0, [f])[0]
    print(f"{f:g} Hz: twin {amp:.4f} +- {se_a:.4f} Hz/mV, {ph:.3f} +- {se_p:.3f} rad; theory {abs(chi):.4f}, "
          f"{np.angle(chi):.3f}")
    if f <= 10.0:
        assert abs(amp - abs(chi)) < 4 * se_a  # twin, 4 SE
        assert abs(ph - np.angle(chi)) < 4 * se_p  # twin, 4 SE
