"""Scenario runs: bit-identical outputs for the same scenario and seed, version and settings in every
output, and nothing partial left behind by an interruption (Ctrl-C) or a failure."""

from __future__ import annotations

import importlib
import json
from pathlib import Path

import pytest

from popdens import __version__
from popdens.cli import EXIT_INTERRUPTED, main

SCENARIO = """
[scenario]
title = "reproducibility check"
output = "out"
[neuron]
model = "EIF"
tau_m = 10.0
soft_threshold = 15.0
slope_factor = 2.0
cutoff = 30.0
reset = 0.0
refractory = 2.0
[noise]
kind = "escape"
[noise.hazard]
shape = "exponential"
rate = 10.0
width = 2.0
[input]
shape = "sine"
mean = 10.0
amplitude = 4.0
frequency = 25.0
[run]
t_end = 60.0
dt = 0.1
record_interval = 1.0
montecarlo_neurons = 1000
seed = 11
"""


def write(folder: Path, text=SCENARIO, name="s.toml") -> Path:
    p = folder / name
    p.write_text(text, encoding="utf-8")
    return p


def files(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())}


def test_same_scenario_and_seed_give_bit_identical_files(tmp_path):
    p = write(tmp_path)
    assert main(["run", str(p), "--quiet", "--out", str(tmp_path / "a")]) == 0
    assert main(["run", str(p), "--quiet", "--out", str(tmp_path / "b")]) == 0
    a, b = files(tmp_path / "a"), files(tmp_path / "b")
    assert set(a) == {"prediction.csv", "montecarlo.csv", "rate.png", "rate.svg", "agreement.png", "agreement.svg",
                      "summary.json", "report.html",
                      "timing.json"}
    # timing.json holds the wall times, the only thing that may differ between runs
    for name in sorted(set(a) - {"timing.json"}):
        assert a[name] == b[name], f"{name} differs between identical runs"
    # a different seed changes the Monte Carlo output (the comparison above can fail)
    p2 = write(tmp_path, SCENARIO.replace("seed = 11", "seed = 12"), "s2.toml")
    assert main(["run", str(p2), "--quiet", "--out", str(tmp_path / "c")]) == 0
    c = files(tmp_path / "c")
    assert c["montecarlo.csv"] != a["montecarlo.csv"]
    # the prediction does not depend on the seed (its header names the other scenario file)
    def data(text):
        return [ln for ln in text.split(b"\n") if not ln.startswith(b"#")]

    assert data(c["prediction.csv"]) == data(a["prediction.csv"])


def test_every_output_records_version_and_settings(tmp_path):
    p = write(tmp_path)
    assert main(["run", str(p), "--quiet"]) == 0
    out = tmp_path / "out"
    for name in ("prediction.csv", "montecarlo.csv"):
        head = (out / name).read_text().splitlines()[1]  # the metadata line after the column names
        meta = json.loads(head.split("; ", 1)[1])
        assert meta["version"] == __version__ and meta["dt_ms"] == 0.1 and meta["t_end_ms"] == 60.0
        assert meta["record_interval_ms"] == 1.0 and "wall_time_s" not in meta["settings"]
    pred_meta = json.loads((out / "prediction.csv").read_text().splitlines()[1].split("; ", 1)[1])
    assert {"n_bins", "max_age_ms", "accuracy_warnings", "method"} <= set(pred_meta["settings"])
    mc_meta = json.loads((out / "montecarlo.csv").read_text().splitlines()[1].split("; ", 1)[1])
    assert mc_meta["settings"]["seed"] == 11 and mc_meta["settings"]["burn_in_ms"] > 0
    summary = json.loads((out / "summary.json").read_text())
    assert summary["version"] == __version__
    assert summary["settings"] == {"t_end_ms": 60.0, "dt_ms": 0.1, "record_interval_ms": 1.0,
                                   "snapshot_interval_ms": None, "montecarlo_neurons": 1000, "seed": 11}
    assert f"popdens {__version__}" in (out / "report.html").read_text()
    assert f"popdens {__version__}".encode() in (out / "rate.png").read_bytes()
    assert f"popdens {__version__}" in (out / "rate.svg").read_text()
    assert "<dc:date>" not in (out / "rate.svg").read_text()


# ------------------------------------------------------------------ interruption
def interrupt_progress(monkeypatch, module_name, after=1):
    """Make the progress callback of ``module_name`` raise KeyboardInterrupt (as Ctrl-C would)."""
    mod = importlib.import_module(module_name)
    real = mod.Progress.update
    calls = {"n": 0}

    def update(self, done):
        calls["n"] += 1
        if calls["n"] >= after:
            raise KeyboardInterrupt
        return real(self, done)

    monkeypatch.setattr(mod.Progress, "update", update)


@pytest.mark.parametrize("where", ["popdens.solvers.frontend", "popdens.twins.population"])
def test_ctrl_c_leaves_no_folder_and_exits_130(tmp_path, monkeypatch, capsys, where):
    p = write(tmp_path)  # the progress callback runs after every block: short runs reach it
    interrupt_progress(monkeypatch, where)
    assert main(["run", str(p), "--quiet"]) == EXIT_INTERRUPTED
    assert "interrupted" in capsys.readouterr().err
    assert sorted(x.name for x in tmp_path.iterdir()) == ["s.toml"]  # no output, no temporary folder


def test_ctrl_c_while_writing_files_leaves_no_folder(tmp_path, monkeypatch):
    runner = importlib.import_module("popdens.scenario.runner")

    def boom(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(runner, "html_report", boom)  # after the CSV files and figures were written
    p = write(tmp_path)
    assert main(["run", str(p), "--quiet"]) == EXIT_INTERRUPTED
    assert sorted(x.name for x in tmp_path.iterdir()) == ["s.toml"]


def test_interrupted_overwrite_keeps_the_previous_output(tmp_path, monkeypatch):
    p = write(tmp_path)  # the progress callback runs after every block: short runs reach it
    assert main(["run", str(p), "--quiet"]) == 0
    before = files(tmp_path / "out")
    interrupt_progress(monkeypatch, "popdens.twins.population")
    assert main(["run", str(p), "--quiet", "--overwrite"]) == EXIT_INTERRUPTED
    assert files(tmp_path / "out") == before
    assert sorted(x.name for x in tmp_path.iterdir()) == ["out", "s.toml"]


def test_ctrl_c_in_step_command_writes_no_csv(tmp_path, monkeypatch):
    interrupt_progress(monkeypatch, "popdens.solvers.frontend")
    csv = tmp_path / "r.csv"
    code = main(["step", "--neuron", "model=LIF", "tau_m=10", "threshold=20", "reset=0", "refractory=2",
                 "--noise", "kind=escape", "shape=exponential", "rate=20", "width=2",
                 "--before", "15", "--after", "20", "--at", "50", "--t-end", "100", "--csv", str(csv)])
    assert code == EXIT_INTERRUPTED and not csv.exists()


def test_failed_prediction_exits_1_with_the_reason(tmp_path, capsys):
    # a custom drift undefined above 25 mV, which neurons driven to 60 mV reach (regression: exit 0)
    text = SCENARIO.replace('model = "EIF"', 'model = "custom"\ndrift = "-u + sqrt(25 - u)"\nthreshold = 20.0')
    text = text.replace("soft_threshold = 15.0\nslope_factor = 2.0\ncutoff = 30.0\n", "")
    text = text.replace("rate = 10.0\nwidth = 2.0", "rate = 0.001\nwidth = 50.0").replace("mean = 10.0", "mean = 60.0")
    text = text.replace("montecarlo_neurons = 1000", "montecarlo_neurons = 0")
    p = write(tmp_path, text)
    assert main(["run", str(p), "--quiet"]) == 1
    err = capsys.readouterr().err
    assert "prediction failed" in err and "non-finite" in err
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert summary["prediction"]["status"] == -1 and "non-finite" in summary["prediction"]["message"]
