"""What a sweep writes: tables readable by numpy and pandas, figures labelled with units, coloured by
the swept value and identical byte for byte between runs, an HTML report, rates over time on request."""

from __future__ import annotations

import numpy as np
import pytest

from popdens.plotting import axis_label
from popdens.scenario.sweep import run_sweep_scenario
from references import LIF_ESCAPE_TABLES

SCENARIO = """
[scenario]
title = "outputs of a sweep"
output = "swept"
""" + LIF_ESCAPE_TABLES + """[input]
shape = "constant"
mu = 16.0
[run]
t_end = 20.0
dt = 0.1
record_interval = 1.0
[sweep]
analysis = "summary"
rates_over_time = true
"input.mu" = [15.0, 17.0, 19.0]
"""

TRANSFER = SCENARIO.replace('analysis = "summary"\nrates_over_time = true', 'analysis = "transfer"\n'
                            'frequencies = [0.0, 3.0, 10.0, 30.0, 100.0]')


@pytest.mark.parametrize("name,label", [
    ("rate_Hz", "rate (Hz)"), ("transfer_amplitude_Hz_per_mV", "transfer amplitude (Hz/mV)"),
    ("input.mu", "input mu (mV)"), ("neuron.tau_m", "neuron tau m (ms)"), ("frequency_Hz", "frequency (Hz)"),
    ("growth_rate_per_s", "growth rate (1/s)"), ("point", "point (index)"),
])
def test_every_name_gets_a_quantity_and_unit(name, label):
    assert axis_label(name) == label


def test_sweep_outputs_are_readable_labelled_and_reproducible(tmp_path):
    src = tmp_path / "s.toml"
    src.write_text(SCENARIO)
    res = run_sweep_scenario(src, tmp_path / "a", backend="serial", progress=False)
    run_sweep_scenario(src, tmp_path / "b", backend="serial", progress=False)
    # rates over time kept on request: one rate curve per point, over time (ms)
    t, rates = res.curves("rate_Hz")
    assert rates.shape == (3, 20) and t[0] == 1.0 and np.all(np.diff(rates.mean(axis=1)) > 0)
    # tables: names first, metadata as comments (numpy and pandas read them as documented)
    table = np.genfromtxt(tmp_path / "a" / "results.csv", delimiter=",", names=True, dtype=None, encoding="utf-8")
    assert "output" in table.dtype.names and len(table) > 0
    pd = pytest.importorskip("pandas")
    frame = pd.read_csv(tmp_path / "a" / "results.csv", comment="#")
    assert len(frame) == len(table)
    # figures: same bytes on a rerun (no dates, fixed ids), units on the axes
    for f in sorted((tmp_path / "a" / "figures").iterdir()):
        assert f.read_bytes() == (tmp_path / "b" / "figures" / f.name).read_bytes(), f.name
    svg = (tmp_path / "a" / "figures" / "final_rate_Hz.svg").read_text()
    assert "input mu (mV)" in svg and "final rate (Hz)" in svg
    curves = (tmp_path / "a" / "figures" / "rate_Hz.svg").read_text()
    assert "t (ms)" in curves and "input mu (mV)" in curves  # coloured by the swept drive, colour bar
    report = (tmp_path / "a" / "report.html").read_text()
    assert "outputs of a sweep" in report and "input mu (mV)" in report and "data:image/png" in report
    assert report == (tmp_path / "b" / "report.html").read_text()


def test_frequencies_go_on_a_log_axis_with_markers(tmp_path):
    from popdens.plotting import plot_sweep_curves, plot_sweep_line

    f = np.array([0.0, 3.0, 10.0, 30.0, 100.0])
    fig = plot_sweep_curves(f, np.ones((3, 5)), "frequency_Hz", "transfer_amplitude_Hz_per_mV", ["a", "b", "c"],
                            colour_by=("input.mu", [15.0, 17.0, 19.0]))
    ax = fig.axes[0]
    assert ax.get_xscale() == "log" and ax.get_xlabel() == "frequency (Hz)"
    assert all(line.get_marker() == "o" for line in ax.get_lines())  # sparse points are marked
    assert fig.axes[1].get_ylabel() == "input mu (mV)"  # the colour bar names the swept value
    fig = plot_sweep_line([1.0, 10.0, 100.0], [1.0, 2.0, 3.0], "input.frequency", "rate_Hz")
    assert fig.axes[0].get_xscale() == "log" and fig.axes[0].get_xlabel() == "input frequency (Hz)"
    src = tmp_path / "t.toml"
    src.write_text(TRANSFER)
    run_sweep_scenario(src, tmp_path / "t", backend="serial", progress=False)
    assert (tmp_path / "t" / "figures" / "transfer_amplitude_Hz_per_mV.png").stat().st_size > 0


def test_prediction_tables_are_readable_by_numpy_and_pandas(tmp_path):
    import popdens

    pop = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0), popdens.EscapeNoise(popdens.hazard.Exponential(20.0, 2.0)))
    res = popdens.simulate(pop, 16.0, t_end=5.0, dt=0.1, record_interval=1.0)
    res.to_csv(tmp_path / "p.csv")
    arr = np.genfromtxt(tmp_path / "p.csv", delimiter=",", names=True)
    assert arr.dtype.names == ("t_ms", "rate_Hz", "mean_u_mV", "refractory_fraction", "drive_mV")
    # round trip: numpy and pandas read back what the sweep computed (common practice)
    np.testing.assert_allclose(arr["rate_Hz"], res.rate, rtol=1e-11)
    pd = pytest.importorskip("pandas")
    np.testing.assert_allclose(pd.read_csv(tmp_path / "p.csv", comment="#")["rate_Hz"], res.rate, rtol=1e-11)
