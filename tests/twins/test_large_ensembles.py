"""Large ensembles: advanced in parts so Ctrl-C acts within a second, refused before allocation when
they cannot fit in memory, and a long run says how long it will take."""

from __future__ import annotations

import io

import numpy as np
import pytest

import popdens
from popdens import drive, hazard, progress
from popdens.solvers import _recording
from popdens.twins import population as mc_mod

LIF = popdens.LIF(10.0, 20.0, 0.0, 2.0)
ESCAPE = popdens.EscapeNoise(hazard.Exponential(20.0, 2.0))


@pytest.mark.parametrize("pop", [
    popdens.Population(LIF, ESCAPE),
    popdens.Population(LIF, popdens.WhiteNoise(4.0)),
    popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0, adaptation=[popdens.Adaptation(tau=50.0, jump=1.0)]),
                       ESCAPE),
], ids=["escape", "white", "adapting"])
def test_an_ensemble_advanced_in_parts_simulates_the_same_neurons(monkeypatch, pop):
    stim = drive.Step(t=20.0, before=15.0, after=19.0)
    whole = popdens.montecarlo(pop, stim, 60.0, 3000, seed=2, burn_in=100.0, record_interval=5.0)
    monkeypatch.setattr(_recording, "WORK_PER_CALL", 700)  # parts of 700 neurons, one step per call
    monkeypatch.setattr(mc_mod, "WORK_PER_CALL", 700)
    parts = popdens.montecarlo(pop, stim, 60.0, 3000, seed=2, burn_in=100.0, record_interval=5.0,
                               record_spikes=True)
    # different random streams, same neurons: bins agree within 4 Poisson standard errors of the
    # difference (independent runs; common practice)
    se = np.sqrt(whole.rate_standard_error() ** 2 + parts.rate_standard_error() ** 2)[1:]
    assert np.all(np.abs(whole.rate[1:] - parts.rate[1:]) <= 4.0 * se + 1e-12)
    # every spike is kept once, in time order, with its neuron's id in the whole ensemble
    assert parts.spike_times.size == round(parts.rate[1:].sum() * 3000 * 5.0e-3)
    assert np.all(np.diff(parts.spike_times) >= 0)
    assert parts.spike_ids.min() >= 0 and parts.spike_ids.max() < 3000
    assert parts.spike_ids.max() >= 2100  # neurons of the last part fire too


def test_an_ensemble_too_large_for_memory_is_refused_before_allocation():
    with pytest.raises(ValueError, match=r"`n` = 1000000000000: .* needs about .* GB of memory"):
        popdens.montecarlo(popdens.Population(LIF, ESCAPE), 15.0, 10.0, 10**12)
    with pytest.raises(ValueError, match=r"`t_end`"):
        popdens.simulate(popdens.Population(LIF, ESCAPE), 15.0, 1e12, 0.1)


class _Clock:
    def __init__(self):
        self.now = 0.0

    def __call__(self):
        return self.now


@pytest.mark.parametrize("pace,announced", [(0.1, True), (0.001, False)])
def test_a_long_run_announces_its_duration_once(monkeypatch, pace, announced):
    clock = _Clock()
    monkeypatch.setattr(progress.time, "perf_counter", clock)
    out = io.StringIO()
    bar = progress.Progress(10_000, "montecarlo", None, stream=out)  # automatic mode, not a terminal
    for done in range(0, 10_000, 100):
        clock.now += 100 * pace + (30.0 if done == 0 else 0.0)  # the first block includes compilation
        bar.update(done + 100)
    text = out.getvalue()
    # pace 0.1 s per unit: ~1000 s left after the first two seconds -> about 17 min
    assert (text.count("will take about") == 1) == announced
    if announced:
        assert "17 min" in text or "16 min" in text
    quiet = io.StringIO()
    bar = progress.Progress(10_000, "montecarlo", False, stream=quiet)
    for done in range(0, 10_000, 100):
        clock.now += 10.0
        bar.update(done + 100)
    assert quiet.getvalue() == ""
