"""Default settings against an independent direct simulation, for both noise models and the inputs
users care about: a step up, a step down, a strong 3 ms pulse, a synchronised start and a 200 Hz
sinusoid (slow tests).

Reference: the Monte Carlo twin with N = 50 000 neurons at dt = 0.01 ms (ten times finer than the
solvers' default; the white-noise twin uses the exact Ornstein-Uhlenbeck step with Brownian-bridge
crossings, a scheme independent of the Fokker-Planck solver).  Standard error of a 0.5 ms bin:
sqrt(r / (N * 0.5 ms)) with the predicted rate r (Poisson counts of independent neurons, common
practice): 2.8 % of a 10 Hz rate, 0.9 % of 100 Hz.  Pass: >= 99 % of bins within 4 SE; the worst z
is printed (run with -s to see it) and tabulated in DEVELOPERS.md.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

import popdens
from popdens import drive, hazard
from popdens.exceptions import AccuracyWarning

N = 50_000
T_END = 100.0
BIN = 0.5
POPULATIONS = {
    "escape": popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0), popdens.EscapeNoise(hazard.Exponential(20.0, 2.0))),
    "white": popdens.Population(popdens.LIF(10.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(3.0)),
}
CASES = {
    "step-up": (drive.Step(50.0, 15.0, 20.0), "stationary"),
    "step-down": (drive.Step(50.0, 20.0, 15.0), "stationary"),
    "pulse": (drive.Pulse(50.0, 3.0, 15.0, 15.0), "stationary"),
    "synchronous": (drive.Constant(18.0), "synchronous"),
    "sine-200Hz": (drive.Sine(17.0, 3.0, 200.0), "stationary"),
}


@pytest.mark.slow
@pytest.mark.parametrize("case", list(CASES))
@pytest.mark.parametrize("noise", list(POPULATIONS))
def test_default_settings_agree_with_a_direct_simulation(noise, case):
    pop = POPULATIONS[noise]
    d, initial = CASES[case]
    with warnings.catch_warnings():
        warnings.simplefilter("error", AccuracyWarning)  # the defaults must not need a warning
        pred = popdens.simulate(pop, d, T_END, record_interval=BIN, initial=initial)
    kw = {"burn_in": 300.0} if initial == "stationary" else {}
    mc = popdens.montecarlo(pop, d, T_END, n=N, dt=0.01, seed=11, record_interval=BIN, initial=initial, **kw)
    se = np.sqrt(np.maximum(pred.rate[1:], 1e-9) / (N * BIN * 1e-3))
    z = (mc.rate[1:] - pred.rate[1:]) / se
    print(f"{noise} {case}: {np.mean(np.abs(z) <= 4.0):.3f} of bins within 4 SE, worst |z| {np.abs(z).max():.2f} "
          f"at {pred.t[1:][np.argmax(np.abs(z))]:g} ms; dt {pred.dt:g} ms, estimated error "
          f"{pred.diagnostics['error_control']['estimate_hz']:.3g} Hz")
    assert np.mean(np.abs(z) <= 4.0) >= 0.99
