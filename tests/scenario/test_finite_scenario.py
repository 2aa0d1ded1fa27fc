"""Scenario keys of finite populations: ``[run] population_size``/``trials`` and ``[network] finite_size``."""

from __future__ import annotations

import json
import tomllib

import numpy as np
import pytest
from references import LIF_ESCAPE_TABLES

import popdens
from popdens.exceptions import ScenarioError
from popdens.scenario import load_scenario, parse_scenario, run_scenario

SINGLE = """
[scenario]
title = "finite population"
output = "out"
""" + LIF_ESCAPE_TABLES + """
[input]
shape = "step"
t = 50.0
before = 15.0
after = 22.0
[run]
t_end = 200.0
record_interval = 1.0
population_size = 100
trials = 3
seed = 4
"""


def test_finite_population_scenario_equals_the_script(tmp_path):
    path = tmp_path / "finite.toml"
    path.write_text(SINGLE)
    sc = load_scenario(path)
    assert (sc.population_size, sc.trials) == (100, 3)
    summary = run_scenario(sc)
    out = tmp_path / "out"
    for name in ("finite_size.csv", "finite_trials.png", "finite_spectrum.png", "report.html"):
        assert (out / name).exists(), name
    assert "finite_trials.png" in summary["files"] and summary["finite_size"]["trials"] == 3
    lines = [ln for ln in (out / "finite_size.csv").read_text().splitlines() if not ln.startswith("#")]
    names = lines[0].split(",")
    data = dict(zip(names, np.loadtxt(lines[1:], delimiter=",").T))
    ref = popdens.simulate(sc.population, sc.drive, 200.0, n=100, trials=3, seed=4, record_interval=1.0)
    # round trip: the CSV against the same simulate() call in memory (common practice)
    np.testing.assert_allclose(data["trial_mean_Hz"], ref.trial_mean(), rtol=1e-10)
    assert "Finite population of 100 neurons" in (out / "report.html").read_text()
    assert json.loads((out / "summary.json").read_text())["settings"]["population_size"] == 100


@pytest.mark.parametrize("edit,key", [
    (("population_size = 100", "population_size = 0"), "population_size"),
    (("population_size = 100", "population_size = 1.5"), "population_size"),
    (("trials = 3", "trials = -2"), "trials"),
    (("population_size = 100\n", ""), "trials"),
    (("trials = 3", "trials = 100000"), "trials"),
])
def test_bad_finite_keys_name_the_key(edit, key):
    with pytest.raises(ScenarioError, match=f"`{key}`"):
        parse_scenario(tomllib.loads(SINGLE.replace(*edit)))


def test_population_size_is_refused_for_white_noise():
    text = SINGLE.replace('kind = "escape"', 'kind = "white"\nsigma = 4.0').replace(
        '[noise.hazard]\nshape = "exponential"\nrate = 20.0\nwidth = 2.0\n', "")
    with pytest.raises(ScenarioError, match="`population_size`.*white noise"):
        parse_scenario(tomllib.loads(text))


def test_network_finite_size_needs_an_escape_cohort():
    text = """
[[cohort]]
name = "E"
neuron = { model = "LIF", tau_m = 20.0, threshold = 20.0, reset = 10.0, refractory = 2.0 }
noise = { kind = "white", sigma = 5.0 }
[network]
t_end = 10.0
finite_size = true
"""
    with pytest.raises(ScenarioError, match="`finite_size`"):
        parse_scenario(tomllib.loads(text))
