"""Data in: spike trains, stimuli and gain curves from arrays and files, with clear errors."""

from __future__ import annotations

import numpy as np
import pytest

from popdens import GainCurve, SpikeTrains, load_gain_curve, load_spike_trains, load_stimulus


def test_arrays_are_kept_in_ms_and_seconds_are_converted():
    sp = SpikeTrains([[1.0, 30.0, 75.5], [12.0]], duration=100.0)
    assert sp.n_trials == 2 and sp.n_spikes == 4 and sp.duration == 100.0
    np.testing.assert_array_equal(sp.isis(), [29.0, 45.5])
    sec = SpikeTrains([[0.001, 0.030, 0.0755]], duration=0.1, unit="s")
    # unit conversion s -> ms by hand (x 1000; common practice)
    np.testing.assert_allclose(sec.trains[0], [1.0, 30.0, 75.5])
    assert sec.duration == pytest.approx(100.0)


@pytest.mark.parametrize("trains, kw, words", [
    ([[3.0, 2.0]], {}, "not sorted"),
    ([[-1.0, 2.0]], {}, "negative"),
    ([[1.0, np.nan]], {}, "non-finite"),
    ([], {}, "empty"),
    ([[], []], {}, "no spikes"),
    ([[1.0, 50.0]], {"duration": 40.0}, "beyond `duration`"),
    ([[0.010, 0.062, 0.101, 0.180]], {}, "look like seconds"),
    ([[1.0]], {"unit": "us"}, "`unit`"),
    ([[1.0], [2.0]], {"ids": [1]}, "`ids`"),
])
def test_bad_trains_are_refused_naming_the_problem(trains, kw, words):
    with pytest.raises(ValueError, match=words):
        SpikeTrains(trains, **kw)


def test_csv_and_npz_round_trips(tmp_path):
    trains = [np.array([2.0, 40.0, 90.0]), np.array([5.5, 77.0])]
    csv = tmp_path / "spikes.csv"
    csv.write_text("trial,time_ms\n" + "".join(f"{i},{t}\n" for i, tr in enumerate(trains) for t in tr))
    sp = load_spike_trains(csv, duration=100.0)
    assert sp.ids == (0, 1)
    for a, b in zip(sp.trains, trains):
        np.testing.assert_array_equal(a, b)
    npz = tmp_path / "spikes.npz"
    np.savez(npz, trial=np.repeat([0, 1], [3, 2]), time=np.concatenate(trains), duration=100.0)
    sp2 = load_spike_trains(npz)
    assert sp2.duration == 100.0
    for a, b in zip(sp2.trains, trains):
        np.testing.assert_array_equal(a, b)
    np.savez(npz, trial_0=trains[0], trial_1=trains[1])
    assert load_spike_trains(npz).n_spikes == 5
    # a file in seconds is caught, and read with unit="s"
    csv.write_text("".join(f"0,{t / 1000}\n" for t in trains[0]))
    with pytest.raises(ValueError, match="unit='s'"):
        load_spike_trains(csv)
    np.testing.assert_allclose(load_spike_trains(csv, unit="s").trains[0], trains[0])


def test_bad_files_are_refused(tmp_path):
    with pytest.raises(ValueError, match="not a file"):
        load_spike_trains(tmp_path / "missing.csv")
    bad = tmp_path / "x.txt"
    bad.write_text("1,2\n")
    with pytest.raises(ValueError, match="unknown file type"):
        load_spike_trains(bad)
    csv = tmp_path / "s.csv"
    csv.write_text("0,1.0\n0,abc\n")
    with pytest.raises(ValueError, match="not numbers"):
        load_spike_trains(csv)
    npz = tmp_path / "s.npz"
    np.savez(npz, spikes=np.arange(3.0))
    with pytest.raises(ValueError, match="trial"):
        load_spike_trains(npz)


def test_gain_curve_and_stimulus_files(tmp_path):
    path = tmp_path / "fi.csv"
    path.write_text("drive_mV,rate_Hz,se_Hz\n10,1.0,0.2\n15,5.0,0.4\n20,12.0,0.5\n")
    curve = load_gain_curve(path)
    np.testing.assert_array_equal(curve.rate, [1.0, 5.0, 12.0])
    with pytest.raises(ValueError, match="`se` must be > 0"):
        GainCurve([1.0, 2.0], [1.0, 2.0], [0.1, 0.0])
    with pytest.raises(ValueError, match="same non-zero length"):
        GainCurve([1.0, 2.0], [1.0], [0.1, 0.1])
    stim = tmp_path / "stim.csv"
    stim.write_text("t_ms,mu_mV\n0,1.0\n10,3.0\n")
    assert load_stimulus(stim)(5.0) == pytest.approx(2.0)
    with pytest.raises(ValueError, match="`unit` must be 'mV'"):
        load_stimulus(stim, unit="pA")
