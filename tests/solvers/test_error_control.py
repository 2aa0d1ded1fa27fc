"""The time-step error control of `simulate`: a companion run estimates the error of every recorded
rate (Richardson), dt is refined (default) or a warning names it (dt given).

References: the same solver at a 16x finer step, whose own error is ~256x smaller (second order;
the solvers' convergence orders are measured in test_refractory.py / test_fokker_planck.py) -- so
these tests check the estimate and the refinement, not the model; the models are checked against
direct simulations in test_checks_vs_direct_simulation.py.
"""

from __future__ import annotations

import dataclasses
import warnings

import numpy as np
import pytest

import popdens
from popdens import drive, hazard
from popdens.exceptions import AccuracyWarning

ESCAPE = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0), popdens.EscapeNoise(hazard.Exponential(20.0, 2.0)))
WHITE = popdens.Population(popdens.LIF(10.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(3.0))


# Reference: the same solver at dt/16 (step refinement, common practice); the tolerance is the issue's
# stated default, max(1e-3 rate, 0.1 Hz).
def within(res, ref, rtol=1e-3, atol=0.1):
    return np.all(np.abs(res.rate[1:] - ref.rate[1:]) <= np.maximum(rtol * np.abs(ref.rate[1:]), atol))


@pytest.mark.parametrize("pop", [ESCAPE, WHITE], ids=["escape", "white"])
def test_gentle_drive_keeps_the_default_step_and_reports_an_estimate_that_bounds_the_error(pop):
    d = drive.Sine(16.0, 2.0, 20.0)
    with warnings.catch_warnings():
        warnings.simplefilter("error", AccuracyWarning)
        res = popdens.simulate(pop, d, 100.0, record_interval=0.5)
    info = res.diagnostics["error_control"]
    assert res.dt == 0.1 and info["ratio_to_tolerance"] <= 1.0
    ref = popdens.simulate(pop, d, 100.0, dt=0.1 / 16, record_interval=0.5, error_control="off")
    err = np.max(np.abs(res.rate[1:] - ref.rate[1:]))
    assert err <= 2.0 * info["estimate_hz"] + 1e-6  # the estimate is of the right size (measured ratio < 1.2)
    assert within(res, ref)


def test_strong_pulse_refines_dt_until_the_tolerance_is_met():
    """A 2 ms pulse of +25 mV into the white-noise population (peak 355 Hz): at dt = 0.1 ms the error
    is 1.3 times the tolerance (estimated 1.3, actual 1.29), so dt is halved; the result meets the
    tolerance against a fine run (measured 0.32 of it)."""
    d = drive.Pulse(20.0, 2.0, 15.0, 25.0)
    res = popdens.simulate(WHITE, d, 40.0, record_interval=0.5)
    info = res.diagnostics["error_control"]
    assert res.dt < 0.1 and info["ratio_to_tolerance"] <= 1.0
    ref = popdens.simulate(WHITE, d, 40.0, dt=res.dt / 16, record_interval=0.5, error_control="off")
    assert within(res, ref)


def test_a_given_dt_is_kept_and_a_warning_names_a_step_that_meets_the_tolerance():
    d = drive.Pulse(20.0, 2.0, 15.0, 25.0)
    with pytest.warns(AccuracyWarning, match="`dt` = 0.1 ms") as rec:
        res = popdens.simulate(WHITE, d, 40.0, dt=0.1, record_interval=0.5)
    assert res.dt == 0.1
    msg = [str(w.message) for w in rec if "time-step error" in str(w.message)][0]
    dt_new = float(msg.split("use dt = ")[1].split(" ms")[0])
    with warnings.catch_warnings():
        warnings.simplefilter("error", AccuracyWarning)
        good = popdens.simulate(WHITE, d, 40.0, dt=dt_new, record_interval=0.5)
    ref = popdens.simulate(WHITE, d, 40.0, dt=dt_new / 16, record_interval=0.5, error_control="off")
    assert within(good, ref)


def test_jumps_on_odd_steps_use_a_finer_companion():
    d = drive.Step(10.1, 15.0, 20.0)  # step 101: not on the grid of 2 dt
    res = popdens.simulate(WHITE, d, 30.0)
    info = res.diagnostics["error_control"]
    assert 0.05 in info["steps_run_ms"] and 0.2 not in info["steps_run_ms"]


def test_error_control_can_be_switched_off_and_bad_values_are_refused():
    res = popdens.simulate(ESCAPE, 15.0, 5.0, error_control="off")
    assert "error_control" not in res.diagnostics
    with pytest.raises(ValueError, match="`error_control`"):
        popdens.simulate(ESCAPE, 15.0, 5.0, error_control="sometimes")
    with pytest.raises(ValueError, match="`rtol`"):
        popdens.simulate(ESCAPE, 15.0, 5.0, rtol=0.0)


@pytest.mark.parametrize("dt", [None, 0.1], ids=["refine", "dt-given"])
def test_an_interrupt_during_the_companion_run_is_reported_not_dropped(monkeypatch, dt):
    """Regression: a Ctrl-C or SIGTERM that landed in the error check's companion run was taken for a
    failed companion; the first run was returned as completed and the signal was lost (a scenario
    then went on into its Monte Carlo run)."""
    from popdens.result import STATUS_INTERRUPTED
    from popdens.solvers import frontend

    real, calls = frontend._run, []

    def interrupted_companion(*args, **kwargs):
        solver, res = real(*args, **kwargs)
        calls.append(res.dt)
        if len(calls) == 2:  # the companion: as if the user's signal arrived during it
            res = dataclasses.replace(res, status=STATUS_INTERRUPTED, message="interrupted by the user at t = 0 ms")
        return solver, res

    monkeypatch.setattr(frontend, "_run", interrupted_companion)
    res = popdens.simulate(ESCAPE, 16.0, 10.0, dt)
    assert len(calls) == 2
    assert res.status == STATUS_INTERRUPTED and "error check" in res.message
