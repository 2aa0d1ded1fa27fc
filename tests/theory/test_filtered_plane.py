"""The stationary (potential, current) plane of coloured noise (theory/_filtered_plane.py) against
closed forms, scipy references and the convergence order of its scheme; the twin comparison is the
slow table test in tests/twins/test_montecarlo_coloured.py."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.stats import norm

import popdens
from popdens.theory._filtered_plane import (PLANE_Z_CELLS, PLANE_Z_RANGE, correlation_length, plane_rate,
                                            plane_state)
from references import eif_rate
from test_coloured_theory import fb_rate

EIF = popdens.EIF(20.0, 15.0, 2.0, 30.0, 10.0, 2.0)
#: the white-noise EIF rate at mu = 14 mV, sigma = 4 mV (scipy Radau, tests/references.py)
EIF_WHITE = dict(tau=20.0, ut=15.0, dT=2.0, uc=30.0, ur=10.0, tref=2.0)


def test_current_marginal_is_the_standard_normal_and_masses_are_positive():
    """The synaptic current is autonomous (an Ornstein-Uhlenbeck process whatever u does), so without
    refractoriness its marginal over all neurons is the stationary normal: cell probabilities from
    scipy.stats.norm (outer cells holding the tails).  Positivity: every cell mass >= 0."""
    nrn = popdens.EIF(20.0, 15.0, 2.0, 30.0, 10.0, 0.0)
    st = plane_state(nrn, 14.0, 4.0, 5.0, 0.3)
    edges = np.linspace(-PLANE_Z_RANGE, PLANE_Z_RANGE, PLANE_Z_CELLS + 1)
    cells = np.diff(norm.cdf(edges))
    cells[0] += norm.cdf(-PLANE_Z_RANGE)
    cells[-1] += norm.sf(PLANE_Z_RANGE)
    assert np.max(np.abs(st.mass.sum(axis=0) - cells)) < 1e-12  # rounding (measured 1e-16)
    assert st.mass.min() >= -1e-15
    assert st.mass.sum() == pytest.approx(1.0, abs=1e-12)  # no refractory mass


def test_perfect_integrator_rate_is_exact_whatever_the_noise():
    """PIF without refractoriness: u(T) - u(0) = int (mu + I) dt / tau_m - N (theta - reset) and the
    current's integral grows only like sqrt(T), so the rate is mu / (tau_m (theta - reset)) (closed form).
    Measured -0.027 % (the z cells)."""
    pif = popdens.PIF(20.0, 20.0, 10.0, 0.0)
    assert plane_rate(pif, 3.0, 4.0, 5.0) == pytest.approx(1000.0 * 3.0 / (20.0 * 10.0), rel=1e-3)


def test_isi_cv_tends_to_the_white_noise_cv():
    """tau_s -> 0: the ISI CV of the white-noise EIF from its passage-time moments (threshold integration,
    Richardson 2007; cv_diffusive); measured +0.28 % at tau_s/tau_m = 0.005 (the correction's own size
    there is below that: +0.8 % per 0.05 of the ratio, measured)."""
    from popdens.theory._filtered_plane import plane_pair
    from popdens.theory._stationary_white import cv_diffusive

    white = cv_diffusive(popdens.Population(EIF, popdens.WhiteNoise(4.0)), 14.0, 4.0)
    coarse, fine = plane_pair(EIF, 14.0, 4.0, 0.1)
    assert abs((2 * fine.cv - coarse.cv) / white - 1.0) < 6e-3


def test_white_noise_limit():
    """tau_s -> 0: the white-noise EIF rate (scipy Radau reference, Brunel & Hakim 1999; Fourcaud-Trocme
    et al. 2003).  At tau_s/tau_m = 0.005 the plane is -0.12 % off it (the correction is O(tau_s/tau_m),
    measured -0.6 % per 0.01 of the ratio; the z cells add ~0.15 % there); the front end at 1e-5 ms is
    the white rate to 1e-4 (the plane's correction at the floor scaled down linearly)."""
    white = eif_rate(14.0, 4.0, **EIF_WHITE)
    assert abs(plane_rate(EIF, 14.0, 4.0, 0.1) / white - 1.0) < 5e-3
    pop = popdens.Population(EIF, popdens.ColouredNoise(4.0, 1e-5))
    assert float(popdens.gain(pop, 14.0)) == pytest.approx(white, rel=1e-4)


def test_grid_convergence_order_and_extrapolation():
    """Upwinding in u is first order (successive differences halve: expected ratio 2, measured 2.12 and
    1.98 at tau_s/tau_m = 0.25); the extrapolated rate 2 r(h/2) - r(h) moves at least 5x less than the
    raw one (measured 0.0136 against 0.112 Hz)."""
    h = correlation_length(EIF, 4.0, 5.0) / 2
    rates = [plane_state(EIF, 14.0, 4.0, 5.0, h / 2 ** i).rate for i in range(3)]
    d = np.diff(rates)
    assert 1.7 < d[0] / d[1] < 2.3  # first order (upwind scheme)
    ex = [2 * rates[1] - rates[0], 2 * rates[2] - rates[1]]
    assert abs(ex[1] - ex[0]) < abs(d[1]) / 5


def test_lif_plane_agrees_with_the_effective_boundary_where_it_holds():
    """Hard threshold: at tau_s/tau_m = 0.1 the Fourcaud-Brunel rate (scipy quadrature,
    test_coloured_theory.fb_rate) and the plane are both within 1 % of the twin (guide table); here
    within 2 % of each other (measured +0.5 %), while the white-noise rate is 44 % higher."""
    pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.ColouredNoise(4.0, 2.0))
    plane = float(popdens.gain(pop, 18.0, method="plane"))
    assert abs(plane / fb_rate(18.0, 4.0, 2.0) - 1.0) < 0.02
    assert float(popdens.gain(pop, 18.0)) == pytest.approx(fb_rate(18.0, 4.0, 2.0), rel=1e-8)  # default: shift


def lif_coloured(tau_s, sigma=4.0):
    return popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.ColouredNoise(sigma, tau_s))


def test_lif_default_is_the_shift_to_0p1_the_plane_from_0p15_and_continuous_between():
    """The switch of the hard-threshold default (plane_weight): the boundary shift (the Fourcaud-Brunel
    rate, scipy quadrature) up to tau_s/tau_m = 0.1, the plane from 0.15, linear in tau_s between, so a
    sweep over tau_s has no jump at either end (measured change over +-1e-6 ms: 2e-7 relative, where the
    shift is 0.54 % below the plane at 0.1 and 2.4 % at 0.15).  gain, gain_slope, stationary
    and the mean-drive transfer follow the same weight; noise modulation keeps the shift."""
    assert float(popdens.gain(lif_coloured(2.0), 18.0)) == pytest.approx(fb_rate(18.0, 4.0, 2.0), rel=1e-8)
    for tau in (3.0, 10.0):
        pop = lif_coloured(tau)
        assert float(popdens.gain(pop, 18.0)) == pytest.approx(float(popdens.gain(pop, 18.0, method="plane")),
                                                               rel=1e-12)
    pop = lif_coloured(2.5)  # tau_s/tau_m = 0.125: half of each
    shift, plane = fb_rate(18.0, 4.0, 2.5), float(popdens.gain(pop, 18.0, method="plane"))
    assert abs(plane / shift - 1.0) > 0.01  # the two differ (measured +1.5 %)
    assert float(popdens.gain(pop, 18.0)) == pytest.approx(0.5 * (shift + plane), rel=1e-8)
    st = popdens.stationary(pop, 18.0)
    assert st.rate == pytest.approx(0.5 * (shift + plane), rel=1e-8)
    assert st.diagnostics["plane_weight"] == 0.5 and "blended" in st.method
    for edge in (2.0, 3.0):  # continuity at both ends of the blend
        lo, hi = (float(popdens.gain(lif_coloured(edge + d), 18.0)) for d in (-1e-6, 1e-6))
        assert abs(hi / lo - 1.0) < 1e-5
    # the mean-drive transfer function: zero frequency is the slope of the default rate (fourth-order
    # central difference, truncation ~1e-8; the blend is linear, so slope and response blend alike)
    chi = popdens.transfer(pop, 18.0, [0.0, 30.0])
    assert chi[0].real == pytest.approx(float(popdens.gain_slope(pop, 18.0)), rel=1e-4)
    chi_shift = popdens.transfer(pop, 18.0, [30.0], method="threshold-integration")[0]
    chi_plane = popdens.transfer(pop, 18.0, [30.0], method="plane")[0]
    assert chi[1] == pytest.approx(0.5 * (chi_shift + chi_plane), rel=1e-6)
    assert popdens.transfer(pop, 18.0, [30.0], "noise")[0] == pytest.approx(
        popdens.transfer(pop, 18.0, [30.0], "noise", method="threshold-integration")[0], rel=1e-12)


def test_hard_threshold_plane_is_converged_in_u_over_three_grids():
    """A hard threshold is a discontinuity in z (only positive velocities cross it): the upwind error of
    the two-grid extrapolation is large at low rates (measured 0.699 Hz against 0.674 Hz from finer
    grids at 0.7 Hz, tau_s/tau_m = 0.15).  Over three grids (h, h/2, h/4) the rate moves by less than
    0.3 % when every grid is halved (measured +0.08 %): self-convergence, the order of the scheme."""
    from popdens.theory._filtered_plane import extrapolated_levels, plane_states

    lif = popdens.LIF(20.0, 20.0, 10.0, 2.0)
    default = [st.rate for st in plane_states(lif, 15.0, 3.0, 3.0)]
    halved = [st.rate for st in plane_states(lif, 15.0, 3.0, 3.0, cells_per_length=6)]
    assert len(default) == 3 and default[1:] == pytest.approx(halved[:2], rel=1e-12)  # shared grids
    assert abs(extrapolated_levels(halved) / extrapolated_levels(default) - 1.0) < 3e-3
    assert abs(extrapolated_levels(default[1:]) / extrapolated_levels(halved) - 1.0) > 5e-3  # two grids


def test_front_ends_use_the_plane_for_a_spike_cut_off():
    pop = popdens.Population(EIF, popdens.ColouredNoise(4.0, 10.0))
    r = float(popdens.gain(pop, 14.0))
    assert r == pytest.approx(plane_rate(EIF, 14.0, 4.0, 10.0), rel=1e-12)
    # the effective-boundary result stays reachable: white noise for a cut-off (scipy reference)
    assert float(popdens.gain(pop, 14.0, method="threshold-integration")) == pytest.approx(
        eif_rate(14.0, 4.0, **EIF_WHITE), rel=1e-5)
    # slope: central difference of the rates over +-0.05 mV (truncation ~ 1e-5 relative here)
    up, down = popdens.gain(pop, [14.05, 13.95])
    assert float(popdens.gain_slope(pop, 14.0)) == pytest.approx((up - down) / 0.1, rel=1e-3)
    st = popdens.stationary(pop, 14.0)
    assert st.method == "plane" and st.rate == pytest.approx(r, rel=1e-12)
    assert st.mean_isi == pytest.approx(1000.0 / r) and st.refractory_fraction == pytest.approx(r * 2e-3)
    # marginal density (cell masses / width) plus the fine grid's refractory fraction: unit mass (rounding)
    fine = st.diagnostics["plane_rate_fine_grid_hz"]
    assert float(np.sum(st.density * np.diff(st.u).mean())) + fine * 2e-3 == pytest.approx(1.0, abs=1e-9)
    # the probability flux above the reset is the rate of the fine grid (conservation, cell by cell)
    above = st.u > EIF.reset + 1.0
    assert np.allclose(st.flux[above], fine, rtol=1e-9)
    with pytest.raises(ValueError, match="`method` 'plane'"):
        popdens.gain(popdens.Population(EIF, popdens.WhiteNoise(4.0)), 14.0, method="plane")
    assert "effective renewal" in st.diagnostics["isi_density_from"]
    # ISI moments from the passage time (-1^T B^-1 p0): the mean ISI is 1/rate on every grid (renewal-reward
    # identity for a stationary point process: mean interval = 1 / intensity)
    fine_state = plane_state(EIF, 14.0, 4.0, 10.0, 0.3)
    assert fine_state.isi_moments[0] == pytest.approx(1000.0 / fine_state.rate, rel=1e-10)
    assert 0.5 < st.cv < 1.0


def test_transfer_on_the_plane_is_the_gain_slope_at_zero_frequency():
    """The linearised plane at f = 0 (normalisation row) against the slope of the plane's rate by a
    fourth-order central difference (gain_slope; truncation ~1e-8 here) and at 1e-4 Hz (the response
    is analytic in f, solved there without the normalisation row); the effective-boundary response
    (white noise for a cut-off) differs."""
    pop = popdens.Population(EIF, popdens.ColouredNoise(4.0, 10.0))
    chi = popdens.transfer(pop, 14.0, [0.0, 1e-4, 100.0], method="plane")
    assert chi[0].real == pytest.approx(float(popdens.gain_slope(pop, 14.0)), rel=1e-6)
    # continuity: the real part moves at second order in f, the phase at first (a lag of ~9 ms here)
    assert chi[1].real == pytest.approx(chi[0].real, rel=1e-8) and 0.0 < -chi[1].imag / chi[0].real < 1e-4
    white = popdens.transfer(pop, 14.0, [100.0])[0]  # the default: white noise for a cut-off
    assert abs(chi[2] / white - 1.0) > 0.05  # measured 0.50 against 0.60 Hz/mV
    with pytest.raises(ValueError, match="`modulate` must be 'mean'"):
        popdens.transfer(pop, 14.0, [10.0], "sigma", method="plane")
