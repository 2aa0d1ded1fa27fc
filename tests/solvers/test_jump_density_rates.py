"""The jump-density solver with time-varying input rates (``advance_rates``): a first-passage density in
closed form, the defect-correction solve against refactorising every step, constant rates against the
constant-noise solver, the linear response against the resolvent theory, and input validation."""

from __future__ import annotations

import math

import numpy as np
import pytest

import popdens
from popdens.result import STATUS_OK
from popdens.solvers import jump_density
from popdens.solvers.jump_density import JumpDensitySolver

LIF = popdens.LIF(20.0, 20.0, 10.0, 2.0)


def test_first_passage_with_a_time_varying_input_rate():
    """PIF without drift, fixed PSP a = gap: after a synchronous spike at t = 0 the next spike comes with the
    first input spike after the refractory period, so for t_ref < t < 2 t_ref the rate is the first-event
    density of an inhomogeneous Poisson process, nu(t) exp(-int_{t_ref}^t nu) (exact).  Only backward
    Euler's time error remains (each step takes the rate at its end, a shift of dt/2 against the fast
    modulation): first order, measured 3.7 % at dt = 0.02 ms and 1.8 % at 0.01 ms."""
    a, tref = 0.5, 2.0
    nu = lambda t: 0.4 * (1.0 + 0.5 * np.sin(2.0 * np.pi * t / 1.0))  # 1/ms
    nu_int = lambda t: 0.4 * ((t - tref) - 0.5 / (2.0 * np.pi) * (np.cos(2.0 * np.pi * t) - np.cos(2.0 * np.pi * tref)))
    pop = popdens.Population(popdens.PIF(10.0, a, 0.0, tref), popdens.ShotNoise(400.0, a))
    errs = []
    for dt in (0.02, 0.01):
        n = int(round(3.9 / dt))
        tb = np.arange(n + 1) * dt
        s = JumpDensitySolver(pop, dt)
        s.initialize(0.0, None, "synchronous")
        rate, _, _ = s.advance_rates(np.zeros(n + 1), 1e3 * nu(tb), np.zeros(n + 1))
        t = tb[1:] - 0.5 * dt  # rates are step means
        sel = (t > tref + 0.2) & (t < 2 * tref - 0.2)
        exact = 1e3 * nu(t[sel]) * np.exp(-nu_int(t[sel]))
        errs.append(np.max(np.abs(rate[sel] / exact - 1.0)))
        assert s.mass() == pytest.approx(1.0, abs=1e-12)
    assert errs[1] < 0.025
    assert 1.7 < errs[0] / errs[1] < 2.3  # first order in dt


def _run(monkeypatch, max_corrections, steps=400, dt=0.1):
    monkeypatch.setattr(jump_density, "MAX_CORRECTIONS", max_corrections)
    pop = popdens.Population(LIF, popdens.ShotNoise(1500.0, 0.7, 600.0, 0.45))
    s = JumpDensitySolver(pop, dt, n_cells=150)
    s.plan(np.array([0.0, 12.0]), None)
    s.initialize(6.0, None, "stationary")
    t = np.arange(steps + 1) * dt
    ne = 1500.0 * (1.0 + 0.6 * np.sin(2.0 * np.pi * t / 15.0))  # large, fast swings of both input rates
    ni = 600.0 * (1.0 + 0.8 * np.cos(2.0 * np.pi * t / 11.0))
    rate, _, _ = s.advance_rates(np.full(steps + 1, 6.0), ne, ni)
    return s, rate


def test_defect_correction_agrees_with_refactorising_every_step(monkeypatch):
    # the straightforward backward Euler (a new sparse LU of I - dt L(t) every step, scipy's splu) against
    # the defect-correction solve: the same step to the solve tolerance (measured 3.7e-10 Hz of up to 104 Hz)
    ref_solver, ref = _run(monkeypatch, 0)
    s, rate = _run(monkeypatch, 12)
    assert np.max(np.abs(rate - ref)) < 1e-9 * np.max(ref)
    assert s.factorisations() < ref_solver.factorisations() / 3  # measured 221 against 800
    for solver in (s, ref_solver):
        assert solver.status == STATUS_OK
        assert solver.mass() == pytest.approx(1.0, abs=1e-10)
        assert solver.density().min() >= 0.0


def test_constant_rates_give_the_constant_noise_solution():
    # the generator assembled from its parts (drift plus rates times jump operators) against the generator
    # built whole: the same run to round-off
    pop = popdens.Population(LIF, popdens.ShotNoise(1500.0, 0.7, 600.0, 0.45))
    out = []
    for varying in (False, True):
        s = JumpDensitySolver(pop, 0.1, n_cells=150)
        s.initialize(0.0, None, "synchronous")
        mu = np.full(201, 8.0)
        r = (s.advance_rates(mu, np.full(201, 1500.0), np.full(201, 600.0)) if varying else s.advance(mu))[0]
        out.append(r)
    np.testing.assert_allclose(out[1], out[0], rtol=1e-9, atol=1e-9)


@pytest.mark.slow
def test_small_rate_modulation_follows_the_linear_response():
    """A 5 % sinusoidal modulation of the excitatory input rate at 40 Hz: the output's modulation (least
    squares over two periods, after 50 ms of transient) against the resolvent theory's chi_e(2 pi i f)
    (popdens.theory._shot_rate_response, an independent solve in the frequency domain).  Backward Euler's
    time error is first order (phase lag ~ omega dt / 2 = 0.013 rad); measured: amplitude -0.2 %,
    phase 0.020 rad."""
    from popdens.theory._shot_rate_response import RateResponse

    noise = popdens.ShotNoise(2000.0, 0.5, 500.0, 1.0)
    pop = popdens.Population(LIF, noise)
    mu, f, eps, dt = 4.0, 40.0, 0.05, 0.1
    n = int(round(100.0 / dt))
    tb = np.arange(n + 1) * dt
    s = JumpDensitySolver(pop, dt)
    s.initialize(mu, None, "stationary")
    ne = 2000.0 * (1.0 + eps * np.sin(2.0 * np.pi * f * 1e-3 * tb))
    rate, _, _ = s.advance_rates(np.full(n + 1, mu), ne, np.full(n + 1, 500.0))
    t = tb[1:] - 0.5 * dt
    sel = t > 50.0
    w = 2.0 * np.pi * f * 1e-3
    # step means of a sinusoid: sin and cos each times sinc(f dt); fitted jointly with the mean
    basis = np.column_stack([np.ones(sel.sum()), np.sin(w * t[sel]), np.cos(w * t[sel])])
    coef, *_ = np.linalg.lstsq(basis, rate[sel], rcond=None)
    measured = complex(coef[1], coef[2]) / np.sinc(f * 1e-3 * dt)  # the response to eps*nu*sin: Im part is cos
    chi_e, _ = RateResponse(pop, mu)(np.array([1j * w]))
    predicted = chi_e[0] * eps * 2000.0
    assert abs(measured) == pytest.approx(abs(predicted), rel=0.02)
    assert abs(np.angle(measured / predicted)) < 0.03


def test_input_rates_are_validated():
    pop = popdens.Population(LIF, popdens.ShotNoise(1500.0, 0.7))
    s = JumpDensitySolver(pop, 0.1, n_cells=100)
    s.initialize(0.0, None)
    with pytest.raises(ValueError, match="`exc_rate` must be 3 finite rates"):
        s.advance_rates(np.zeros(3), np.ones(2), np.zeros(3))
    with pytest.raises(ValueError, match="`inh_rate` must be 3"):
        s.advance_rates(np.zeros(3), np.ones(3), np.array([0.0, -1.0, 0.0]))
    with pytest.raises(ValueError, match="`inh_psp` is 0 mV"):
        s.advance_rates(np.zeros(3), np.ones(3), np.ones(3))
    assert math.isfinite(s.advance_rates(np.zeros(3), np.full(3, 1500.0), np.zeros(3))[0][0])
