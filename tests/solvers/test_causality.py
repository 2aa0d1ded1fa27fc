"""Causality of every time-domain front end: a jump in the drive never changes an output before it.

Reference: the same run under the drive without the jump.  Up to the jump the two runs must be
bit-identical (the future of the drive is not an input of a causal system; the twins use the same
seed, so they draw the same numbers until the drives differ), and right after it they must differ
(so the test can fail).  Before the fix, the drive was interpolated linearly over the step before
a jump and every front end responded one step early.
"""

from __future__ import annotations

import numpy as np
import pytest

import popdens
from popdens import drive, hazard
from popdens.network import Circuit, Cohort, Pathway, montecarlo_network, simulate_network

ESCAPE = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0), popdens.EscapeNoise(hazard.Exponential(20.0, 2.0)))
WHITE = popdens.Population(popdens.LIF(10.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(3.0))
EIF_WHITE = popdens.Population(popdens.EIF(10.0, 15.0, 1.0, 25.0, 5.0, 1.0), popdens.WhiteNoise(3.0))
ADAPTING = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0, adaptation=[popdens.Adaptation(50.0, 1.0)]),
                              ESCAPE.noise)

# coarse pinned grids may warn; accuracy is not the subject here
pytestmark = pytest.mark.filterwarnings("ignore::popdens.exceptions.AccuracyWarning")

#: 5.3 = 53 * 0.1 only up to round-off (53 * 0.1 = 5.300000000000001): the jump must still be
#: seen on the boundary; 7.0 is exact.
JUMP_TIMES = [5.3, 7.0]


def _check(before, after, t, t_jump, must_differ=True):
    """Outputs at t <= t_jump equal; within 1 ms after it they differ."""
    upto = t <= t_jump + 1e-9
    np.testing.assert_array_equal(before[upto], after[upto])
    if not must_differ:  # a few hundred neurons may not fire within 1 ms
        return
    soon = ~upto & (t <= t_jump + 1.0 + 1e-9)
    assert np.any(before[soon] != after[soon])


@pytest.mark.parametrize("t_jump", JUMP_TIMES)
@pytest.mark.parametrize("pop", [ESCAPE, WHITE, EIF_WHITE, ADAPTING],
                         ids=["refractory-density", "fokker-planck", "fp-eif", "adapting"])
def test_density_solvers_do_not_respond_before_a_jump(pop, t_jump):
    base = 14.0
    # the automatic potential grid is chosen for the range of the whole drive, so it is pinned here
    # (resolution is a setting; test_automatic_grid_is_chosen_for_the_whole_drive covers the default)
    fixed = {} if isinstance(pop.noise, popdens.EscapeNoise) else dict(n_cells=400, u_min=-20.0)
    for stim in (drive.Step(t_jump, base, base + 8.0), drive.Step(t_jump, base, base - 8.0),
                 drive.Pulse(t_jump, 1.0, base, 10.0)):
        ref = popdens.simulate(pop, base, 10.0, 0.1, **fixed)
        res = popdens.simulate(pop, stim, 10.0, 0.1, **fixed)
        _check(ref.rate, res.rate, ref.t, t_jump)
        _check(ref.mean_u, res.mean_u, ref.t, t_jump)
    # recorded every 0.5 ms: the bin ending at the jump is untouched as well
    ref = popdens.simulate(pop, base, 10.0, 0.1, record_interval=0.5, **fixed)
    res = popdens.simulate(pop, drive.Pulse(7.0, 1.0, base, 10.0), 10.0, 0.1, record_interval=0.5, **fixed)
    _check(ref.rate, res.rate, ref.t, 7.0)


def test_automatic_grid_is_chosen_for_the_whole_drive():
    """With default settings the Fokker-Planck grid suits the drive's whole range, so the runs with and
    without a later jump may use different grids: before the jump they then differ only by the grid
    error, within the solver's tolerance (max(1e-3 rate, 0.01 Hz), its grid's share half of it)."""
    ref = popdens.simulate(EIF_WHITE, 14.0, 10.0, 0.1)
    res = popdens.simulate(EIF_WHITE, drive.Pulse(7.0, 1.0, 14.0, 10.0), 10.0, 0.1)
    upto = ref.t <= 7.0 + 1e-9
    assert np.all(np.abs(res.rate[upto] - ref.rate[upto]) <= np.maximum(1e-3 * ref.rate[upto], 0.01))


def test_noise_jump_does_not_act_early():
    stepped = popdens.Population(WHITE.neuron, popdens.WhiteNoise(drive.Step(5.3, 3.0, 6.0)))
    ref = popdens.simulate(WHITE, 14.0, 10.0, 0.1, n_cells=400, u_min=-20.0)
    res = popdens.simulate(stepped, 14.0, 10.0, 0.1, n_cells=400, u_min=-20.0)
    _check(ref.rate, res.rate, ref.t, 5.3)


@pytest.mark.parametrize("pop", [ESCAPE, WHITE, ADAPTING], ids=["escape", "white", "adapting"])
def test_twins_do_not_respond_before_a_jump(pop):
    base = 14.0
    kw = dict(t_end=10.0, n=3000, seed=5, burn_in=50.0)
    ref = popdens.montecarlo(pop, base, **kw)
    res = popdens.montecarlo(pop, drive.Pulse(5.3, 1.0, base, 15.0), **kw)
    _check(ref.rate[1:], res.rate[1:], ref.t[1:], 5.3)  # rate[0] of the white-noise twin is NaN
    _check(ref.mean_u, res.mean_u, ref.t, 5.3)


def _circuit(pop, d):
    return Circuit([Cohort("E", pop, size=400, drive=d)], [Pathway("E", "E", 0.1, 40, delay=1.5)])


@pytest.mark.parametrize("pop", [ESCAPE, WHITE], ids=["escape", "white"])
def test_network_front_ends_do_not_respond_before_a_jump(pop):
    base = 14.0
    stim = drive.Pulse(5.3, 1.0, base, 10.0)
    ref = simulate_network(_circuit(pop, base), 10.0)
    res = simulate_network(_circuit(pop, stim), 10.0)
    _check(ref.rate[0], res.rate[0], ref.t, 5.3)
    kw = dict(seed=3, burn_in=20.0)
    ref = montecarlo_network(_circuit(pop, base), 10.0, **kw)
    res = montecarlo_network(_circuit(pop, stim), 10.0, **kw)
    _check(ref.rate[0][1:], res.rate[0][1:], ref.t[1:], 5.3, must_differ=False)  # rate[0] is NaN here
    _check(ref.mean_u[0][1:], res.mean_u[0][1:], ref.t[1:], 5.3)
