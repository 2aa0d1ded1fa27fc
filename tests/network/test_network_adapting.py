"""Networks with adapting cohorts: fixed points, stability and mean-field integration against the spiking twin."""

from __future__ import annotations

import math

import numpy as np
import pytest

import popdens
from popdens.network import Circuit, Cohort, Pathway

ESCAPE = popdens.EscapeNoise(popdens.hazard.Exponential(20.0, 2.0))


def ei_adapting(jump=1.0, tau=100.0):
    """Escape-noise E-I circuit whose excitatory cohort adapts (invented numbers)."""
    e = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0, adaptation=[popdens.Adaptation(tau=tau, jump=jump)]),
                           ESCAPE)
    i = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0), ESCAPE)
    return Circuit([Cohort("E", e, size=2000, drive=19.0), Cohort("I", i, size=1000, drive=17.0)],
                   [Pathway("E", "I", 0.05, 100, 1.0), Pathway("I", "E", -0.05, 100, 2.0, tau_syn=3.0),
                    Pathway("E", "E", 0.05, 100, 1.0)])


def test_adapting_ei_network_fixed_point_mean_field_and_twin_agree():
    """Fixed point from the adapted gain (spike-weighted closure); the mean-field integration settles on it
    (the solver's closure, within its dt error); the spiking twin's 1 s mean within 5 % (shot noise of
    J = 0.05 mV synapses, measured ~2 %, plus 4 Poisson SE sqrt(r / (N T)))."""
    c = ei_adapting()
    fps = popdens.fixed_points(c)
    assert len(fps) == 1
    ref = fps[0].rates
    mf = popdens.simulate_network(c, 600.0, record_interval=1.0)
    np.testing.assert_allclose(mf.rate[:, -1], ref, rtol=2e-3)
    mc = popdens.montecarlo_network(c, 1000.0, seed=4)
    for k, n in enumerate((2000, 1000)):
        se = math.sqrt(ref[k] / (n * 1.0))
        assert abs(mc.mean_rate()[k] - ref[k]) < 4 * se + 0.05 * ref[k]
    # adaptation lowers the excitatory rate against the same circuit without it
    assert ref[0] < 0.8 * popdens.fixed_points(ei_adapting(jump=0.0))[0].rates[0]


def up_down_circuit(drive=20.0):
    """One strongly recurrent excitatory cohort with slow, strong adaptation (invented numbers)."""
    pop = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0, adaptation=[popdens.Adaptation(tau=300.0, jump=2.0)]),
                             popdens.EscapeNoise(popdens.hazard.Exponential(10.0, 2.0)))
    return Circuit([Cohort("E", pop, size=2000, drive=drive)], [Pathway("E", "E", 0.5, 100, 1.5)])


@pytest.mark.slow
def test_adaptation_driven_slow_oscillation_is_predicted_and_seen_in_the_twin():
    """Recurrent excitation against slow adaptation: the fixed point is unstable with a slow leading root
    (measured 1.37 Hz), and both the mean-field integration and the spiking twin switch between a silent
    and a high-rate state (Up/Down-like) with a spectral peak near it (within 30 %: the linear frequency
    of an unstable point and the period of the relaxation cycle it leads to differ)."""
    c = up_down_circuit()
    fp = popdens.fixed_points(c)[0]
    st = popdens.stability(c, fp)
    assert not st.stable
    f_pred = float(st.frequency)
    assert 0.3 < f_pred < 5.0
    mc = popdens.montecarlo_network(c, 6000.0, seed=1, record_interval=5.0)
    r = mc.rate[0, 1:]
    assert r.max() > 10 * fp.rates[0] and np.mean(r < 0.2 * fp.rates[0]) > 0.3  # Up and Down phases
    spec = np.abs(np.fft.rfft(r - r.mean())) ** 2
    freqs = np.fft.rfftfreq(r.size, 5e-3)
    f_peak = freqs[1 + np.argmax(spec[1:])]
    assert f_peak == pytest.approx(f_pred, rel=0.3)
    # a weaker drive leaves a stable low-rate state: no oscillation
    calm = popdens.montecarlo_network(up_down_circuit(drive=16.0), 2000.0, seed=1, record_interval=5.0)
    assert calm.rate[0, 1:].max() < 10.0
