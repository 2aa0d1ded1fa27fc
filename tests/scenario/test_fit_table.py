"""The [fit] table of a scenario: parsing, clear errors naming the key, and a run that writes the table."""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pytest

from popdens import ScenarioError
from popdens.scenario import load_scenario, run_scenario

SCENARIOS = Path(__file__).resolve().parents[2] / "scenarios"


def _copy(tmp_path):
    shutil.copytree(SCENARIOS / "fit_demo", tmp_path / "fit_demo")
    path = tmp_path / "fit.toml"
    shutil.copy(SCENARIOS / "fit_spike_trains.toml", path)
    return path


def test_fit_scenario_writes_the_parameter_table_and_figure(tmp_path):
    # the demo data were made by the twin with rate 20 Hz, width 2 mV, scale 3 mV per unit:
    # the estimates lie within 3 SE of them
    summary = run_scenario(load_scenario(_copy(tmp_path)), output=tmp_path / "out")
    fit = summary["fit"]
    for name, truth in (("rate", 20.0), ("width", 2.0), ("scale", 3.0)):
        assert abs(fit["estimates"][name] - truth) < 3 * fit["se"][name]
    lines = [ln for ln in (tmp_path / "out" / "fit.csv").read_text().splitlines() if not ln.startswith("#")]
    assert lines[0].split(",")[:2] == ["estimate", "se"]
    table = np.array([[float(x) for x in ln.split(",")] for ln in lines[1:]])
    assert table.shape[0] == 3 and np.all(table[:, 1] > 0)
    assert (tmp_path / "out" / "fit.png").is_file()
    assert "Fit to recorded data" in (tmp_path / "out" / "report.html").read_text()  # the embedded figure


@pytest.mark.parametrize("edit, needle", [
    (("kind = \"psth\"", "kind = \"likelihood\""), "`kind`"),
    (("data = \"fit_demo/spikes.csv\"", "data = \"../spikes.csv\""), "`data`"),
    (("data = \"fit_demo/spikes.csv\"", "data = \"fit_demo/none.csv\""), "`data`"),
    (("stimulus = \"fit_demo/stimulus.csv\"\n", ""), "`stimulus`"),
    (("scale = [0.5, 10.0]", "scale = [0.5, 10.0, 3.0]"), "`scale`"),
    (("duration = 2000.0", "duration = -1.0"), "`duration`"),
    (("offset = 20.0", "offset = 20.0\nprofil = true"), "`profil`"),
    (("offset = 20.0", "offset = 20.0\nhistory = -5.0"), "`history`"),
    (("offset = 20.0", "offset = 20.0\nhistory = 2000.0"), "`history`"),
    (("offset = 20.0", "offset = 20.0\nhistory = \"long\""), "`history`"),
])
def test_malformed_fit_tables_name_the_key(tmp_path, edit, needle):
    path = _copy(tmp_path)
    text = path.read_text()
    assert edit[0] in text
    path.write_text(text.replace(edit[0], edit[1]))
    with pytest.raises(ScenarioError, match=needle):
        load_scenario(path)


def test_a_fit_the_data_cannot_support_is_a_scenario_error(tmp_path):
    path = _copy(tmp_path)
    path.write_text(path.read_text().replace("free = {", "free = { sigma = 1.0, "))
    with pytest.raises(ScenarioError, match="sigma"):
        run_scenario(load_scenario(path), output=tmp_path / "out")


def test_history_reaches_the_fit(tmp_path):
    # a neuron without adaptation has no history to set: the fit says so, naming the key
    path = _copy(tmp_path)
    path.write_text(path.read_text().replace("offset = 20.0", "offset = 20.0\nhistory = 50.0"))
    with pytest.raises(ScenarioError, match="`history`"):
        run_scenario(load_scenario(path), output=tmp_path / "out")


def test_history_of_an_adapting_fit_matches_the_library_call(tmp_path):
    # an adapting population's spike trains written to CSV and fitted through the [fit] table with
    # `history` give the same estimates as fit_psth called on the arrays with that history (the
    # table only passes it on; a different history changes the counted spikes and the estimates)
    import popdens
    from popdens import SpikeTrains, drive, hazard

    cell = popdens.LIF(tau_m=10.0, threshold=20.0, reset=14.0, refractory=3.0,
                       adaptation=[popdens.Adaptation(tau=50.0, jump=2.0)])
    pop = popdens.Population(cell, popdens.EscapeNoise(hazard.Exponential(rate=20.0, width=2.0)))
    stim = drive.Sine(mean=0.0, amplitude=1.0, frequency=3.0)
    mc = popdens.montecarlo(pop, drive.Sine(mean=24.0, amplitude=3.0, frequency=3.0), t_end=1500.0, n=10, seed=7, record_spikes=True)
    rows = "\n".join(f"{i},{t:.1f}" for t, i in sorted(zip(mc.spike_times, mc.spike_ids), key=lambda r: (r[1], r[0])))
    (tmp_path / "spikes.csv").write_text("trial,time_ms\n" + rows + "\n")
    t = np.arange(0.0, 1500.1, 0.5)
    (tmp_path / "stimulus.csv").write_text("time_ms,stimulus\n" + "\n".join(
        f"{ti:g},{np.sin(2 * np.pi * 3.0 * ti / 1000.0):.9f}" for ti in t) + "\n")
    path = tmp_path / "adapt.toml"
    path.write_text("""
[neuron]
model = "LIF"
tau_m = 10.0
threshold = 20.0
reset = 14.0
refractory = 3.0
[[neuron.adaptation]]
tau = 50.0
jump = 2.0
[noise]
kind = "escape"
[noise.hazard]
shape = "exponential"
rate = 20.0
width = 2.0
[fit]
kind = "psth"
data = "spikes.csv"
stimulus = "stimulus.csv"
duration = 1500.0
offset = 24.0
scale = 3.0
history = 100.0
free = { rate = 15.0, width = 2.5 }
""")
    summary = run_scenario(load_scenario(path), output=tmp_path / "out")["fit"]
    sp = SpikeTrains([np.round(mc.spike_times[mc.spike_ids == i], 1) for i in range(10)], duration=1500.0)
    stim_trace = popdens.fitting.load_stimulus(tmp_path / "stimulus.csv")
    direct = popdens.fit_psth(pop, sp, stim_trace, {"rate": 15.0, "width": 2.5}, scale=3.0, offset=24.0,
                              history=100.0, predict=False)
    for name in ("rate", "width"):
        # the same data and likelihood: equal up to the optimiser's stopping rule (2 % of an SE)
        assert abs(summary["estimates"][name] - direct.estimates[name]) < 0.05 * direct.se[name]
    assert summary["n_observations"] == direct.n_observations
