"""Command line and scenario files: exit codes, messages, outputs, strict schema."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest

from popdens.cli import main
from popdens.scenario import load_scenario
from references import LIF_ESCAPE_TABLES

SCENARIOS = Path(__file__).resolve().parent.parent / "scenarios"

BASE = """
[scenario]
title = "t"
output = "out"
""" + LIF_ESCAPE_TABLES + """[input]
shape = "step"
t = 10.0
before = 15.0
after = 20.0
[run]
t_end = 30.0
dt = 0.1
record_interval = 1.0
"""


def write(tmp_path, text, name="s.toml"):
    p = tmp_path / name
    p.write_bytes(text.encode("utf-8") if isinstance(text, str) else text)
    return p


def test_run_writes_outputs_and_refuses_to_overwrite(tmp_path, capsys):
    p = write(tmp_path, BASE.replace("[run]", "[run]\nmontecarlo_neurons = 2000\nseed = 1"))
    assert main(["run", str(p), "--quiet"]) == 0
    out = tmp_path / "out"
    for f in ("prediction.csv", "montecarlo.csv", "rate.png", "rate.svg", "agreement.png", "summary.json",
              "report.html"):
        assert (out / f).stat().st_size > 0, f
    # the report parses as HTML and embeds its figures (rate, agreement) as PNGs
    from html.parser import HTMLParser

    class Images(HTMLParser):
        srcs: list = []

        def handle_starttag(self, tag, attrs):
            if tag == "img":
                self.srcs.append(dict(attrs)["src"])

    parser = Images()
    parser.feed((out / "report.html").read_text())
    assert len(parser.srcs) == 2 and all(s.startswith("data:image/png;base64,") for s in parser.srcs)
    import base64

    assert all(base64.b64decode(s.split(",", 1)[1])[:8] == b"\x89PNG\r\n\x1a\n" for s in parser.srcs)
    assert "agrees with the prediction at level 0.01" in (out / "report.html").read_text()
    assert "not a basis for\nclinical or safety decisions" in (out / "report.html").read_text()
    summary = json.loads((out / "summary.json").read_text())
    assert summary["prediction"]["status"] == 0 and summary["montecarlo"]["n_neurons"] == 2000
    head = (out / "prediction.csv").read_text().splitlines()[1]  # the line after the column names
    assert "version" in head and "scenario_sha256_16" in head and "units" in head
    assert main(["run", str(p)]) == 2
    assert "exists" in capsys.readouterr().err
    assert main(["run", str(p), "--overwrite", "--quiet"]) == 0
    assert not [x for x in tmp_path.iterdir() if x.name.startswith(".out.")]  # no temporary leftovers


@pytest.mark.parametrize(
    "edit,needle",
    [
        (("tau_m = 10.0", "tau_mm = 10.0"), "did you mean `tau_m`"),
        (("tau_m = 10.0", "tau_m = -1.0"), "`tau_m`"),
        (("tau_m = 10.0", 'tau_m = "ten"'), "[neuron] key `tau_m`"),
        (('model = "LIF"', 'model = "HH"'), "[neuron] key `model`"),
        (('shape = "exponential"', 'shape = "expo"'), "[noise.hazard] key `shape`"),
        (("t_end = 30.0", "t_end = 30.0\nt_stop = 3"), "[run] unknown key `t_stop`"),
        (('output = "out"', 'output = "../escape"'), "[scenario] key `output`"),
        (('output = "out"', 'output = "/tmp/abs"'), "[scenario] key `output`"),
        (("[input]", "[inputs]"), "unknown key `inputs`"),
        (('kind = "escape"', 'kind = "pink"'), "[noise] key `kind`"),
        (("t_end = 30.0", "t_end = 30.0\nmontecarlo_neurons = -5"), "montecarlo_neurons"),
        (('shape = "exponential"\nrate = 20.0\nwidth = 2.0',
          'shape = "custom"\nexpression = "__import__(1)"'), "dunder"),
        (("width = 2.0", "width = nan"), "[noise.hazard] key `width`"),
        (("t_end = 30.0", "t_end = 30.0 ="), "TOML syntax error"),
    ],
)
def test_malformed_scenarios_exit_2_naming_the_key(tmp_path, capsys, edit, needle):
    text = BASE.replace(*edit)
    assert text != BASE
    p = write(tmp_path, text)
    assert main(["check", str(p)]) == 2
    err = capsys.readouterr().err
    assert needle in err and "Traceback" not in err and str(p) in err
    assert main(["run", str(p)]) == 2
    assert not (tmp_path / "out").exists()


def test_non_utf8_and_missing_file(tmp_path, capsys):
    p = write(tmp_path, b"\xff\xfe\x00garbage")
    assert main(["check", str(p)]) == 2
    assert main(["check", str(tmp_path / "nope.toml")]) == 2
    assert "cannot read" in capsys.readouterr().err


def test_catalogue_lists_models(capsys):
    assert main(["catalogue"]) == 0
    out = capsys.readouterr().out
    for word in ("LIF", "EIF", "QIF", "PIF", "custom", "exponential", "arrhenius-current", "pulse"):
        assert word in out


def test_scenario_equals_script():
    import popdens

    sc = load_scenario(SCENARIOS / "relay_burst.toml")
    a = popdens.simulate(sc.population, sc.drive, 50.0, sc.dt, record_interval=1.0)
    pop = popdens.Population(popdens.LIF(15.0, -50.0, -65.0, 3.0, rest=-65.0),
                             popdens.EscapeNoise(popdens.hazard.Exponential(25.0, 2.5)))
    b = popdens.simulate(pop, popdens.drive.Pulse(100.0, 20.0, 10.0, 8.0), 50.0, 0.1, record_interval=1.0)
    assert (a.rate == b.rate).all()


@pytest.mark.parametrize("path", sorted(SCENARIOS.glob("*.toml")), ids=lambda p: p.name)
def test_shipped_scenarios_run(tmp_path, path):
    local = tmp_path / path.name
    shutil.copy(path, local)
    for data in SCENARIOS.glob("*_demo"):  # demo data read by [fit] tables
        shutil.copytree(data, tmp_path / data.name)
    text = local.read_text()
    # reduced settings: fewer Monte Carlo neurons, a shorter network run and a coarser stability map
    import re

    text = re.sub(r"montecarlo_neurons = \d+", "montecarlo_neurons = 5000", text)
    text = re.sub(r"\nneurons = \d+", "\nneurons = 200", text)  # the twin of an [approximations] table
    if "[network]" in text:
        text = re.sub(r"\nt_end = [\d.]+", "\nt_end = 100.0", text)
        text = re.sub(r"count = \d+ }", "count = 2 }", text)
    local.write_text(text)
    assert main(["run", str(local), "--quiet"]) == 0


def test_step_command_matches_api(tmp_path, capsys):
    import numpy as np

    import popdens

    out = tmp_path / "step.csv"
    argv = ["step", "--neuron", "model=LIF", "tau_m=10", "threshold=20", "reset=0", "refractory=2",
            "--noise", "kind=escape", "shape=exponential", "rate=20", "width=2",
            "--before", "15", "--after", "20", "--at", "20", "--t-end", "60", "--csv", str(out)]
    assert main(argv) == 0
    data = np.loadtxt(out, delimiter=",", skiprows=2)
    pop = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0),
                             popdens.EscapeNoise(popdens.hazard.Exponential(20.0, 2.0)))
    ref = popdens.simulate(pop, popdens.drive.Step(20.0, 15.0, 20.0), 60.0, record_interval=1.0)
    np.testing.assert_allclose(data[:, 1], ref.rate, rtol=1e-10)
    assert main(argv[:-2] + ["--neuron", "model=LIF", "tau_m=-1", "threshold=20", "reset=0", "refractory=2"]) == 2
    assert "`tau_m`" in capsys.readouterr().err


def test_bench_lists_and_rejects_unknown_names(capsys):
    assert main(["bench"]) == 0
    listed = capsys.readouterr().out
    assert "refractory" in listed and "fokker_planck" in listed
    assert main(["bench", "no_such_benchmark"]) == 2
    assert "unknown benchmark" in capsys.readouterr().err
