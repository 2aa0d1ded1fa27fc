"""Numerical guards: too-coarse settings warn (AccuracyWarning naming the setting and a value to use),
failures show in Result.status / message and never as silent NaNs, and extreme but valid regimes
stay accurate or warn.

References: renewal theory and the Siegert formula (tests/references.py, scipy), closed forms.
"""

from __future__ import annotations

import re
import warnings

import numpy as np
import pytest

import popdens
from popdens.solvers._recording import steps_per_call
from popdens import hazard
from popdens.exceptions import AccuracyWarning
from popdens.result import STATUS_FAILED, STATUS_INTERRUPTED
from references import renewal_rate, siegert_rate


def escape_pop(rate=20.0, width=2.0, model=None, tau_ref=2.0):
    nrn = model or popdens.LIF(tau_m=10.0, threshold=20.0, reset=0.0, refractory=tau_ref)
    return popdens.Population(nrn, popdens.EscapeNoise(hazard.Exponential(rate, width)))


def white_pop(sigma, tau_m=10.0, tau_ref=2.0):
    return popdens.Population(popdens.LIF(tau_m=tau_m, threshold=20.0, reset=0.0, refractory=tau_ref),
                              popdens.WhiteNoise(sigma))


def run_recording(*args, **kwargs):
    """simulate() with every AccuracyWarning recorded (warnings are errors elsewhere in the suite)."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", AccuracyWarning)
        res = popdens.simulate(*args, **kwargs)
    return res, [str(w.message) for w in caught if issubclass(w.category, AccuracyWarning)]


def suggested(msg, key):
    m = re.search(rf"use {key} = ([0-9.e+-]+)", msg)
    assert m, msg
    return float(m.group(1))


# ------------------------------------------------------------------ each guard, and its suggestion
def test_hazard_times_dt_guard_warns_and_its_suggestion_is_accurate():
    pop, mu = escape_pop(width=0.2), 25.0  # a nearly hard threshold: hazards of 1e4-1e5 Hz
    reference = renewal_rate(pop, mu)
    res, msgs = run_recording(pop, mu, 1.0, 0.1)
    assert len(msgs) == 1 and "`dt` = 0.1 ms" in msgs[0] and "hazard" in msgs[0]
    assert abs(res.rate[0] / reference - 1.0) > 1e-3  # the warning was deserved
    assert res.diagnostics["accuracy_warnings"] == msgs
    dt = suggested(msgs[0], "dt")
    assert (1.0 / dt) == pytest.approx(round(1.0 / dt), rel=1e-9)  # divides the span
    res2, msgs2 = run_recording(pop, mu, 1.0, dt)
    assert msgs2 == []
    # renewal theory (scipy solve_ivp); limit chosen for ~1e-3 (solvers/refractory.py, MAX_HAZARD_DT)
    assert res2.rate[0] == pytest.approx(reference, rel=1.5e-3)


def test_dt_against_tau_m_guard_for_heun_models_only():
    eif = popdens.EIF(tau_m=2.0, soft_threshold=15.0, slope_factor=2.0, cutoff=30.0, reset=0.0, refractory=2.0)
    _, msgs = run_recording(escape_pop(rate=1.0, model=eif), 5.0, 5.0, 0.5)
    assert any("`tau_m` (2 ms)" in m and suggested(m, "dt") <= 0.2 for m in msgs), msgs
    # the LIF uses the exact exponential step: the same dt is not flagged for tau_m
    lif = popdens.LIF(tau_m=2.0, threshold=20.0, reset=0.0, refractory=2.0)
    _, msgs = run_recording(escape_pop(rate=1.0, model=lif), 5.0, 5.0, 0.5)
    assert not any("tau_m" in m for m in msgs), msgs
    _, msgs = run_recording(white_pop(4.0, tau_m=2.0), 15.0, 5.0, 0.5)
    assert any("`tau_m` (2 ms)" in m for m in msgs), msgs


def test_cell_size_guard_warns_at_low_noise_and_its_suggestion_is_accurate():
    pop, mu = white_pop(0.05), 22.0
    reference = siegert_rate(pop, mu)
    _, msgs = run_recording(pop, mu, 1.0, 0.1, n_cells=400)
    assert len(msgs) == 1 and "n_cells" in msgs[0]
    n = int(suggested(msgs[0], "n_cells"))
    res, msgs = run_recording(pop, mu, 1.0, 0.1, n_cells=n)
    assert msgs == []
    # Siegert formula (Siegert 1951; Brunel & Hakim 1999): within the solver's tolerance
    assert res.rate[0] == pytest.approx(reference, rel=1e-3, abs=0.01)
    # the default grid is chosen fine enough without being told
    res, msgs = run_recording(pop, mu, 1.0, 0.1)
    assert msgs == [] and res.rate[0] == pytest.approx(reference, rel=1e-3, abs=0.01)


def test_lower_boundary_guard_names_u_min():
    pop = white_pop(4.0)
    _, msgs = run_recording(pop, 15.0, 1.0, 0.1, u_min=-0.5)
    assert len(msgs) == 1 and "`u_min` = -0.5 mV" in msgs[0]
    u_min = suggested(msgs[0], "u_min")
    assert u_min < -0.5
    _, msgs = run_recording(pop, 15.0, 1.0, 0.1, u_min=u_min - 5.0)
    assert msgs == []


def test_guard_sees_a_state_reached_during_the_run_and_warns_once():
    # starts quiet at a weak drive; the strong phase later makes h dt too large
    pop = escape_pop(width=0.5)
    drive = popdens.drive.Step(t=100.0, before=10.0, after=40.0)
    # (the time-step error control would add its own warning about dt: not the subject here)
    res, msgs = run_recording(pop, drive, 1000.0, 0.1, record_interval=10.0, error_control="off")
    assert len(msgs) == 1 and "hazard" in msgs[0]
    assert res.success


def test_default_settings_of_the_shipped_scenario_do_not_warn():
    from pathlib import Path

    from popdens.scenario import load_scenario

    for path in sorted((Path(__file__).resolve().parents[2] / "scenarios").glob("*.toml")):
        sc = load_scenario(path)
        if not getattr(sc, "runs_in_time", False):  # analysis-only or network scenario: no single run
            continue
        _, msgs = run_recording(sc.population, sc.drive, sc.t_end, sc.dt, record_interval=sc.record_interval)
        assert msgs == [], (path.name, msgs)


# ------------------------------------------------------------------ failures are reported, not hidden
class NanAfter(popdens.drive.Drive):
    """A user drive that stops being finite after t_bad (ms)."""

    def __init__(self, t_bad):
        self.t_bad = t_bad

    def _evaluate(self, t):
        return np.where(t < self.t_bad, 15.0, np.nan)


@pytest.mark.parametrize("pop", [escape_pop(), white_pop(4.0)], ids=["escape", "white"])
def test_non_finite_drive_fails_with_status_and_no_nan_in_rates(pop):
    res = popdens.simulate(pop, NanAfter(1200.0), 2000.0, 0.1, record_interval=1.0)
    assert res.status == STATUS_FAILED and "not finite at t = 1200" in res.message
    assert np.all(np.isfinite(res.rate)) and np.all(np.isfinite(res.mean_u))
    assert res.t[-1] <= 1200.0
    mc = popdens.montecarlo(pop, NanAfter(50.0), 100.0, 100, seed=1)
    assert mc.status == STATUS_FAILED and "not finite" in mc.message
    # rate[0] of a white-noise ensemble is NaN by definition (documented in _mc_diffusive)
    assert np.all(np.isfinite(mc.rate[1:] if isinstance(pop.noise, popdens.WhiteNoise) else mc.rate))


def test_non_finite_drive_at_start_is_a_clear_error():
    with pytest.raises(ValueError, match="not finite at t = 0"):
        popdens.simulate(escape_pop(), NanAfter(-1.0), 10.0, 0.1)


def test_solver_blow_up_is_reported_in_status():
    # a custom drift that is finite between reset and threshold (so it is accepted) but not defined
    # above 25 mV, which escape-noise neurons driven to 60 mV reach: the solver must say so
    nrn = popdens.CustomNeuron(drift="-u + sqrt(25 - u)", tau_m=10.0, threshold=20.0, reset=0.0, refractory=2.0)
    pop = popdens.Population(nrn, popdens.EscapeNoise(hazard.Exponential(0.001, 50.0)))
    drive = popdens.drive.Step(t=10.0, before=5.0, after=60.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", AccuracyWarning)
        res = popdens.simulate(pop, drive, 200.0, 0.1)
    assert res.status == STATUS_FAILED, res.message
    assert "non-finite" in res.message and "ms" in res.message
    assert res.t.size < 2001


def test_interrupt_inside_a_block_returns_interrupted_status(monkeypatch):
    import importlib

    sim = importlib.import_module("popdens.solvers.frontend")
    calls = {"n": 0}
    real = sim.Progress.update

    def update(self, done):
        calls["n"] += 1
        if calls["n"] == 3:
            raise KeyboardInterrupt
        return real(self, done)

    monkeypatch.setattr(sim.Progress, "update", update)
    res = popdens.simulate(escape_pop(), 15.0, 2000.0, 0.1)
    assert res.status == STATUS_INTERRUPTED and "interrupted" in res.message
    per_call = steps_per_call(res.diagnostics["n_bins"])  # steps of one compiled call for this grid
    assert res.n_steps == 3 * per_call and res.t[-1] == pytest.approx(3 * per_call * 0.1)
    assert np.all(np.isfinite(res.rate))


# ------------------------------------------------------------------ extreme but valid regimes
@pytest.mark.parametrize("mu,rate,width,dt,max_age", [
    (5.0, 1.0, 1.0, 0.1, None),  # rate ~3e-7 Hz
    (0.0, 1.0, 1.0, 0.1, None),  # rate ~2e-9 Hz
    (25.0, 20.0, 50.0, 0.1, None),  # very flat hazard: almost Poisson
    (60.0, 20.0, 2.0, 0.01, 30.0),  # 121 Hz, hazards up to 1e9 Hz: at a fine dt
    (25.0, 20.0, 0.05, 0.002, 30.0),  # almost a hard threshold: at a fine dt
])
def test_escape_extremes_accurate_without_warning(mu, rate, width, dt, max_age):
    pop = escape_pop(rate, width)
    res, msgs = run_recording(pop, mu, 1.0, dt, **({"max_age": max_age} if max_age else {}))
    assert msgs == []
    # renewal theory (scipy solve_ivp); 1.5e-3 is the guard's design accuracy
    assert res.rate[0] == pytest.approx(renewal_rate(pop, mu), rel=1.5e-3)


@pytest.mark.parametrize("mu,rate,width", [(60.0, 20.0, 2.0), (25.0, 20.0, 0.05), (200.0, 5.0, 5.0)])
def test_escape_extremes_at_default_dt_warn(mu, rate, width):
    pop = escape_pop(rate, width)
    res, msgs = run_recording(pop, mu, 1.0, 0.1)
    assert msgs and "`dt`" in msgs[0]


@pytest.mark.parametrize("mu,sigma,rel", [
    (10.0, 1.0, 1e-2),  # rate ~2e-41 Hz
    (5.0, 2.0, 5e-3),  # rate ~2e-22 Hz
    (200.0, 2.0, 1e-3),  # near the ceiling: ~330 Hz with tau_ref = 2 ms
    (15.0, 50.0, 1e-3),  # very high noise
])
def test_white_extremes_accurate_without_warning(mu, sigma, rel):
    pop = white_pop(sigma)
    res, msgs = run_recording(pop, mu, 1.0, 0.1)
    assert msgs == []
    # Siegert formula (Siegert 1951; Brunel & Hakim 1999 eq. 21), scipy quadrature
    assert res.rate[0] == pytest.approx(siegert_rate(pop, mu), rel=rel)


def test_white_very_low_noise_warns():
    _, msgs = run_recording(white_pop(0.02), 22.0, 1.0, 0.1)
    assert msgs and "n_cells" in msgs[0]
