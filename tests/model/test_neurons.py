"""Neuron models: drifts against their defining equations, parameter validation."""

from __future__ import annotations

import math

import numpy as np
import pytest

import popdens


def test_drifts_match_defining_equations():
    u = np.linspace(-70.0, -40.0, 7)
    lif = popdens.LIF(tau_m=20.0, threshold=-50.0, reset=-65.0, refractory=2.0, rest=-70.0)
    np.testing.assert_allclose(lif.drift(u), -(u + 70.0))
    eif = popdens.EIF(tau_m=20.0, soft_threshold=-50.0, slope_factor=2.0, cutoff=-30.0, reset=-65.0,
                      refractory=2.0, rest=-70.0)
    np.testing.assert_allclose(eif.drift(u), -(u + 70.0) + 2.0 * np.exp((u + 50.0) / 2.0))
    np.testing.assert_allclose(eif.drift_slope(u), -1.0 + np.exp((u + 50.0) / 2.0))
    qif = popdens.QIF(tau_m=20.0, critical=-50.0, cutoff=-30.0, reset=-65.0, refractory=2.0, rest=-70.0)
    np.testing.assert_allclose(qif.drift(u), (u + 70.0) * (u + 50.0) / 20.0)
    # slope -1 at rest, +1 at the critical point (definition in the docstring)
    assert qif.drift_slope(-70.0) == pytest.approx(-1.0) and qif.drift_slope(-50.0) == pytest.approx(1.0)
    pif = popdens.PIF(tau_m=20.0, threshold=-50.0, reset=-65.0, refractory=2.0)
    np.testing.assert_allclose(pif.drift(u), 0.0)
    custom = popdens.CustomNeuron("-(u - r) + k*(u - r)**2", tau_m=20.0, threshold=-50.0, reset=-65.0,
                                  refractory=2.0, parameters={"r": -70.0, "k": 0.05})
    np.testing.assert_allclose(custom.drift(u), -(u + 70.0) + 0.05 * (u + 70.0) ** 2)
    # derivative by sympy against a central difference
    eps = 1e-6
    np.testing.assert_allclose(custom.drift_slope(u), (custom.drift(u + eps) - custom.drift(u - eps)) / (2 * eps),
                               rtol=1e-6)


@pytest.mark.parametrize(
    "kwargs,name",
    [
        (dict(tau_m=0.0, threshold=20.0, reset=10.0, refractory=2.0), "tau_m"),
        (dict(tau_m=-5.0, threshold=20.0, reset=10.0, refractory=2.0), "tau_m"),
        (dict(tau_m=10.0, threshold=20.0, reset=20.0, refractory=2.0), "reset"),
        (dict(tau_m=10.0, threshold=20.0, reset=10.0, refractory=-1.0), "refractory"),
        (dict(tau_m=math.inf, threshold=20.0, reset=10.0, refractory=2.0), "tau_m"),
        (dict(tau_m=10.0, threshold=math.nan, reset=10.0, refractory=2.0), "threshold"),
        (dict(tau_m="10", threshold=20.0, reset=10.0, refractory=2.0), "tau_m"),
    ],
)
def test_invalid_lif_parameters_name_the_parameter(kwargs, name):
    with pytest.raises(ValueError, match=f"`{name}`"):
        popdens.LIF(**kwargs)


def test_invalid_other_models():
    with pytest.raises(ValueError, match="`slope_factor`"):
        popdens.EIF(10.0, -50.0, 0.0, -30.0, -65.0, 1.0)
    with pytest.raises(ValueError, match="`soft_threshold`"):
        popdens.EIF(10.0, -30.0, 2.0, -50.0, -65.0, 1.0)
    with pytest.raises(ValueError, match="`cutoff`"):
        popdens.EIF(10.0, -50.0, 0.01, 0.0, -65.0, 1.0)
    with pytest.raises(ValueError, match="`reset`"):
        popdens.EIF(10.0, -50.0, 2.0, -30.0, -20.0, 1.0)
    with pytest.raises(ValueError, match="`critical`"):
        popdens.QIF(10.0, 30.0, 20.0, 0.0, 1.0)
    with pytest.raises(ValueError, match="`rest`"):
        popdens.QIF(10.0, 10.0, 20.0, 0.0, 1.0, rest=15.0)
    with pytest.raises(ValueError, match="`reset`"):
        popdens.PIF(10.0, 1.0, 1.0, 0.0)
    with pytest.raises(popdens.ExpressionError, match="unknown name"):
        popdens.CustomNeuron("-(u - vr)", 10.0, 1.0, 0.0, 0.0)
    with pytest.raises(ValueError, match="not finite"):
        popdens.CustomNeuron("1/(u - 0.5)", 10.0, 1.0, 0.0, 0.0)
    with pytest.raises(ValueError, match="`neuron`"):
        popdens.Population("LIF", popdens.WhiteNoise(1.0))
    with pytest.raises(ValueError, match="`noise`"):
        popdens.Population(popdens.PIF(10.0, 1.0, 0.0, 0.0), "white")
    with pytest.raises(ValueError, match="`sigma`"):
        popdens.WhiteNoise(-1.0)
    with pytest.raises(ValueError, match="`hazard`"):
        popdens.EscapeNoise(3.0)
