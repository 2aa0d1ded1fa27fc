"""Stationary rates of conductance input: the threshold integration with voltage-dependent drift and
diffusion against a scipy integration of the same stationary equation, the white-current limit against the
Siegert formula, the naive current-based approximation against its defining mapping, and clear errors where
an analysis is not available."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad, solve_ivp
from scipy.special import erfcx

import popdens

LIF = popdens.LIF(20.0, 20.0, 10.0, 2.0)
NOISE = popdens.ConductanceNoise(exc_rate=20000.0, exc_weight=0.02, exc_tau=2.0, exc_reversal=70.0,
                                 inh_rate=5000.0, inh_weight=0.05, inh_tau=5.0, inh_reversal=-10.0)
POP = popdens.Population(LIF, NOISE)


def stationary_rate_by_radau(noise, tau_m, rest, threshold, reset, refractory, mu, u_low):
    """Rate (Hz) of the Stratonovich Fokker--Planck equation J = (A - D'/2) P - D P', stated independently:
    Q = D P obeys dQ/du = ((A + D'/2)/D) Q - J, Q(threshold) = 0, J = rate above reset, 0 below; integrated
    downward with scipy's Radau (rtol 1e-11), 1/rate = tau_ref + int Q/D du for unit flux (Richardson 2007)."""
    chans = [(noise.exc_rate * 1e-3, noise.exc_weight, noise.exc_tau, noise.exc_reversal)]
    if noise.inh_rate > 0:
        chans.append((noise.inh_rate * 1e-3, noise.inh_weight, noise.inh_tau, noise.inh_reversal))

    def coef(u):
        a = (-(u - rest) + mu + sum(w * nu * tau * (e - u) for nu, w, tau, e in chans)) / tau_m
        d = sum(w * w * nu * tau * tau * (e - u) ** 2 for nu, w, tau, e in chans) / (2 * tau_m ** 2)
        dp = sum(-w * w * nu * tau * tau * (e - u) for nu, w, tau, e in chans) / tau_m ** 2
        return a + 0.5 * dp, d

    def rhs(j):
        def f(u, y):
            a, d = coef(u)
            return [a / d * y[0] - j, y[0] / d]
        return f

    top = solve_ivp(rhs(1.0), (threshold, reset), [0.0, 0.0], method="Radau", rtol=1e-11, atol=1e-14)
    low = solve_ivp(rhs(0.0), (reset, u_low), top.y[:, -1], method="Radau", rtol=1e-11, atol=1e-14)
    mass = -low.y[1, -1]  # integrated downward
    return 1000.0 / (refractory + mass)


@pytest.mark.parametrize("mu", [0.0, 10.0, 25.0])
def test_threshold_integration_matches_a_radau_integration(mu):
    """'diffusion' (no shift) against the independent Radau integration of the same equation, 1e-6."""
    ours = float(popdens.gain(POP, mu, method="diffusion"))
    ref = stationary_rate_by_radau(NOISE, 20.0, 0.0, 20.0, 10.0, 2.0, mu, u_low=-9.5)
    assert ours == pytest.approx(ref, rel=1e-6)  # scipy Radau integration of the stationary equation


def test_filtered_method_moves_threshold_and_reset():
    """'filtered' = the same equation with threshold and reset moved by the stated shifts (checked against
    the closed form in tests/model/test_conductance.py), against the Radau integration."""
    d_th, d_re = NOISE.boundary_shifts(20.0, 20.0, 10.0)
    ours = float(popdens.gain(POP, 10.0))
    ref = stationary_rate_by_radau(NOISE, 20.0, 0.0, 20.0 + d_th, 10.0 + d_re, 2.0, 10.0, u_low=-9.5)
    assert ours == pytest.approx(ref, rel=1e-6)  # scipy Radau integration of the stationary equation


def siegert(mu, sigma, tau, th, re, tref):
    """Siegert formula (Siegert 1951; Brunel & Hakim 1999) by scipy quadrature, rate in Hz."""
    val, _ = quad(lambda x: erfcx(-x), (re - mu) / sigma, (th - mu) / sigma, epsabs=0, epsrel=1e-12)
    return 1000.0 / (tref + tau * math.sqrt(math.pi) * val)


def test_far_reversal_potentials_give_white_current_noise():
    """Reversal potentials far away with weights scaled down (w E fixed): the conductances become currents of
    mean w nu tau E and white intensity (w E)^2 nu tau^2, D constant; the rate tends to the Siegert formula
    with sigma^2 = (w E)^2 nu tau^2 / tau_m.  The residual is O(1/E): mostly the leak the conductances add,
    g0 u with g0 = 8/E, which moves the mean by 1.6e-4 mV at E = 1e6 (rate -2.9e-4, steep here); 3e-6 at 1e8."""
    big = 1e8
    we, wi = 2.0 / big, 1.0 / big  # w E = 2 and -1 mV
    noise = popdens.ConductanceNoise(3000.0, we, 1.0, big, inh_rate=2000.0, inh_weight=wi, inh_tau=1.0,
                                     inh_reversal=-big)
    pop = popdens.Population(LIF, noise)
    mean = 3.0 * 2.0 * 1.0 - 2.0 * 1.0 * 1.0  # mV, sum nu w E tau
    sigma = math.sqrt((4.0 * 3.0 + 1.0 * 2.0) / 20.0)
    ours = float(popdens.gain(pop, 15.0, method="diffusion"))
    assert ours == pytest.approx(siegert(15.0 + mean, sigma, 20.0, 20.0, 10.0, 2.0), rel=2e-5)  # Siegert


def test_current_based_approximation_is_the_stated_white_noise_lif():
    """'current-based': Siegert at tau_m with the conductances as currents at E_0 (module docstring)."""
    mu = 10.0
    ge, gi = 0.8, 1.25
    e0 = (0.0 + mu + ge * 70.0 + gi * -10.0) / (1 + ge + gi)
    drive = mu + ge * (70.0 - e0) + gi * (-10.0 - e0)
    sigma = math.sqrt((0.02 ** 2 * 20.0 * 4.0 * (70.0 - e0) ** 2 + 0.05 ** 2 * 5.0 * 25.0 * (-10.0 - e0) ** 2) / 20.0)
    ours = float(popdens.gain(POP, mu, method="current-based"))
    assert ours == pytest.approx(siegert(drive, sigma, 20.0, 20.0, 10.0, 2.0), rel=1e-8)  # Siegert by quad


def test_gain_slope_and_other_models():
    slope = float(popdens.gain_slope(POP, 10.0))
    h = 0.05
    fd = (float(popdens.gain(POP, 10.0 + h)) - float(popdens.gain(POP, 10.0 - h))) / (2 * h)
    assert slope == pytest.approx(fd, rel=1e-3)  # central difference, O(h^2)
    eif = popdens.EIF(20.0, 15.0, 2.0, 30.0, 10.0, 2.0)
    r = popdens.gain(popdens.Population(eif, NOISE), [0.0, 10.0])
    assert np.all(np.diff(r) > 0) and np.all(r > 0)
    with pytest.raises(ValueError, match="'current-based' is defined for the LIF only"):
        popdens.gain(popdens.Population(eif, NOISE), 0.0, method="current-based")


def test_unavailable_analyses_say_so():
    with pytest.raises(ValueError, match="`method` must be one of"):
        popdens.gain(POP, 0.0, method="siegert")
    with pytest.raises(ValueError, match="`sigma` does not apply to ConductanceNoise"):
        popdens.gain(POP, 0.0, sigma=2.0)
    with pytest.raises(ValueError, match="`sigma` does not apply to ConductanceNoise"):
        popdens.stationary(POP, 0.0, sigma=1.0)
    with pytest.raises(ValueError, match="`method` 'jump-density' solves ShotNoise"):
        popdens.simulate(POP, 0.0, t_end=10.0, dt=0.1, method="jump-density")


# ---------------------------------------------------------------------------- linear response
def test_transfer_at_zero_frequency_is_the_gain_slope():
    """chi(0) = d rate / d mu: against central differences (h = 0.02 mV, O(h^2)) of the stationary rate,
    a separate sweep (Q = D P, exponential cells) of the same equation."""
    h = 0.02
    slope = (float(popdens.gain(POP, 10.0 + h)) - float(popdens.gain(POP, 10.0 - h))) / (2 * h)
    chi0 = popdens.transfer(POP, 10.0, [0.0])[0]
    assert abs(chi0.imag) < 1e-12
    assert chi0.real == pytest.approx(slope, rel=1e-4)  # central difference of the stationary rate


@pytest.mark.parametrize("f", [10.0, 100.0])
def test_transfer_matches_a_small_sinusoid_through_the_fokker_planck_solver(f):
    """The Fokker-Planck solver (the same equation in the time domain, finite volumes, TR-BDF2) with a
    0.05 mV sinusoid: amplitude within 1e-3, phase within 1e-3 rad of the complex-frequency sweep (measured
    6e-5 / 8e-5 and 4e-6 / 4e-5 rad at 10 / 100 Hz)."""
    from test_linear_response import fit_sine  # least-squares amplitude and phase

    mu, eps = 10.0, 0.05
    period = 1000.0 / f
    n_per = max(2, int(round(60.0 / period)))
    dt = min(0.02, period / 100.0)
    t_end = round((60.0 + n_per * period) / dt) * dt
    res = popdens.simulate(POP, popdens.drive.Sine(mean=mu, amplitude=eps, frequency=f), t_end=t_end, dt=dt,
                           n_cells=800, progress=False)
    keep = res.t >= res.t[-1] - n_per * period + 0.5 * dt
    amp, phase, _ = fit_sine(res.t[keep] - 0.5 * dt, res.rate[keep], f)
    chi = popdens.transfer(POP, mu, [f])[0]
    assert abs(amp / eps / abs(chi) - 1.0) < 1e-3  # the Fokker-Planck solver, an independent discretisation
    assert abs(phase - np.angle(chi)) < 1e-3


def test_transfer_refuses_noise_modulation():
    with pytest.raises(ValueError, match="`modulate` must be 'mean' for conductance input"):
        popdens.transfer(POP, 10.0, [10.0], "noise")


# ---------------------------------------------------------------------------- stationary state
def test_stationary_state_is_consistent():
    """Rate as gain (a separate sweep, 1e-4); the potential density integrates to 1 - rate tau_ref; the ISI
    density from the inverted transform integrates to 1 and has the mean 1000/rate (renewal identity)."""
    st = popdens.stationary(POP, 10.0)
    assert st.rate == pytest.approx(float(popdens.gain(POP, 10.0)), rel=1e-4)  # threshold integration, Q = D P
    mass = np.sum(0.5 * (st.density[1:] + st.density[:-1]) * np.diff(st.u))
    assert mass == pytest.approx(1.0 - st.rate * 1e-3 * 2.0, abs=1e-4)  # normalisation, refractory mass apart
    t, p = st.isi_t, st.isi_density
    w = np.diff(t)
    assert np.sum(0.5 * (p[1:] + p[:-1]) * w) == pytest.approx(1.0, abs=2e-3)  # a density
    mean = np.sum(0.5 * (t[1:] * p[1:] + t[:-1] * p[:-1]) * w)
    assert mean == pytest.approx(1000.0 / st.rate, rel=3e-3)  # mean ISI = 1 / rate (renewal)
    assert 0.0 < st.cv < 1.0 and st.sigma is None and st.method == "filtered"
    with pytest.raises(ValueError, match="`method` must be 'auto' or 'filtered'"):
        popdens.stationary(POP, 10.0, method="diffusion")


def test_spike_train_spectrum_has_the_renewal_limits():
    """Renewal spectrum of the effective equation (Cox 1962): S(0) = r CV^2 with the CV of
    popdens.stationary (ISI moments from the transform near s = 0, another route than the spectrum's
    Cauchy contour), S -> r at high frequency, and the rate of popdens.gain."""
    st = popdens.stationary(POP, 10.0)
    spec, (rate, cv2) = popdens.spike_train_spectrum(POP, 10.0, [0.0, 1e-3, 2e4], with_moments=True)
    assert rate == pytest.approx(float(popdens.gain(POP, 10.0)), rel=1e-6)  # the same extrapolated sweeps
    assert cv2 == pytest.approx(st.cv ** 2, rel=1e-4)  # renewal moments, two routes
    assert spec[0] == pytest.approx(rate * cv2, rel=1e-12) and spec[1] == pytest.approx(spec[0], rel=1e-4)
    assert spec[2] == pytest.approx(rate, rel=1e-3)  # S -> r0 at high frequency (Poisson-like)
