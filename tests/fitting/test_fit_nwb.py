"""A round trip through a Neurodata Without Borders file written with pynwb (the optional `nwb` extra)."""

from __future__ import annotations

import datetime

import numpy as np
import pytest

import popdens
from popdens import SpikeTrains, drive, hazard

pynwb = pytest.importorskip("pynwb", reason='the NWB round trip needs pynwb: pip install ".[nwb]"')


def _write_nwb(path, trains_ms, stim_t_ms, stim_mv):
    nwb = pynwb.NWBFile(session_description="popdens round trip (demo data)", identifier="popdens-test",
                        session_start_time=datetime.datetime(2026, 1, 1, tzinfo=datetime.timezone.utc))
    for tr in trains_ms:
        nwb.add_unit(spike_times=np.asarray(tr) / 1000.0)  # NWB stores seconds
    nwb.add_acquisition(pynwb.TimeSeries(name="drive", data=np.asarray(stim_mv), unit="mV",
                                         timestamps=np.asarray(stim_t_ms) / 1000.0))
    with pynwb.NWBHDF5IO(str(path), "w") as io:
        io.write(nwb)


def test_nwb_units_and_stimulus_give_the_same_fit_as_the_arrays(tmp_path):
    cell = popdens.LIF(tau_m=10.0, threshold=20.0, reset=14.0, refractory=5.0)
    pop = popdens.Population(cell, popdens.EscapeNoise(hazard.Exponential(rate=20.0, width=2.0)))
    t_stim = np.arange(0.0, 2000.1, 0.5)
    stim_mv = 20.0 + 3.0 * np.sin(2 * np.pi * 3.0 * t_stim * 1e-3)
    stim = drive.Trace(t_stim, stim_mv)
    mc = popdens.montecarlo(pop, stim, t_end=2000.0, n=10, seed=9, record_spikes=True)
    trains = [mc.spike_times[mc.spike_ids == i] for i in range(10)]
    path = tmp_path / "session.nwb"
    _write_nwb(path, trains, t_stim, stim_mv)

    loaded = popdens.load_spike_trains(path, duration=2.0)  # seconds, the file's unit
    stim_loaded = popdens.load_stimulus(path, name="drive")
    # round trip through a file written by pynwb: the same data and the same fit as the arrays (common practice)
    assert loaded.n_trials == 10 and loaded.duration == pytest.approx(2000.0)
    for a, b in zip(loaded.trains, trains):
        np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-9)
    np.testing.assert_allclose(stim_loaded(t_stim), stim_mv, rtol=1e-12)

    direct = popdens.fit_psth(pop, SpikeTrains(trains, duration=2000.0), stim, ["rate", "width"], scale=1.0)
    via_file = popdens.fit_psth(pop, loaded, stim_loaded, ["rate", "width"], scale=1.0)
    for name in ("rate", "width"):
        assert via_file.estimates[name] == pytest.approx(direct.estimates[name], rel=1e-9)
        assert via_file.se[name] == pytest.approx(direct.se[name], rel=1e-6)
    sub = popdens.load_spike_trains(path, duration=2.0, unit_ids=[0, 3])
    assert sub.ids == (0, 3)
    with pytest.raises(ValueError, match="not in the units table"):
        popdens.load_spike_trains(path, unit_ids=[42])
