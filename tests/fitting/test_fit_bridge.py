"""The noise-model bridge: an escape-noise stand-in for a white-noise LIF (Plesser & Gerstner 2000)."""

from __future__ import annotations

import numpy as np
import pytest

import popdens
from popdens.fitting import calibrate_escape
from references import siegert_rate


def test_exponential_escape_calibrated_to_a_white_noise_lif():
    # ISI densities at three drives (sub- to suprathreshold) fitted by minimum Kullback-Leibler divergence;
    # the white-noise rates in the table are the Siegert formula (scipy quadrature, tests/references.py).
    # Measured errors of the stand-in (this test): rate +13 %, -2 %, -9 %; CV -4 %, -13 %, -16 %; step
    # response RMS 4 %, 8 %, 13 % of the rate at 16, 19, 22 mV; the bounds leave a little room.  The fit must beat its start (a width of sigma/sqrt 2, rate 1/tau_m).
    cell = popdens.LIF(tau_m=20.0, threshold=20.0, reset=10.0, refractory=2.0)
    pop = popdens.Population(cell, popdens.WhiteNoise(sigma=4.0))
    cal = calibrate_escape(pop, [16.0, 19.0, 22.0], step_duration=100.0)
    for row in cal.table:
        assert row["rate_white"] == pytest.approx(siegert_rate(pop, row["mu"]), rel=1e-4)
        assert abs(row["rate_error"]) < 0.16 and abs(row["cv_error"]) < 0.2 and row["step_rms_error"] < 0.16
    assert set(cal.summary) == {"subthreshold", "suprathreshold"}
    start = popdens.Population(cell, popdens.EscapeNoise(popdens.hazard.Exponential(50.0, 4.0 / np.sqrt(2.0))))
    start_err = max(abs(popdens.stationary(start, m).rate / r["rate_white"] - 1.0) for m, r in zip([16, 19, 22], cal.table))
    assert max(abs(r["rate_error"]) for r in cal.table) < start_err
    assert len(cal.plot().axes) == 2


def test_bridge_refuses_escape_input_and_single_drives():
    cell = popdens.LIF(tau_m=20.0, threshold=20.0, reset=10.0, refractory=2.0)
    with pytest.raises(ValueError, match="white-noise"):
        calibrate_escape(popdens.Population(cell, popdens.EscapeNoise(popdens.hazard.Exponential(10.0, 2.0))), [15, 18])
    with pytest.raises(ValueError, match="at least two"):
        calibrate_escape(popdens.Population(cell, popdens.WhiteNoise(4.0)), [15.0])
    with pytest.raises(ValueError, match="`form`"):
        calibrate_escape(popdens.Population(cell, popdens.WhiteNoise(4.0)), [15.0, 18.0], form="sigmoid")
