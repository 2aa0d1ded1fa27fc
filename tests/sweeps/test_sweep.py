"""Parameter sweeps: seeds, backends (serial, process pool, Dask), resume after a kill, failures, CLI."""

from __future__ import annotations

import json
import math
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from scipy import integrate

import _sweep_points as helpers
from popdens.cli import main
from popdens.exceptions import ScenarioError
from popdens.scenario import parse_scenario
from popdens.sweeps.engine import Curve, evaluate_point, grid_points, load_sweep, point_seed, sweep
from popdens.scenario.sweep import plan_sweep, run_sweep_scenario
from references import LIF_ESCAPE_TABLES

TESTS = Path(__file__).resolve().parent
ROOT = TESTS.parents[1]

distributed = pytest.importorskip("distributed")


# ---------------------------------------------------------------- a real scenario sweep
SCENARIO = """
[scenario]
title = "sweep test"
output = "swept"
""" + LIF_ESCAPE_TABLES + """[input]
shape = "constant"
mu = 15.0
[run]
t_end = 40.0
dt = 0.1
record_interval = 1.0
montecarlo_neurons = 3000
seed = 3
[sweep]
"input.mu" = [15.0, 18.0]
"noise.hazard.width" = [2.0, 3.0]
"""


def write(tmp_path, text, name="s.toml"):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def renewal_rate_hz(tau, thr, reset, t_ref, rate0, width, mu):
    """Stationary rate 1/(mean ISI) of a LIF with exponential escape at constant drive
    (renewal theory: mean ISI = t_ref + integral of the survivor function; scipy quadrature)."""
    def hazard_per_ms(s):
        u = mu + (reset - mu) * math.exp(-s / tau)
        return rate0 * math.exp((u - thr) / width) * 1e-3

    def survivor(s):
        return math.exp(-integrate.quad(hazard_per_ms, 0.0, s, limit=200)[0])

    # beyond T = 40 tau the membrane has settled (e^-40), the hazard is constant and the
    # survivor decays exponentially: its tail integral is S(T) / h(T)
    t_settled = 40.0 * tau
    body = integrate.quad(survivor, 0.0, t_settled, limit=400, epsabs=0.0, epsrel=1e-10)[0]
    mean_isi = t_ref + body + survivor(t_settled) / hazard_per_ms(t_settled)
    return 1000.0 / mean_isi


@pytest.fixture(scope="module")
def dask_cluster():
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                       dashboard_address=":0")
    yield cluster
    cluster.close()


def _outputs(res):
    return [(r["status"], r["outputs"], r["curves"]) for r in res.records]


def test_point_seeds_are_spawned_children_of_the_sweep_seed():
    # numpy's documented SeedSequence.spawn: child i has spawn_key (i,)
    children = np.random.SeedSequence(42).spawn(7)
    for i in (0, 3, 6):
        assert np.array_equal(point_seed(42, i).generate_state(4), children[i].generate_state(4))
    assert not np.array_equal(point_seed(42, 1).generate_state(4), point_seed(43, 1).generate_state(4))


def test_grid_is_every_combination_last_key_fastest():
    pts = grid_points({"a": [1, 2], "b": [10.0, 20.0, 30.0]})
    assert pts == [{"a": a, "b": b} for a in (1, 2) for b in (10.0, 20.0, 30.0)]
    with pytest.raises(ValueError, match="`b`"):
        grid_points({"a": [1], "b": []})
    with pytest.raises(ValueError, match="finite"):
        grid_points({"a": [float("nan")]})


def test_interrupted_sweep_resumes_without_recomputing_and_matches_an_uninterrupted_one(tmp_path):
    out = tmp_path / "killed"
    code = ("import sys; sys.path.insert(0, sys.argv[1]); import _sweep_points as h; "
            "from popdens.sweeps import sweep; "
            "sweep(h.seeded_point, {'x': [float(i) for i in range(24)], 'z': [0.5]}, sys.argv[2], seed=9, "
            "backend='serial', figures=False)")
    env = {**os.environ, helpers.SLOW_ENV: "0.15", "PYTHONPATH": os.pathsep.join(
        [str(ROOT), os.environ.get("PYTHONPATH", "")])}
    proc = subprocess.Popen([sys.executable, "-c", code, str(TESTS), str(out)], env=env)
    try:
        deadline = time.monotonic() + 60.0
        while time.monotonic() < deadline:
            if out.joinpath("points").is_dir() and len(list(out.joinpath("points").glob("*.json"))) >= 6:
                break
            time.sleep(0.02)
        proc.send_signal(signal.SIGKILL)
    finally:
        proc.wait(timeout=30)
    assert proc.returncode == -signal.SIGKILL
    before = load_sweep(out)
    n_before = sum(r is not None for r in before.records)
    assert 6 <= n_before < 24 and not before.complete
    with pytest.raises(FileExistsError, match="resume it or overwrite"):
        sweep(helpers.seeded_point, {"x": [float(i) for i in range(24)], "z": [0.5]}, out, seed=9)
    with pytest.raises(FileExistsError, match="different sweep"):
        sweep(helpers.seeded_point, {"x": [float(i) for i in range(24)], "z": [0.5]}, out, seed=10, resume=True)
    resumed = sweep(helpers.seeded_point, {"x": [float(i) for i in range(24)], "z": [0.5]}, out, seed=9,
                    resume=True, backend="processes", workers=2, figures=False)
    assert resumed.complete and resumed.diagnostics["computed_now"] == 24 - n_before
    kept = [i for i, r in enumerate(before.records) if r is not None]
    assert all(resumed.records[i]["worker"] == before.records[i]["worker"] for i in kept)  # not recomputed
    fresh = sweep(helpers.seeded_point, {"x": [float(i) for i in range(24)], "z": [0.5]}, tmp_path / "fresh",
                  seed=9, backend="serial", figures=False)
    assert _outputs(resumed) == _outputs(fresh)
    assert (out / "results.csv").read_text() == (tmp_path / "fresh" / "results.csv").read_text()
    assert not list((out / "points").glob(".*.part"))
    # reference values computed here, outside any sweep machinery: x**2 + z and the seeded draws
    rng = np.random.default_rng(np.random.SeedSequence(9).spawn(24)[5])
    assert fresh.values("y")[5, 0] == 25.5 and fresh.values("draw")[5, 0] == rng.normal()


def test_a_dead_worker_process_costs_only_its_point(tmp_path):
    res = sweep(helpers.dies_at_two, {"x": [1, 2, 3, 4, 5]}, tmp_path / "d", backend="processes", workers=2,
                retries=1, figures=False)
    assert [r["status"] for r in res.records] == ["ok", "failed", "ok", "ok", "ok"]
    assert "WorkerLost" in res.records[1]["error"] and res.records[1]["attempts"] == 2


def test_bad_outputs_and_arguments_are_named():
    rec = evaluate_point(helpers.returns_text, 0, {"x": 1}, 0, 0)
    assert rec["status"] == "failed" and "output `y` must be a real number" in rec["error"]
    with pytest.raises(ValueError, match="`backend`"):
        sweep(helpers.seeded_point, {"x": [1]}, backend="threads")
    with pytest.raises(ValueError, match="`seed`"):
        sweep(helpers.seeded_point, {"x": [1]}, seed=-1)
    with pytest.raises(ValueError, match="point 1 has parameters"):
        sweep(helpers.seeded_point, [{"x": 1}, {"y": 2}])
    with pytest.raises(ValueError, match="differ in length"):
        Curve("f", [1, 2], [1])


def test_list_mode_resume_retry_failed_and_figures(tmp_path):
    pts = [{"x": 1.0, "z": 0.0}, {"x": 3.0, "z": 1.0}, {"x": 2.0, "z": 2.0}]
    res = sweep(helpers.refuses_three, pts, tmp_path / "l", backend="serial", retries=0)
    assert res.shape == (3,) and res.values("y").tolist()[0] == 1.0 and len(res.failed) == 1
    assert sorted(p.name for p in (tmp_path / "l" / "figures").glob("*.png")) == ["draw.png", "walk.png", "y.png"]
    again = sweep(helpers.refuses_three, pts, tmp_path / "l", backend="serial", retries=0, resume=True,
                  retry_failed=True, figures=False)
    assert again.diagnostics["computed_now"] == 1


def test_progress_line_counts_points_rate_and_time_left():
    import io

    from popdens.sweeps.engine import _SweepProgress

    buf = io.StringIO()
    bar = _SweepProgress(10, 4, True, stream=buf)
    bar.start -= 2.0  # two seconds ago, two new points: 1 point/s, 4 left
    bar.update(6, 1)
    bar.close()
    line = buf.getvalue()
    assert "6/10 points, 1 failed" in line and "points/s" in line and "~4 s left" in line
    quiet = io.StringIO()  # not a terminal: silent
    bar = _SweepProgress(10, 0, None, stream=quiet)
    bar.start -= 5.0
    bar.update(5)
    assert quiet.getvalue() == ""


# ---------------------------------------------------------------- scenario files and the CLI
def test_sweep_table_errors_name_the_key(tmp_path):
    cases = {
        'analysis = "gian"': "`analysis`",
        'mode = "zip"': "`mode`",
        'methd = 1': "did you mean `method`?|unknown key `methd`",
        '"neuron.tau_m" = []': "`neuron.tau_m`",
        '"nueron.tau_m" = [1.0]': "dotted key",
        '"noise.kernel.width" = [1.0]': r"no table \[noise.kernel\]",
        '"neuron.tau_m" = { start = 1.0, stop = 2.0 }': "start = ...",
        '"neuron.tau_m" = [10.0, -1.0]': r"point 1 \{'input.mu': 15.0, 'noise.hazard.width': 2.0, 'neuron.tau_m': -1.0\}",
        'frequencies = [1.0]': "not used by analysis `summary`",
        'seed = -2': "`seed`",
    }
    for line, pattern in cases.items():
        text = SCENARIO.replace('"input.mu" = [15.0, 18.0]\n"noise.hazard.width" = [2.0, 3.0]',
                                '"input.mu" = [15.0]\n"noise.hazard.width" = [2.0]\n' + line)
        sc = parse_scenario(__import__("tomllib").loads(text), "bad.toml")
        with pytest.raises(ScenarioError, match=pattern):
            plan_sweep(sc)
    sc = parse_scenario(__import__("tomllib").loads(SCENARIO.replace("[sweep]", '[sweep]\nanalysis = "transfer"')),
                        "t.toml")
    with pytest.raises(ScenarioError, match="needs `frequencies`"):
        plan_sweep(sc)
    sc = parse_scenario(__import__("tomllib").loads(SCENARIO.replace("[sweep]", '[sweep]\nmode = "list"')), "l.toml")
    assert plan_sweep(sc).n_points == 2


def test_transfer_sweep_equals_direct_calls(tmp_path):
    text = SCENARIO.replace("[sweep]", '[sweep]\nanalysis = "transfer"\nfrequencies = [0.0, 5.0, 50.0]') \
        .replace('"input.mu" = [15.0, 18.0]', '"input.mu" = { start = 20.0, stop = 24.0, count = 2 }')
    sc = parse_scenario(__import__("tomllib").loads(text), tmp_path / "t.toml")
    res = run_sweep_scenario(sc, tmp_path / "t", backend="serial", figures=False)
    import popdens

    f = np.array([0.0, 5.0, 50.0])
    x, amp = res.curves("transfer_amplitude_Hz_per_mV")
    _, ph = res.curves("transfer_phase_deg")
    assert x.tolist() == f.tolist()
    for i, p in enumerate(res.points):
        pop = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0),
                                 popdens.EscapeNoise(popdens.hazard.Exponential(20.0, p["noise.hazard.width"])))
        chi = popdens.transfer(pop, p["input.mu"], f)
        assert amp[i].tolist() == np.abs(chi).tolist() and ph[i].tolist() == np.degrees(np.angle(chi)).tolist()
    # zero frequency: the slope of the stationary rate (renewal theory, scipy quadrature, central difference)
    p = res.points[0]
    h = 0.01
    slope = (renewal_rate_hz(10.0, 20.0, 0.0, 2.0, 20.0, p["noise.hazard.width"], p["input.mu"] + h)
             - renewal_rate_hz(10.0, 20.0, 0.0, 2.0, 20.0, p["noise.hazard.width"], p["input.mu"] - h)) / (2 * h)
    assert amp[0, 0] == pytest.approx(slope, rel=2e-3)


def test_gain_sweeps_match_renewal_theory_and_the_siegert_formula(tmp_path):
    text = SCENARIO.replace("[sweep]", '[sweep]\nanalysis = "gain"')
    sc = parse_scenario(__import__("tomllib").loads(text), tmp_path / "g.toml")
    res = run_sweep_scenario(sc, tmp_path / "g", backend="serial", figures=False)
    for p, r in zip(res.points, res.values("rate_Hz").ravel()):
        ref = renewal_rate_hz(10.0, 20.0, 0.0, 2.0, 20.0, p["noise.hazard.width"], p["input.mu"])
        assert r == pytest.approx(ref, rel=1e-6)
    # gain curves across noise levels, white-noise LIF
    white = SCENARIO.replace('kind = "escape"\n[noise.hazard]\nshape = "exponential"\nrate = 20.0\nwidth = 2.0',
                             'kind = "white"\nsigma = 4.0')
    white = white[:white.index("[sweep]")] + '[sweep]\nanalysis = "gain"\ndrives = [12.0, 18.0, 24.0]\n' \
        '"noise.sigma" = [2.0, 5.0]\n'
    sc = parse_scenario(__import__("tomllib").loads(white), tmp_path / "w.toml")
    res = run_sweep_scenario(sc, tmp_path / "w", backend="serial")
    mus, rates = res.curves("rate_Hz")
    assert (tmp_path / "w" / "figures" / "rate_Hz.png").stat().st_size > 0
    from scipy.special import erfcx

    for i, sigma in enumerate((2.0, 5.0)):
        for j, mu in enumerate(mus):
            # Siegert formula (Siegert 1951; Brunel & Hakim 1999): 1/r = t_ref + tau sqrt(pi) *
            # integral over ((reset-mu)/sigma, (thr-mu)/sigma) of exp(x^2)(1 + erf x) = erfcx(-x)
            integral = integrate.quad(lambda x: erfcx(-x), (0.0 - mu) / sigma, (20.0 - mu) / sigma,
                                      epsabs=0.0, epsrel=1e-12, limit=200)[0]
            ref = 1000.0 / (2.0 + 10.0 * math.sqrt(math.pi) * integral)
            assert rates[i, j] == pytest.approx(ref, rel=1e-6)


def test_cli_sweep_exit_codes_outputs_and_resume(tmp_path, capsys):
    p = write(tmp_path, SCENARIO.replace("montecarlo_neurons = 3000", "montecarlo_neurons = 0"))
    assert main(["check", str(p)]) == 0
    assert "sweep: 4 points" in capsys.readouterr().out
    assert main(["run", str(p), "--quiet", "--out", str(tmp_path / "by-run")]) == 0  # run delegates to sweep
    assert (tmp_path / "by-run" / "results.csv").is_file()
    assert main(["sweep", str(p), "--workers", "1", "--quiet"]) == 0
    out = tmp_path / "swept"
    assert (out / "results.csv").stat().st_size > 0 and len(list((out / "points").glob("*.json"))) == 4
    assert (out / "figures" / "final_rate_Hz.png").stat().st_size > 0  # a heat map over the 2-D grid
    assert "4 points (4 computed now, 0 failed)" in capsys.readouterr().out
    assert main(["sweep", str(p), "--workers", "1", "--quiet"]) == 2
    assert "resume it or overwrite it" in capsys.readouterr().err
    assert main(["sweep", str(p), "--workers", "1", "--quiet", "--resume", "--no-figures"]) == 0
    assert "0 computed now" in capsys.readouterr().out
    assert main(["sweep", str(p), "--workers", "0"]) == 2
    assert main(["sweep", str(p), "--retry-failed"]) == 2
    bad = write(tmp_path, SCENARIO.replace('"input.mu"', '"input.nu"'), "bad.toml")
    assert main(["sweep", str(bad)]) == 2
    assert "input.nu" in capsys.readouterr().err and not (tmp_path / "bad-output").exists()


# ---------------------------------------------------------------- Dask (a loopback cluster, started once; last,
# because its threads make later process pools start with forkserver instead of fork)
def test_same_scenario_sweep_on_serial_process_pool_and_dask_is_identical(tmp_path, request):
    sc = parse_scenario(__import__("tomllib").loads(SCENARIO), tmp_path / "s.toml")
    serial = run_sweep_scenario(sc, tmp_path / "serial", backend="serial", figures=False)
    pool = run_sweep_scenario(sc, tmp_path / "pool", backend="processes", workers=2, figures=False)
    dask_cluster = request.getfixturevalue("dask_cluster")  # after the pool: its threads make pools slower to start
    dask = run_sweep_scenario(sc, tmp_path / "dask", scheduler=dask_cluster.scheduler_address, figures=False)
    assert serial.complete and not serial.failed
    assert _outputs(serial) == _outputs(pool) == _outputs(dask)  # bit for bit, Monte Carlo included
    texts = {(tmp_path / k / "results.csv").read_text() for k in ("serial", "pool", "dask")}
    assert len(texts) == 1
    assert len({r["worker"] for r in dask.records}) >= 1 and dask.diagnostics["backend"] == "dask"
    # the numbers themselves: the stationary rate from renewal theory (scipy quadrature); the
    # solver starts stationary under a constant drive, so its final rate is that rate
    for (mu, width), rate in zip([(m, w) for m in (15.0, 18.0) for w in (2.0, 3.0)],
                                 serial.values("final_rate_Hz").ravel()):
        ref = renewal_rate_hz(10.0, 20.0, 0.0, 2.0, 20.0, width, mu)
        assert rate == pytest.approx(ref, rel=2e-3)
    # Monte Carlo twin with N = 3000 over 40 ms: Poisson standard error of the mean rate
    # sqrt(r / (N T)); renewal counts with CV < 1 vary less, so 5 SE is a loose bound (common practice)
    pred = serial.values("mean_rate_Hz").ravel()
    mc = serial.values("montecarlo_mean_rate_Hz").ravel()
    se = np.sqrt(pred / (3000 * 0.040))
    assert np.all(np.abs(mc - pred) <= 5 * se)
    # different seeds give different Monte Carlo numbers (the seed reaches the point)
    other = sweep(plan_sweep(sc).point, plan_sweep(sc).points, seed=4, backend="serial", figures=False)
    assert not np.array_equal(other.values("montecarlo_mean_rate_Hz"), serial.values("montecarlo_mean_rate_Hz"))
    assert np.array_equal(other.values("final_rate_Hz"), serial.values("final_rate_Hz"))


@pytest.mark.parametrize("backend", ["serial", "processes", "dask"])
def test_a_point_that_raises_is_retried_recorded_and_does_not_stop_the_others(tmp_path, backend, dask_cluster):
    kw = {"scheduler": dask_cluster.scheduler_address} if backend == "dask" else {"backend": backend}
    res = sweep(helpers.refuses_three, {"x": [1, 2, 3, 4]}, tmp_path / "f", seed=1, retries=2, workers=2,
                figures=False, **kw)
    assert res.complete
    assert [r["status"] for r in res.records] == ["ok", "ok", "failed", "ok"]
    bad = res.records[2]
    assert bad["attempts"] == 3 and "ValueError: x = 3 is refused" in bad["error"]
    assert np.isnan(res.values("y")[2]) and res.values("y")[3] == 16.0
    fail_csv = (tmp_path / "f" / "failures.csv").read_text()
    assert "x = 3 is refused" in fail_csv and fail_csv.count("\n") == 2
    assert json.loads((tmp_path / "f" / "summary.json").read_text())["n_failed"] == 1
