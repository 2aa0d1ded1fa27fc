"""Input drives: values against their definitions, CSV traces, validation."""

from __future__ import annotations

import numpy as np
import pytest

from popdens import drive


def test_drive_values():
    # reference values written out by hand from each drive's definition in its docstring (common practice)
    t = np.array([0.0, 9.9, 10.0, 15.0, 30.0])
    np.testing.assert_allclose(drive.Constant(3.0)(t), 3.0)
    np.testing.assert_allclose(drive.Step(10.0, 1.0, 2.0)(t), [1, 1, 2, 2, 2])
    np.testing.assert_allclose(drive.Pulse(10.0, 10.0, 1.0, 4.0)(t), [1, 1, 5, 5, 1])
    np.testing.assert_allclose(drive.Ramp(10.0, 20.0, 0.0, 10.0)(t), [0, 0, 0, 5, 10])
    np.testing.assert_allclose(drive.Sine(1.0, 2.0, 50.0)(t), 1.0 + 2.0 * np.sin(2 * np.pi * 50.0 * t / 1000.0))
    s = drive.Constant(1.0) + drive.Step(10.0, 0.0, 1.0) + 2.0
    np.testing.assert_allclose(s(t), [3, 3, 4, 4, 4])
    assert isinstance(drive.Constant(1.0)(5.0), float)


def test_trace_interpolates_and_reads_csv(tmp_path):
    # linear interpolation between samples, constant beyond the ends, as numpy.interp (common practice)
    tr = drive.Trace([0.0, 10.0, 20.0], [0.0, 10.0, 0.0])
    np.testing.assert_allclose(tr([-1.0, 5.0, 15.0, 25.0]), [0.0, 5.0, 5.0, 0.0])
    path = tmp_path / "drive.csv"
    path.write_text("time_ms,drive_mv\n0,1\n10,3\n")
    tr2 = drive.Trace.from_csv(path)
    np.testing.assert_allclose(tr2([5.0]), [2.0])
    bad = tmp_path / "bad.csv"
    bad.write_text("0,1\n5,x\n")
    with pytest.raises(ValueError, match="bad.csv:2"):
        drive.Trace.from_csv(bad)


def test_invalid_drives():
    with pytest.raises(ValueError, match="`duration`"):
        drive.Pulse(0.0, 0.0, 1.0, 1.0)
    with pytest.raises(ValueError, match="`t_start`"):
        drive.Ramp(10.0, 5.0, 0.0, 1.0)
    with pytest.raises(ValueError, match="strictly increasing"):
        drive.Trace([0.0, 0.0], [1.0, 2.0])
    with pytest.raises(ValueError, match="`mu`"):
        drive.Constant(float("nan"))
    with pytest.raises(ValueError, match="`frequency`"):
        drive.Sine(0.0, 1.0, -1.0)


def test_jump_times_and_left_limits():
    # from the definitions: Step and Pulse are right-continuous with jumps at t (and t + duration)
    st = drive.Step(10.0, 1.0, 2.0)
    np.testing.assert_array_equal(st.jump_times(0.0, 20.0), [10.0])
    assert st.jump_times(10.5, 20.0).size == 0
    assert st(10.0) == 2.0 and st.left_limit(10.0) == 1.0 and st.left_limit(10.5) == 2.0
    pu = drive.Pulse(10.0, 5.0, 1.0, 4.0)
    np.testing.assert_array_equal(pu.jump_times(0.0, 20.0), [10.0, 15.0])
    np.testing.assert_allclose(pu.left_limit([10.0, 12.0, 15.0, 16.0]), [1.0, 5.0, 5.0, 1.0])
    s = drive.Sine(0.0, 1.0, 10.0) + st + pu + drive.Step(10.0, 0.0, 0.0)  # a zero step does not jump
    np.testing.assert_array_equal(s.jump_times(0.0, 20.0), [10.0, 15.0])
    assert s.left_limit(15.0) == pytest.approx(float(np.sin(2 * np.pi * 0.15)) + 2.0 + 5.0)
    for cont in (drive.Ramp(0.0, 5.0, 0.0, 1.0), drive.Trace([0.0, 1.0], [0.0, 1.0]), drive.Constant(2.0)):
        assert cont.jump_times(-1.0, 10.0).size == 0
        assert cont.left_limit(0.5) == cont(0.5)
