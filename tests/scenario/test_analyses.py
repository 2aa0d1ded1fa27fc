"""Analysis tables of scenario files ([gain], [stationary], [transfer]) and the one-off commands."""

from __future__ import annotations

import json

import numpy as np
import pytest

import popdens
from popdens.cli import main
from popdens.exceptions import ScenarioError
from popdens.scenario import load_scenario
from references import LIF_ESCAPE_TABLES, siegert_rate

POPULATION = """
[scenario]
title = "analyses"
output = "out"
""" + LIF_ESCAPE_TABLES


def read_table(path):
    """Rows of a popdens CSV table (``#`` header lines and the column-name line skipped)."""
    lines = [ln for ln in path.read_text().splitlines() if not ln.startswith("#")]
    return np.array([[float(x) for x in ln.split(",")] for ln in lines[1:]])


def write(tmp_path, text):
    p = tmp_path / "s.toml"
    p.write_text(text, encoding="utf-8")
    return p


@pytest.mark.parametrize("extra, fragment", [
    ("", "nothing to compute"),
    ("[run]\nt_end = 10.0\n", "missing table `input`"),
    ("[transfer]\nmu = 18.0\n", "missing required key `frequencies`"),
    ("[transfer]\nmu = 18.0\nfrequencies = [1.0]\nmodulate = 'noise'\n", "needs [noise] kind = 'white'"),
    ("[transfer]\nmu = 18.0\nfrequences = [1.0]\n", "did you mean `frequencies`"),
    ("[transfer]\nmu = 18.0\nfrequencies = {start = 1.0, stop = 10.0, count = 0}\n", "`count` = 0"),
    ("[transfer]\nmu = 18.0\nfrequencies = {start = 0.0, stop = 10.0, count = 5, spacing = 'log'}\n",
     "positive bounds for log spacing"),
    ("[transfer]\nmu = 18.0\nfrequencies = [-1.0]\n", "frequencies >= 0"),
    ("[gain]\nmu = [1.0, 'a']\n", "[gain] key `mu` = 'a'"),
    ("[gain]\nmu = [1.0]\nsigma = [2.0]\n", "white noise only"),
    ("[gain]\nmu = {start = 1.0, stop = 2.0, count = 3, step = 1}\n", "[gain.mu] unknown key `step`"),
    ("[stationary]\nmu = nan\n", "a finite number"),
    ("[approximations]\nmu = 18.0\n", "needs [noise] kind = 'coloured'"),
])
def test_analysis_tables_reject_bad_input_naming_the_key(tmp_path, extra, fragment):
    with pytest.raises(ScenarioError) as exc:
        load_scenario(write(tmp_path, POPULATION + extra))
    assert fragment in str(exc.value)
    assert "s.toml" in str(exc.value)


def test_range_tables_give_linear_and_log_grids(tmp_path):
    sc = load_scenario(write(tmp_path, POPULATION + "[transfer]\nmu = 18.0\n"
                                                    "frequencies = {start = 1.0, stop = 1000.0, count = 4, spacing = 'log'}\n"
                                                    "[gain]\nmu = {start = 10.0, stop = 20.0, count = 3}\n"))
    assert not sc.runs_in_time
    an = dict(sc.analyses)
    np.testing.assert_allclose(an["transfer"].freqs, [1.0, 10.0, 100.0, 1000.0])  # decades, by construction
    np.testing.assert_allclose(an["gain"].mu, [10.0, 15.0, 20.0])


def test_transfer_table_writes_the_same_numbers_as_the_api(tmp_path, capsys):
    p = write(tmp_path, POPULATION + "[transfer]\nmu = 18.0\nfrequencies = [2.0, 30.0, 200.0]\n")
    assert main(["run", str(p), "--quiet"]) == 0
    out = tmp_path / "out"
    for f in ("transfer.csv", "transfer.png", "transfer.svg", "summary.json", "report.html"):
        assert (out / f).stat().st_size > 0, f
    lines = (out / "transfer.csv").read_text().splitlines()
    header = [ln for ln in lines if ln.startswith("#")]
    assert any("Hz/mV" in ln for ln in header) and any("popdens_version" in ln for ln in header)
    table = np.loadtxt(out / "transfer.csv", delimiter=",", comments="#", skiprows=len(header) + 1)
    sc = load_scenario(p)
    chi = popdens.transfer(sc.population, 18.0, [2.0, 30.0, 200.0])
    # the scenario and the equivalent script give identical numbers (12 significant digits written)
    # round trip: the written table against popdens.transfer called directly (common practice)
    np.testing.assert_allclose(table[:, 1] + 1j * table[:, 2], chi, rtol=1e-11)
    summary = json.loads((out / "summary.json").read_text())
    assert summary["transfer"]["frequencies"] == 3
    assert "transfer.csv" in summary["files"]


def test_transfer_command_prints_and_rejects_bad_ranges(capsys):
    flags = ["--neuron", "model=LIF", "tau_m=10", "threshold=20", "reset=0", "refractory=2",
             "--noise", "kind=escape", "shape=exponential", "rate=20", "width=2", "--mu", "18"]
    assert main(["transfer", *flags, "--freq", "5,50"]) == 0
    rows = [ln.split() for ln in capsys.readouterr().out.splitlines() if not ln.startswith("#")]
    pop = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0), popdens.EscapeNoise(popdens.hazard.Exponential(20.0, 2.0)))
    chi = popdens.transfer(pop, 18.0, [5.0, 50.0])
    np.testing.assert_allclose([float(r[1]) for r in rows], np.abs(chi), rtol=1e-5)  # 6 digits printed
    # START:STOP:POINTS means the same for every flag: evenly spaced (":log" for log spacing)
    assert main(["transfer", *flags, "--freq", "10:30:3"]) == 0
    freqs = [float(ln.split()[0]) for ln in capsys.readouterr().out.splitlines() if not ln.startswith("#")]
    assert freqs == [10.0, 20.0, 30.0]
    assert main(["transfer", *flags, "--freq", "1:100:3:log"]) == 0
    freqs = [float(ln.split()[0]) for ln in capsys.readouterr().out.splitlines() if not ln.startswith("#")]
    assert freqs == pytest.approx([1.0, 10.0, 100.0])
    assert main(["transfer", *flags, "--freq", "0:10:3:log"]) == 2  # log spacing needs positive bounds
    assert "positive bounds" in capsys.readouterr().err
    assert main(["transfer", *flags, "--freq", "1:10:3", "--modulate", "noise"]) == 2
    assert "white noise" in capsys.readouterr().err


WHITE_LIF = """
[scenario]
output = "out"
[neuron]
model = "LIF"
tau_m = 20.0
threshold = 20.0
reset = 10.0
refractory = 2.0
[noise]
kind = "white"
sigma = 4.0
[gain]
mu = {start = 10.0, stop = 30.0, count = 5}
sigma = [2.0, 4.0]
[stationary]
mu = [15.0, 25.0]
"""


def _siegert_quad(mu, sigma):
    """Siegert formula by adaptive quadrature (tests/references.py) for the white-noise LIF of WHITE_LIF."""
    return siegert_rate(popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(sigma)), mu)


def test_gain_and_stationary_tables_match_the_api_and_the_siegert_formula(tmp_path, capsys):
    p = write(tmp_path, WHITE_LIF)
    assert main(["run", str(p), "--quiet"]) == 0
    out = tmp_path / "out"
    for f in ("gain.csv", "gain.png", "gain.svg", "stationary.csv", "isi.png", "isi.svg", "report.html"):
        assert (out / f).stat().st_size > 0, f
    g = read_table(out / "gain.csv")
    sc = load_scenario(p)
    for col, sigma in ((1, 2.0), (2, 4.0)):
        pop = popdens.Population(sc.population.neuron, popdens.WhiteNoise(sigma))
        np.testing.assert_allclose(g[:, col], popdens.gain(pop, g[:, 0]), rtol=1e-11)  # file == script
        ref = [_siegert_quad(m, sigma) for m in g[:, 0]]
        np.testing.assert_allclose(g[:, col], ref, rtol=1e-7)  # Siegert formula by quadrature
    st = read_table(out / "stationary.csv")
    np.testing.assert_allclose(st[:, 1], [_siegert_quad(m, 4.0) for m in (15.0, 25.0)], rtol=1e-7)
    assert np.all((st[:, 2] > 0) & (st[:, 2] < 1.2))  # ISI CV of a noisy LIF: positive, near or below 1


def test_gain_command_matches_the_siegert_formula(capsys):
    flags = ["--neuron", "model=LIF", "tau_m=20", "threshold=20", "reset=10", "refractory=2",
             "--noise", "kind=white", "sigma=4"]
    assert main(["gain", *flags, "--mu", "12,18,24"]) == 0
    rows = [ln.split() for ln in capsys.readouterr().out.splitlines() if not ln.startswith("#")]
    np.testing.assert_allclose([float(r[1]) for r in rows], [_siegert_quad(m, 4.0) for m in (12, 18, 24)],
                               rtol=1e-5)  # 6 digits printed; Siegert formula by quadrature
    assert main(["gain", *flags, "--mu", "1:2:3", "--sigma", "-1"]) == 2
    assert "positive" in capsys.readouterr().err


COLOURED = POPULATION.replace('kind = "escape"', 'kind = "coloured"\nsigma = 4.0\ntau_syn = 2.0').split("[noise.hazard]")[0]


@pytest.mark.parametrize("extra, fragment", [
    ("[approximations]\nmu = 18.0\nneurons = 1\n", "`neurons` = 1"),
    ("[approximations]\nmu = 18.0\ntau_syn = [0.0]\n", "positive values"),
    ("[approximations]\nmu = 18.0\nt_end = -5.0\n", "`t_end` = -5.0"),
    ("[approximations]\nmu = 18.0\nsed = 1\n", "did you mean `seed`"),
    ("[noise]\nkind = 'coloured'\nsigma = 4.0\n", "tau_syn"),
])
def test_coloured_noise_tables_reject_bad_input(tmp_path, extra, fragment):
    text = COLOURED + extra if not extra.startswith("[noise]") else POPULATION.split("[noise]")[0] + extra + \
        "[gain]\nmu = [1.0]\n"
    with pytest.raises(ScenarioError) as exc:
        load_scenario(write(tmp_path, text))
    assert fragment in str(exc.value)


def test_coloured_noise_scenario_loads(tmp_path):
    sc = load_scenario(write(tmp_path, COLOURED + "[gain]\nmu = [18.0]\nsigma = [3.0]\n"))
    assert sc.population.noise == popdens.ColouredNoise(4.0, 2.0)
    (name, g), = sc.analyses
    # the sigma override keeps the synaptic filter
    assert float(g.compute(sc.population)[0, 0]) == pytest.approx(
        float(popdens.gain(popdens.Population(sc.population.neuron, popdens.ColouredNoise(3.0, 2.0)), 18.0)))


SHOT = POPULATION.replace('kind = "escape"', 'kind = "shot"\nexc_rate = 2000.0\nexc_psp = 0.5\ninh_rate = 500.0\n'
                                              'inh_psp = 0.5').split("[noise.hazard]")[0]


@pytest.mark.parametrize("extra, fragment", [
    ("[approximations]\nmu = 5.0\npsp = [1.0]\n", "at most 0.8333 mV"),  # variance/mean = 625/750 mV
    ("[approximations]\nmu = 5.0\ntau_syn = [1.0]\n", "`tau_syn` does not apply"),
    ("[approximations]\nmu = 5.0\npsp = [-0.5]\n", "positive values"),
    ("[transfer]\nmu = 5.0\nfrequencies = [1.0]\nmodulate = 'sigma'\n", "needs [noise] kind = 'white'"),
    ("[stationary]\nmu = 'x'\n", "`mu`"),
])
def test_shot_noise_tables_reject_bad_input(tmp_path, extra, fragment):
    with pytest.raises(ScenarioError) as exc:
        load_scenario(write(tmp_path, SHOT + extra))
    assert fragment in str(exc.value)


@pytest.mark.parametrize("noise, fragment", [
    ("kind = 'shot'\nexc_rate = 100.0\n", "missing key `exc_psp`"),
    ("kind = 'shot'\nexc_rate = 100.0\nexc_psp = 0.5\namplitudes = 'gamma'\n", "`amplitudes` = 'gamma'"),
    ("kind = 'shot'\nexc_rate = 100.0\nexc_psp = 0.5\ninh_rate = 10.0\n", "`inh_psp` must be > 0"),
    ("kind = 'shot'\nexc_rate = 100.0\nexc_psp = 0.5\nexc_pps = 1.0\n", "did you mean `exc_psp`"),
    ("kind = 'shot'\nexc_rate = -1.0\nexc_psp = 0.5\n", "`exc_rate`"),
    ("kind = 'coloured'\nsigma = 4.0\ntau_syn = 2.0\n[approximations]\nmu = 1.0\npsp = [0.5]\n",
     "`psp` does not apply"),
])
def test_shot_noise_table_names_the_bad_key(tmp_path, noise, fragment):
    text = POPULATION.split("[noise]")[0] + "[noise]\n" + noise + "\n[gain]\nmu = [1.0]\n"
    with pytest.raises(ScenarioError) as exc:
        load_scenario(write(tmp_path, text))
    assert fragment in str(exc.value) and "s.toml" in str(exc.value)


@pytest.mark.parametrize("law", ["fixed", "exponential"])
@pytest.mark.parametrize("psp", [0.1, 0.3, 0.5])
def test_same_moments_keeps_the_input_mean_and_variance(law, psp):
    """Campbell's theorem: the input adds mean tau (nu_e <a_e> - nu_i <a_i>) and variance
    tau (nu_e <a_e^2> + nu_i <a_i^2>), <a^2> = a^2 (fixed) or 2 a^2 (exponential amplitudes)."""
    from popdens.scenario.analyses import same_moments

    k = 2.0 if law == "exponential" else 1.0
    old = popdens.ShotNoise(2000.0, 0.5, 500.0, 0.5, law)
    new = same_moments(old, psp)
    assert new.exc_psp == new.inh_psp == psp and new.amplitudes == law
    assert new.exc_rate * psp - new.inh_rate * psp == pytest.approx(2000.0 * 0.5 - 500.0 * 0.5, rel=1e-12)
    assert k * (new.exc_rate + new.inh_rate) * psp ** 2 == pytest.approx(k * 2500.0 * 0.25, rel=1e-12)


def test_shot_noise_scenario_runs_the_approximation_table(tmp_path):
    """Twin (400 neurons x 500 ms) against the jump-density rate: within 4 SE (SE from the spread of
    per-neuron counts); the summary states each theory's error against the twin."""
    p = write(tmp_path, SHOT + "amplitudes = 'fixed'\n[approximations]\nmu = 5.0\npsp = [0.5, 0.8]\n"
                               "neurons = 400\nt_end = 500.0\n")
    sc = load_scenario(p)
    assert sc.population.noise == popdens.ShotNoise(2000.0, 0.5, 500.0, 0.5, "fixed")
    assert main(["run", str(p), "--quiet"]) == 0
    rows = read_table(tmp_path / "out" / "approximations.csv")
    psp, twin, se, diffusion, theory = rows[:, 0], rows[:, 3], rows[:, 4], rows[:, 5], rows[:, 6]
    assert list(psp) == [0.5, 0.8]
    assert np.all(np.abs(theory - twin) < 4 * se)  # Monte Carlo twin, 4 SE
    assert diffusion[0] == pytest.approx(diffusion[1], rel=1e-9)  # same mean and variance: same diffusion rate
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert set(summary["approximations"]["error_percent"]) == {"diffusion", "finite_psp"}
    assert "exc_psp (mV)" in (tmp_path / "out" / "report.html").read_text()


CONDUCTANCE = POPULATION.replace('kind = "escape"', 'kind = "conductance"\nexc_rate = 20000.0\nexc_weight = 0.08\n'
                                 'exc_tau = 0.5\nexc_reversal = 70.0\ninh_rate = 5000.0\ninh_weight = 0.25\n'
                                 'inh_tau = 1.0\ninh_reversal = -10.0').split("[noise.hazard]")[0]


@pytest.mark.parametrize("extra, fragment", [
    ("[approximations]\nmu = 5.0\npsp = [0.5]\n", "`psp` does not apply"),
    ("[approximations]\nmu = 5.0\ntau_syn = [1.0]\n", "`tau_syn` does not apply"),
    ("[approximations]\nmu = 5.0\ntau_factor = [-1.0]\n", "positive values"),
    ("[transfer]\nmu = 5.0\nfrequencies = [1.0]\nmodulate = 'noise'\n", "needs [noise] kind = 'white'"),
    ("[gain]\nmu = [5.0]\nsigma = [1.0]\n", "`sigma` applies to white noise only"),
])
def test_conductance_tables_reject_bad_input(tmp_path, extra, fragment):
    with pytest.raises(ScenarioError) as exc:
        load_scenario(write(tmp_path, CONDUCTANCE + extra))
    assert fragment in str(exc.value)


@pytest.mark.parametrize("noise, fragment", [
    ("kind = 'conductance'\nexc_rate = 100.0\nexc_weight = 0.1\nexc_tau = 2.0\n", "missing key `exc_reversal`"),
    ("kind = 'conductance'\nexc_rate = 100.0\nexc_weight = 0.1\nexc_tau = 2.0\nexc_reversal = 70.0\n"
     "inh_rate = 10.0\ninh_weight = 0.1\n", "`inh_reversal` (mV) is required"),
    ("kind = 'conductance'\nexc_rate = 100.0\nexc_weight = 0.1\nexc_tau = 2.0\nexc_reversal = 70.0\n"
     "exc_wieght = 1.0\n", "did you mean `exc_weight`"),
    ("kind = 'conductance'\nexc_rate = 100.0\nexc_weight = -0.1\nexc_tau = 2.0\nexc_reversal = 70.0\n",
     "`exc_weight`"),
])
def test_conductance_table_names_the_bad_key(tmp_path, noise, fragment):
    text = POPULATION.split("[noise]")[0] + "[noise]\n" + noise + "\n[gain]\nmu = [1.0]\n"
    with pytest.raises(ScenarioError) as exc:
        load_scenario(write(tmp_path, text))
    assert fragment in str(exc.value) and "s.toml" in str(exc.value)


def test_scaled_synapses_keep_the_mean_conductance_and_intensity():
    """Campbell's theorem: mean w nu tau and white-limit intensity w^2 nu tau^2 unchanged when tau -> f tau,
    w -> w / f."""
    from popdens.scenario.analyses import scaled_synapses

    old = popdens.ConductanceNoise(20000.0, 0.08, 0.5, 70.0, 5000.0, 0.25, 1.0, -10.0)
    new = scaled_synapses(old, 2.5)
    assert new.exc_tau == pytest.approx(1.25) and new.inh_tau == pytest.approx(2.5)
    for (nu0, w0, t0, _), (nu1, w1, t1, _) in zip(old.channels(), new.channels()):
        assert w1 * nu1 * t1 == pytest.approx(w0 * nu0 * t0, rel=1e-12)  # Campbell: mean
        assert w1 ** 2 * nu1 * t1 ** 2 == pytest.approx(w0 ** 2 * nu0 * t0 ** 2, rel=1e-12)  # white intensity


def test_conductance_scenario_runs_the_approximation_table(tmp_path):
    """Twin (400 neurons x 500 ms) against the default (filtered) rate: within 4 SE (SE from the spread of
    per-neuron counts) where the theory holds (tau_m 10 ms here, tau_eff 3.3 ms: inhibitory time constants
    0.25 and 0.5 ms are 0.08 and 0.15 of it); the white-conductance rate is the same at every factor."""
    p = write(tmp_path, CONDUCTANCE + "[gain]\nmu = [0.0, 10.0]\n[stationary]\nmu = 10.0\n[transfer]\nmu = 10.0\n"
                                      "frequencies = [1.0, 10.0]\n"
                                      "[approximations]\nmu = 10.0\n"
                                      "tau_factor = [0.25, 0.5]\nneurons = 400\nt_end = 500.0\n")
    sc = load_scenario(p)
    assert sc.population.noise.inh_reversal == -10.0
    assert main(["run", str(p), "--quiet"]) == 0
    rows = read_table(tmp_path / "out" / "approximations.csv")
    twin, se, filtered, diffusion = rows[:, 4], rows[:, 5], rows[:, 6], rows[:, 7]
    assert list(rows[:, 0]) == [0.25, 0.5]
    assert np.all(np.abs(filtered - twin) < 4 * se)  # Monte Carlo twin, 4 SE
    assert diffusion[0] == pytest.approx(diffusion[1], rel=1e-9)  # same mean and intensity: same rate
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert set(summary["approximations"]["error_percent"]) == {"filtered", "diffusion", "current_based"}
    assert "exc_reversal (mV)" in (tmp_path / "out" / "report.html").read_text()
