"""Rate fluctuations of circuit runs: the spectrum estimate, the dense-connectivity note, and the
network demo's mean field starting from the fixed point the spiking twin settles in."""

from __future__ import annotations

import json

import numpy as np
import pytest

import popdens
from popdens.network.result import CircuitResult


def test_rate_spectrum_finds_a_sinusoid_and_keeps_its_power(rng):
    t = np.arange(0.0, 4000.0 + 0.5, 1.0)  # ms, 1 ms bins
    amp = 3.0
    rate = np.vstack([10.0 + amp * np.sin(2 * np.pi * 50.0 * t / 1000.0),
                      10.0 + rng.normal(0.0, 2.0, t.size)])
    res = CircuitResult(names=("A", "B"), t=t, rate=rate, method="montecarlo")
    freqs, power = res.rate_spectrum(segment_ms=500.0)
    assert freqs[np.argmax(power[0])] == pytest.approx(50.0, abs=2.0)
    df = freqs[1] - freqs[0]
    # Parseval: a one-sided density integrates to the variance (amp^2 / 2 for the sine, 4 Hz^2 for
    # the white noise; Welch with a Hann window, common practice)
    assert power[0].sum() * df == pytest.approx(amp**2 / 2, rel=0.05)
    assert power[1].sum() * df == pytest.approx(4.0, rel=0.1)
    # white noise of variance s^2 sampled at fs is flat at 2 s^2 / fs (one-sided)
    assert np.median(power[1]) == pytest.approx(2 * 4.0 / 1000.0, rel=0.25)
    with pytest.raises(ValueError, match="`t_from`"):
        res.rate_spectrum(t_from=3999.0)


def _circuit(size_e, size_i):
    cell = popdens.LIF(tau_m=20.0, threshold=20.0, reset=10.0, refractory=2.0)
    white = popdens.Population(cell, popdens.WhiteNoise(sigma=1.0))
    cohorts = [popdens.Cohort("E", white, size=size_e, drive=24.0, sigma_ext=1.0),
               popdens.Cohort("I", white, size=size_i, drive=24.0, sigma_ext=1.0)]
    paths = [popdens.Pathway(s, t, weight=w, in_degree=c, delay=2.0)
             for s, w, c in (("E", 0.1, 800), ("I", -0.5, 200)) for t in ("E", "I")]
    return popdens.Circuit(cohorts, paths)


def test_dense_pathways_are_noted_and_sparse_ones_are_not():
    notes = _circuit(2000, 500).density_notes()
    assert len(notes) == 4 and all("40%" in n for n in notes)
    assert _circuit(8000, 2000).density_notes() == []


def test_network_demo_starts_the_mean_field_at_its_fixed_point(tmp_path):
    from pathlib import Path

    from popdens.cli import main

    src = Path(__file__).resolve().parents[2] / "scenarios" / "balanced_circuit.toml"
    text = src.read_text()
    text = text.replace("montecarlo = true", "montecarlo = false").replace("t_end = 500.0", "t_end = 20.0")
    text = text[:text.index("[network.stability_map]")]
    (tmp_path / "b.toml").write_text(text)
    assert main(["run", str(tmp_path / "b.toml"), "--quiet"]) == 0
    summary = json.loads((tmp_path / "balanced_circuit-output" / "summary.json").read_text())
    start = summary["prediction"]["initial_rates_hz"]
    fp = summary["fixed_points"][0]["rates_hz"]
    assert start == fp
    # started at the fixed point, the mean field stays there (it was 37 Hz at t = 0 before)
    final = summary["prediction"]["final_rates_hz"]
    assert final["E"] == pytest.approx(fp["E"], rel=1e-3)
    assert summary["notes"] == []
