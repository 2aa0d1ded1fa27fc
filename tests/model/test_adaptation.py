"""Adaptation components: validation, records, the neuron models' ``adaptation`` list and scenario keys."""

from __future__ import annotations

import copy

import pytest

import popdens
from popdens import hazard
from popdens.exceptions import ScenarioError
from popdens.scenario.loader import parse_scenario

ESCAPE = popdens.EscapeNoise(hazard.Exponential(rate=20.0, width=2.0))


@pytest.mark.parametrize("kwargs,name", [
    (dict(tau=0.0, jump=1.0), "tau"), (dict(tau=-5.0, jump=1.0), "tau"), (dict(tau="x", jump=1.0), "tau"),
    (dict(tau=100.0, jump=-0.1), "jump"), (dict(tau=100.0, jump=float("nan")), "jump"),
    (dict(tau=100.0, jump=1.0, coupling=-0.5), "coupling"),
])
def test_adaptation_validation_names_the_parameter(kwargs, name):
    with pytest.raises(ValueError, match=f"`{name}`"):
        popdens.Adaptation(**kwargs)


def test_moving_threshold_validation_and_records():
    with pytest.raises(ValueError, match="`tau`"):
        popdens.MovingThreshold(tau=0.0, jump=1.0)
    th = popdens.MovingThreshold(tau=50.0, jump=2.0)
    assert th.parameters() == {"kind": "threshold", "tau": 50.0, "jump": 2.0}


@pytest.mark.parametrize("model", [
    lambda ad: popdens.LIF(10.0, 20.0, 0.0, 2.0, adaptation=ad),
    lambda ad: popdens.EIF(10.0, 15.0, 2.0, 30.0, 0.0, 2.0, adaptation=ad),
    lambda ad: popdens.QIF(10.0, 15.0, 30.0, 0.0, 2.0, adaptation=ad),
    lambda ad: popdens.PIF(10.0, 20.0, 0.0, 2.0, adaptation=ad),
    lambda ad: popdens.CustomNeuron("-u", 10.0, 20.0, 0.0, 2.0, adaptation=ad),
], ids=["LIF", "EIF", "QIF", "PIF", "custom"])
def test_every_neuron_model_takes_an_adaptation_list(model):
    ad = [popdens.Adaptation(tau=200.0, jump=0.5), popdens.MovingThreshold(tau=50.0, jump=1.0)]
    nrn = model(ad)
    assert nrn.adapting and nrn.adaptation == tuple(ad)
    assert nrn.adaptation_currents == (ad[0],) and nrn.moving_thresholds == (ad[1],)
    assert nrn.parameters()["adaptation"][0] == {"kind": "current", "tau": 200.0, "jump": 0.5, "coupling": 0.0}
    assert "adaptation=[Adaptation(tau=200.0" in repr(nrn)
    plain = model(None)
    assert not plain.adapting and "adaptation" not in plain.parameters() and plain != nrn
    with pytest.raises(ValueError, match=r"`adaptation\[1\]`"):
        model([ad[0], 3.0])
    with pytest.raises(ValueError, match="`adaptation`"):
        model("fast")


def test_moving_threshold_needs_escape_noise():
    nrn = popdens.LIF(10.0, 20.0, 0.0, 2.0, adaptation=[popdens.MovingThreshold(tau=50.0, jump=1.0)])
    popdens.Population(nrn, ESCAPE)
    with pytest.raises(ValueError, match="`adaptation`.*escape noise"):
        popdens.Population(nrn, popdens.WhiteNoise(2.0))


BASE = {
    "neuron": {"model": "LIF", "tau_m": 10.0, "threshold": 20.0, "reset": 0.0, "refractory": 2.0,
               "adaptation": [{"tau": 100.0, "jump": 1.0, "coupling": 0.1},
                              {"kind": "threshold", "tau": 50.0, "jump": 2.0}]},
    "noise": {"kind": "escape", "hazard": {"shape": "exponential", "rate": 20.0, "width": 2.0}},
    "stationary": {"mu": 15.0},
}


def test_scenario_adaptation_keys_build_the_objects():
    sc = parse_scenario(copy.deepcopy(BASE), "adapt.toml")
    assert sc.population.neuron.adaptation == (popdens.Adaptation(100.0, 1.0, 0.1),
                                                popdens.MovingThreshold(50.0, 2.0))


@pytest.mark.parametrize("entry,key", [
    ({"tau": 100.0}, "jump"), ({"tau": 100.0, "jump": 1.0, "speed": 2.0}, "speed"),
    ({"kind": "threshold", "tau": 100.0, "jump": 1.0, "coupling": 0.1}, "coupling"),
    ({"kind": "spring", "tau": 100.0, "jump": 1.0}, "kind"), ({"tau": -1.0, "jump": 1.0}, "tau"),
    ({"tau": "slow", "jump": 1.0}, "tau"),
])
def test_malformed_adaptation_entries_name_the_key(entry, key):
    data = copy.deepcopy(BASE)
    data["neuron"]["adaptation"] = [entry]
    with pytest.raises(ScenarioError, match=f"`{key}`"):
        parse_scenario(data, "adapt.toml")


def test_scenario_refuses_a_moving_threshold_with_white_noise():
    data = copy.deepcopy(BASE)
    data["noise"] = {"kind": "white", "sigma": 2.0}
    with pytest.raises(ScenarioError, match="`adaptation`"):
        parse_scenario(data, "adapt.toml")
    data["neuron"]["adaptation"] = {"tau": 1.0}
    with pytest.raises(ScenarioError, match="neuron.adaptation"):
        parse_scenario(data, "adapt.toml")
