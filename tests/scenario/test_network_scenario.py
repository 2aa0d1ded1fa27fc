"""Network scenario files: [[cohort]], [[pathway]], [network] tables, their errors and their outputs."""

from __future__ import annotations

import json

import numpy as np
import pytest

import popdens
from popdens.cli import main
from popdens.exceptions import ScenarioError
from popdens.scenario import load_scenario
from references import siegert_rate

NET = """
[scenario]
output = "out"
[[cohort]]
name = "E"
size = 400
drive = 22.0
sigma_ext = 4.0
neuron = { model = "LIF", tau_m = 20.0, threshold = 20.0, reset = 10.0, refractory = 2.0 }
noise = { kind = "white", sigma = 4.0 }
[[pathway]]
source = "E"
target = "E"
weight = 0.1
in_degree = 50
delay = 1.0
[network]
t_end = 0.0
fixed_points = true
stability = false
rate_range = [0.1, 200.0]
"""


def write(tmp_path, text):
    p = tmp_path / "net.toml"
    p.write_text(text, encoding="utf-8")
    return p


def _siegert_quad(mu, sigma):
    """Siegert formula by adaptive quadrature (tests/references.py) for the LIF of NET."""
    return siegert_rate(popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(sigma)), mu)


@pytest.mark.parametrize("old, new, fragment", [
    ('source = "E"', 'source = "X"', "X"),
    ("in_degree = 50", "in_degree = -5", "`in_degree`"),
    ("delay = 1.0", "delay = 1.0\nlag = 2.0", "unknown key `lag`"),
    ("size = 400", "size = 0", "`size`"),
    ('noise = { kind = "white", sigma = 4.0 }', 'noise = { kind = "pink" }', "[cohort E.noise] key `kind`"),
    ("rate_range = [0.1, 200.0]", "rate_range = [5.0, 1.0]", "`rate_range`"),
    ("stability = false", "stability = true\nfixed_points = false", "`stability`"),
    ("t_end = 0.0", "t_end = 0.0\nmontecarlo = true", "`montecarlo`"),
])
def test_network_tables_reject_bad_input(tmp_path, old, new, fragment):
    text = NET.replace(old, new, 1)
    if "fixed_points = false" in new:
        text = text.replace("fixed_points = true\n", "", 1)
    with pytest.raises(ScenarioError) as exc:
        load_scenario(write(tmp_path, text))
    assert fragment in str(exc.value)


def test_network_fixed_point_file_is_self_consistent_by_the_siegert_formula(tmp_path, capsys):
    p = write(tmp_path, NET)
    assert main(["check", str(p)]) == 0
    assert main(["run", str(p), "--quiet"]) == 0
    out = tmp_path / "out"
    for f in ("fixed_points.csv", "summary.json", "report.html"):
        assert (out / f).stat().st_size > 0, f
    lines = [ln for ln in (out / "fixed_points.csv").read_text().splitlines() if not ln.startswith("#")]
    names = lines[0].split(",")
    rows = np.array([[float(x) for x in ln.split(",")] for ln in lines[1:]])
    rate, mu, sigma = (rows[:, names.index(n)] for n in ("rate_Hz_E", "mu_mV_E", "sigma_mV_E"))
    for r, m, s in zip(rate, mu, sigma):
        # recurrent input in the diffusion approximation (Amit & Brunel 1997; Brunel 2000):
        # mu = mu_ext + tau_m J C r, sigma^2 = sigma_ext^2 + tau_m J^2 C r (r in 1/ms)
        assert m == pytest.approx(22.0 + 20.0 * 0.1 * 50 * r * 1e-3, rel=1e-9)
        assert s == pytest.approx(np.sqrt(16.0 + 20.0 * 0.01 * 50 * r * 1e-3), rel=1e-9)
        assert r == pytest.approx(_siegert_quad(m, s), rel=1e-6)  # self-consistency, outside Siegert
    sc = load_scenario(p)
    api = popdens.fixed_points(sc.circuit, (0.1, 200.0))
    np.testing.assert_allclose(sorted(rate), sorted(st.rates[0] for st in api), rtol=1e-11)  # file == script
    summary = json.loads((out / "summary.json").read_text())
    assert len(summary["fixed_points"]) == len(rate) >= 1


def test_stability_map_table_needs_inhibition_and_matches_the_api(tmp_path, capsys):
    bad = NET.replace("rate_range = [0.1, 200.0]", "rate_range = [0.1, 200.0]\n[network.stability_map]\n"
                      "inhibition = [1.0]\ndrive = [20.0]")
    with pytest.raises(ScenarioError, match="no inhibitory"):
        load_scenario(write(tmp_path, bad))
    ei = bad.replace("[network]", '[[pathway]]\nsource = "E"\ntarget = "E"\nweight = -0.2\nin_degree = 20\n'
                                  "delay = 1.0\n[network]").replace("inhibition = [1.0]", "inhibition = [1.0, 2.0]")
    p = write(tmp_path, ei)
    assert main(["run", str(p), "--quiet"]) == 0
    lines = [ln for ln in (tmp_path / "out" / "stability_map.csv").read_text().splitlines()
             if not ln.startswith("#")]
    names = lines[0].split(",")
    rows = np.array([[float(x) for x in ln.split(",")] for ln in lines[1:]])
    assert rows.shape[0] == 2
    sc = load_scenario(p)
    for row in rows:
        c = sc.circuit_at(row[names.index("inhibition_factor")], row[names.index("drive_mV")])
        # the scaled circuit: inhibitory weight times the factor, drive replaced (file == script)
        assert c.pathways[1].weight == pytest.approx(-0.2 * row[0]) and c.cohorts[0].drive.mu == 20.0
        (fp,) = popdens.fixed_points(c, (0.1, 200.0))
        growth = row[names.index("growth_rate_per_s")]
        if np.isnan(growth):  # the map records a point whose root search failed as NaN
            with pytest.raises(popdens.ConvergenceError):
                popdens.stability(c, fp)
        else:
            assert growth == pytest.approx(popdens.stability(c, fp).growth_rate, rel=1e-9)
            assert row[names.index("rate_Hz_E")] == pytest.approx(fp.rates[0], rel=1e-10)  # 12 digits written
    assert np.isfinite(rows[:, names.index("growth_rate_per_s")]).any()


def test_ctrl_c_during_the_network_run_leaves_no_output_and_exits_130(tmp_path, monkeypatch, capsys):
    from popdens.cli import EXIT_INTERRUPTED
    from popdens.progress import Progress

    def interrupted(self, done):
        raise KeyboardInterrupt  # as Ctrl-C would, inside the mean-field integration

    monkeypatch.setattr(Progress, "update", interrupted)
    p = write(tmp_path, NET.replace("t_end = 0.0", "t_end = 200.0"))  # long enough for a progress update
    assert main(["run", str(p), "--quiet"]) == EXIT_INTERRUPTED
    assert not (tmp_path / "out").exists()
    assert [q.name for q in tmp_path.iterdir()] == ["net.toml"]  # no temporary folder left either
    sc = load_scenario(p)
    res = popdens.simulate_network(sc.circuit, 200.0)
    from popdens.result import STATUS_INTERRUPTED

    assert res.status == STATUS_INTERRUPTED and "interrupted" in res.message
