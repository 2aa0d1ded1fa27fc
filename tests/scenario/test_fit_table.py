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
