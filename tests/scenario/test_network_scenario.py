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


# --------------------------------------------------------------------------- continuation tables
BIF = NET + """
[network.bifurcation]
parameter = "cohort.E.drive"
start = 10.0
stop = 30.0
"""


@pytest.mark.parametrize("old, new, fragment", [
    ('parameter = "cohort.E.drive"', 'parameter = "cohort.X.drive"', "[network.bifurcation] key `parameter`: "),
    ('parameter = "cohort.E.drive"', 'parameter = "pathway.E->E.in_degree"', "is a count"),
    ('parameter = "cohort.E.drive"', "parameter = 3", "`parameter`"),
    ("stop = 30.0", "stop = 5.0", "`stop`"),
    ("stop = 30.0", "stop = 30.0\nseeds = 0", "`seeds`"),
    ("stop = 30.0", "stop = 30.0\nmax_step = 2.0", "`max_step`"),
    ("stop = 30.0", "stop = 30.0\nturns = 2", "unknown key `turns`"),
    ("start = 10.0\n", "", "`start`"),
])
def test_bifurcation_table_errors_name_the_key(tmp_path, old, new, fragment):
    with pytest.raises(ScenarioError) as exc:
        load_scenario(write(tmp_path, BIF.replace(old, new)))
    assert fragment in str(exc.value)


def test_map_curves_need_two_values_per_axis(tmp_path):
    text = NET.replace("stability = false", "stability = true").replace(
        "[network]", '[[pathway]]\nsource = "E"\ntarget = "E"\nweight = -0.2\nin_degree = 20\ndelay = 1.0\n[network]')
    text += "[network.stability_map]\ninhibition = [1.0]\ndrive = [20.0, 22.0]\ncurves = true\n"
    with pytest.raises(ScenarioError, match="`curves`"):
        load_scenario(write(tmp_path, text))
    with pytest.raises(ScenarioError, match="`curves`"):
        load_scenario(write(tmp_path, text.replace("curves = true", "curves = 1")))


def cheap_models(monkeypatch):
    """Route the scenario's default gain and transfer function through a linear rate model (gain
    2 Hz/mV above 10 mV, low-pass with 5 ms) so that a run with maps, curves and branches takes
    seconds; the numbers are then checked against the closed form of that model."""
    import math

    import popdens.network.boundaries as bnd
    import popdens.network.continuation as cont
    import popdens.network.linear_stability as ls
    import popdens.network.states as states

    def gain(pop, mu):
        return 2.0 * (mu - 10.0)

    def transfer(pop, mu, f, modulate):
        f = np.asarray(f, dtype=complex)
        if modulate == "noise":
            return np.zeros(f.shape, dtype=complex)
        return 2.0 / (1.0 + 2j * math.pi * f * 5e-3)

    for mod in (states, cont, bnd):
        monkeypatch.setattr(mod, "_default_gain", lambda: gain)
    monkeypatch.setattr(ls, "_default_transfer", lambda: transfer)


LOOP = """
[scenario]
output = "out"
[[cohort]]
name = "I"
size = 400
drive = 15.0
neuron = { model = "LIF", tau_m = 20.0, threshold = 20.0, reset = 10.0, refractory = 2.0 }
noise = { kind = "white", sigma = 4.0 }
[[pathway]]
source = "I"
target = "I"
weight = -0.1
in_degree = 100
delay = 2.0
[network]
t_end = 0.0
fixed_points = true
stability = true
rate_range = [0.0, 500.0]
[network.stability_map]
inhibition = [2.0, 10.0, 20.0]
drive = [12.0, 20.0]
curves = true
[network.bifurcation]
parameter = "pathway.I->I.weight"
start = -2.0
stop = -0.05
"""


def test_bifurcation_and_map_curves_are_written_and_reported(tmp_path, monkeypatch):
    import math

    from scipy.optimize import brentq

    cheap_models(monkeypatch)
    p = write(tmp_path, LOOP)
    assert main(["run", str(p), "--quiet"]) == 0
    out = tmp_path / "out"
    summary = json.loads((out / "summary.json").read_text())
    for name in ("bifurcation.csv", "bifurcation.png", "boundary_curves.csv", "stability_map.png"):
        assert name in summary["files"]
    # the onset of the delayed loop 1 + lam tau = c e^{-lam d} (tau 5 ms, d 2 ms, c = 2 x 20 x J x 100 / 1000):
    # w d + atan(w tau) = pi and |c| = sqrt(1 + (w tau)^2) (closed form)
    w = brentq(lambda w: w * 2.0 + math.atan(w * 5.0) - math.pi, 1e-9, math.pi / 2.0)
    j_onset = -math.sqrt(1 + (w * 5.0) ** 2) / (2.0 * 20.0 * 100 * 1e-3)
    (pt,) = summary["bifurcation"]["points"]
    assert pt["kind"] == "onset" and pt["parameter"] == pytest.approx(j_onset, rel=1e-9)
    assert pt["frequency_hz"] == pytest.approx(w * 1e3 / (2 * math.pi), rel=1e-9) and pt["loses_stability"]
    # the curves table: onset points in (inhibition factor, drive) at the factor -j_onset / 0.1 (the
    # onset does not depend on the drive in a linear model)
    lines = [ln for ln in (out / "boundary_curves.csv").read_text().splitlines() if not ln.startswith("#")]
    names = lines[0].split(",")
    rows = np.array([[float(x) for x in ln.split(",")] for ln in lines[1:]])
    assert names[:4] == ["curve", "kind", "inhibition_factor", "drive_mV"]
    assert np.all(rows[:, 1] == 2) and rows[:, 2] == pytest.approx(-j_onset / 0.1, rel=1e-9)
    report = (out / "report.html").read_text()
    assert "oscillation onset at" in report and "Fixed points against pathway.I-&gt;I.weight" in report
    assert summary["stability_map"]["curves"][0]["kind"] == "onset"


COND = NET.replace('sigma_ext = 4.0', 'sigma_ext = 0.0\nbackground = { rate = 10.0, weight = 0.04, count = 2000, '
                   'tau_syn = 1.0, synapse = "conductance", reversal = 70.0 }').replace(
    "delay = 1.0", 'delay = 1.0\ntau_syn = 1.2\nsynapse = "conductance"\nreversal = -10.0').replace(
    "drive = 22.0", "drive = -10.0").replace("weight = 0.1", "weight = 0.05")


def test_conductance_synapses_in_a_network_scenario(tmp_path):
    """`synapse` and `reversal` in [[pathway]] and the background build the same circuit as the Python API;
    its fixed point is that of popdens.network.fixed_points (the API is checked against the single-population
    theory in tests/network/test_network_conductance.py)."""
    from popdens.network import Circuit, Cohort, Pathway, PoissonBackground, fixed_points

    sc = load_scenario(write(tmp_path, COND))
    pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(4.0))
    bg = PoissonBackground(10.0, 0.04, 2000, 1.0, "conductance", 70.0)
    ref = Circuit([Cohort("E", pop, size=400, drive=-10.0, sigma_ext=0.0, background=bg)],
                  [Pathway("E", "E", 0.05, 50, 1.0, 1.2, "conductance", -10.0)])
    assert sc.circuit == ref
    rates = [fp.rates[0] for fp in fixed_points(sc.circuit, (0.1, 200.0))]
    assert rates and rates == [fp.rates[0] for fp in fixed_points(ref, (0.1, 200.0))]
    with pytest.raises(ScenarioError, match="`sigma_ext` must be 0"):
        load_scenario(write(tmp_path, COND.replace("sigma_ext = 0.0", "sigma_ext = 1.0")))
    with pytest.raises(ScenarioError, match="`synapse`"):
        load_scenario(write(tmp_path, COND.replace('synapse = "conductance"\nrev', 'synapse = 3\nrev')))
    with pytest.raises(ScenarioError, match="`reversal` applies"):
        load_scenario(write(tmp_path, COND.replace('tau_syn = 1.2\nsynapse = "conductance"\n', '')))


def test_conductance_network_run_integrates_the_mean_field_beside_the_twin(tmp_path):
    """With t_end > 0 a conductance network runs the mean-field time integration, started at the first
    stable fixed point, which it keeps (constant input: to the Fokker--Planck grid's error against the
    threshold integration of the fixed point, 1e-3 relative, the solver's rate tolerance), beside the
    spiking twin; the twin is optional."""
    text = COND.replace("t_end = 0.0", "t_end = 20.0\ndt = 0.05\nmontecarlo = true").replace("stability = false",
                                                                                              "stability = true")
    p = write(tmp_path, text)
    assert main(["run", str(p), "--quiet"]) == 0
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert summary["prediction"]["method"] == "mean-field" and summary["prediction"]["status"] == 0
    fp = summary["fixed_points"][0]["rates_hz"]["E"]
    assert abs(summary["prediction"]["final_rates_hz"]["E"] - fp) < 1e-3 * fp  # the solver's rate tolerance
    assert summary["montecarlo"]["status"] == 0
    sc = load_scenario(write(tmp_path, text.replace("montecarlo = true", "montecarlo = false")))
    assert sc.t_end == 20.0 and not sc.montecarlo
