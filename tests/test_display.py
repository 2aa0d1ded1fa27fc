"""Every result type displays itself in a notebook (HTML and Markdown tables with units) and the
tabular ones convert to pandas DataFrames with units in the column names."""

from __future__ import annotations

import numpy as np
import pytest

import popdens
from popdens.network.linear_stability import Stability
from popdens.network.maps import StabilityMap
from popdens.network.result import CircuitResult
from popdens.network.states import FixedPoint

ESCAPE = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0),
                            popdens.EscapeNoise(popdens.hazard.Exponential(20.0, 2.0)))


def _check(obj, *needles):
    html, md = obj._repr_html_(), obj._repr_markdown_()
    assert html.startswith("<div") and "<table" in html and "|---|---|" in md
    for n in needles:
        assert n in html and n in md, n
    assert "array(" not in html and "{'" not in html  # no Python reprs


def test_every_result_type_has_a_rich_display():
    fp = FixedPoint(names=("E", "I"), rates=np.array([5.0, 7.5]), mu=np.array([15.0, 14.0]),
                    sigma=np.array([4.0, np.nan]), residual=1e-12)
    _check(fp, "5 Hz", "15 mV", "4 mV")
    st = Stability(state=fp, roots=np.array([-0.05 + 0.4j]), growth_rate=-50.0, frequency=63.66, stable=True,
                   n_unstable=0)
    _check(st, "stable", "-50 1/s", "63.66 Hz")
    smap = StabilityMap(x=np.array([1.0, 2.0]), y=np.array([20.0, 30.0]), x_label="inhibition factor",
                        y_label="drive (mV)", growth_rate=np.array([[-10.0, 5.0], [np.nan, -1.0]]),
                        frequency=np.zeros((2, 2)), rates=np.ones((2, 2, 1)))
    _check(smap, "1 of 4", "inhibition factor")
    t = np.arange(0.0, 11.0)
    cr = CircuitResult(names=("E",), t=t, rate=np.vstack([np.linspace(1, 3, t.size)]), method="mean-field",
                       dt=0.1)
    _check(cr, "rate of E", "Hz", "status 0")
    steady = popdens.stationary(ESCAPE, 16.0)
    _check(steady, "Hz", "mV", "ms")


def test_tables_convert_to_dataframes():
    pytest.importorskip("pandas")
    res = popdens.simulate(ESCAPE, 16.0, t_end=5.0, dt=0.1, record_interval=1.0)
    df = res.to_dataframe()
    assert list(df.columns) == ["t_ms", "rate_Hz", "mean_u_mV", "refractory_fraction", "drive_mV"]
    np.testing.assert_array_equal(df["rate_Hz"].to_numpy(), res.rate)
    cr = CircuitResult(names=("E", "I"), t=np.arange(3.0), rate=np.ones((2, 3)), method="montecarlo")
    assert list(cr.to_dataframe().columns) == ["t_ms", "rate_Hz_E", "rate_Hz_I"]
