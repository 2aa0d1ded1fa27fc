"""Coloured noise: the model object, its boundary shift and the white-noise equivalent."""

from __future__ import annotations

import math

import mpmath
import pytest

import popdens
from popdens.model.effective import shifted_neuron, white_equivalent
from popdens.model.synaptic import ALPHA, ZETA_HALF


def test_alpha_is_sqrt2_times_abs_zeta_half():
    # Riemann zeta(1/2) by mpmath; alpha = sqrt(2)|zeta(1/2)| (Brunel & Sergi 1998; Fourcaud & Brunel 2002)
    z = float(mpmath.zeta(0.5))
    assert abs(ZETA_HALF - z) < 1e-15
    assert abs(ALPHA - math.sqrt(2.0) * abs(z)) < 1e-14
    assert abs(ALPHA - 2.0653) < 1e-4  # the value quoted by Fourcaud & Brunel 2002


def test_boundary_shift_formula():
    # shift = sigma alpha/2 sqrt(tau_s/tau_m), written out
    n = popdens.ColouredNoise(3.0, 5.0)
    assert n.boundary_shift(20.0) == pytest.approx(3.0 * 0.5 * 2.0653 * math.sqrt(5.0 / 20.0), rel=1e-4)
    assert n.boundary_shift(20.0, sigma=6.0) == pytest.approx(2.0 * n.boundary_shift(20.0), rel=1e-14)


@pytest.mark.parametrize("kwargs,key", [({"sigma": 0.0, "tau_syn": 2.0}, "sigma"),
                                        ({"sigma": 2.0, "tau_syn": 0.0}, "tau_syn"),
                                        ({"sigma": 2.0, "tau_syn": float("nan")}, "tau_syn"),
                                        ({"sigma": "x", "tau_syn": 1.0}, "sigma")])
def test_bad_parameters_are_named(kwargs, key):
    with pytest.raises(ValueError, match=f"`{key}`"):
        popdens.ColouredNoise(**kwargs)


def test_population_accepts_coloured_noise_and_its_white_equivalent_shifts_the_lif():
    lif = popdens.LIF(20.0, 20.0, 10.0, 2.0)
    pop = popdens.Population(lif, popdens.ColouredNoise(4.0, 2.0))
    w = white_equivalent(pop)
    d = 4.0 * 0.5 * ALPHA * math.sqrt(0.1)
    assert isinstance(w.noise, popdens.WhiteNoise) and w.noise.sigma == 4.0
    assert w.neuron.threshold == pytest.approx(20.0 + d, abs=1e-12)
    assert w.neuron.reset == pytest.approx(10.0 + d, abs=1e-12)
    assert (w.neuron.tau_m, w.neuron.refractory, w.neuron.rest) == (20.0, 2.0, 0.0)


def test_shifted_neuron_keeps_its_adaptation():
    """An adapting neuron under coloured noise: the boundary moves, the adaptation components stay."""
    comp = popdens.Adaptation(tau=100.0, jump=1.0)
    nrn = popdens.LIF(20.0, 20.0, 10.0, 2.0, adaptation=[comp])
    s = shifted_neuron(nrn, 0.5)
    assert (s.threshold, s.reset) == (20.5, 10.5)
    assert list(s.adaptation) == [comp]


def test_cutoff_models_are_not_shifted():
    eif = popdens.EIF(20.0, 15.0, 2.0, 30.0, 10.0, 2.0)
    w = white_equivalent(popdens.Population(eif, popdens.ColouredNoise(4.0, 2.0)))
    assert w.neuron == eif and w.noise == popdens.WhiteNoise(4.0)
    with pytest.raises(ValueError, match="cut-off"):
        shifted_neuron(eif, 0.7)


def test_time_varying_sigma_needs_a_number_for_the_shift():
    pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0),
                             popdens.ColouredNoise(popdens.drive.Sine(4.0, 1.0, 5.0), 2.0))
    with pytest.raises(ValueError, match="constant `sigma`"):
        white_equivalent(pop)
    with pytest.raises(ValueError, match="constant `sigma`"):
        pop.noise.boundary_shift(20.0)
