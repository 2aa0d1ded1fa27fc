"""Coloured noise in the steady-state and linear-response front ends and the Fokker--Planck solver.

The reference is the Fourcaud--Brunel rate written out here by scipy quadrature:

    1/nu = tau_ref + tau_m sqrt(pi) int_{y_r + a k}^{y_theta + a k} exp(x^2)(1 + erf x) dx,
    y = (v - mu)/sigma,  a = alpha/2 = |zeta(1/2)|/sqrt(2),  k = sqrt(tau_s/tau_m)

(Brunel & Sergi 1998, J. Theor. Biol. 195:87; Fourcaud & Brunel 2002, Neural Comput. 14:2057;
Brunel, Chance, Fourcaud & Abbott 2001, Phys. Rev. Lett. 86:2186), with zeta(1/2) from mpmath.
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest
from scipy.integrate import quad
from scipy.special import erfcx

import popdens

A_HALF = abs(float(mpmath.zeta(0.5))) / math.sqrt(2.0)


def fb_rate(mu, sigma, tau_s, tau_m=20.0, theta=20.0, reset=10.0, tau_ref=2.0):
    """Fourcaud--Brunel coloured-noise LIF rate (Hz), scipy quadrature (module docstring)."""
    k = math.sqrt(tau_s / tau_m)
    lo, hi = (reset - mu) / sigma + A_HALF * k, (theta - mu) / sigma + A_HALF * k
    integral = quad(lambda x: erfcx(-x), lo, hi, epsabs=0.0, epsrel=1e-12, limit=200)[0]
    return 1000.0 / (tau_ref + tau_m * math.sqrt(math.pi) * integral)


def lif_coloured(sigma=4.0, tau_s=2.0):
    return popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.ColouredNoise(sigma, tau_s))


@pytest.mark.parametrize("mu,sigma,tau_s", [(18.0, 4.0, 2.0), (12.0, 3.0, 0.5), (25.0, 5.0, 5.0)])
def test_gain_is_the_fourcaud_brunel_rate_by_every_method(mu, sigma, tau_s):
    """The boundary-shift methods; the default up to tau_s/tau_m = 0.1 (beyond it the plane,
    tests/theory/test_filtered_plane.py), on request beyond ('siegert', 'threshold-integration')."""
    pop = lif_coloured(sigma, tau_s)
    ref = fb_rate(mu, sigma, tau_s)
    shift = "auto" if tau_s <= 0.1 * 20.0 else "siegert"
    assert float(popdens.gain(pop, mu, method=shift)) == pytest.approx(ref, rel=1e-8)
    assert float(popdens.gain(pop, mu, method="threshold-integration")) == pytest.approx(ref, rel=1e-5)
    st = popdens.stationary(pop, mu, method=shift)
    assert st.rate == pytest.approx(ref, rel=1e-8)
    assert st.population is pop and "boundary shift" in st.method
    assert st.diagnostics["boundary_shift_mV"] == pytest.approx(sigma * A_HALF * math.sqrt(tau_s / 20.0), rel=1e-12)


def test_sigma_override_and_inverse_problem():
    pop = lif_coloured()
    assert float(popdens.gain(pop, 18.0, sigma=3.0)) == pytest.approx(fb_rate(18.0, 3.0, 2.0), rel=1e-8)
    m = popdens.drive_for_rate(pop, 8.0)
    assert fb_rate(m, 4.0, 2.0) == pytest.approx(8.0, rel=1e-8)


def test_zero_frequency_transfer_is_the_slope_of_the_rate():
    # central differences of the scipy reference in mu and in sigma (the shift moves with sigma)
    pop = lif_coloured()
    h = 1e-3
    d_mu = (fb_rate(18.0 + h, 4.0, 2.0) - fb_rate(18.0 - h, 4.0, 2.0)) / (2 * h)
    d_sig = (fb_rate(18.0, 4.0 + h, 2.0) - fb_rate(18.0, 4.0 - h, 2.0)) / (2 * h)
    chi = popdens.transfer(pop, 18.0, [0.0, 1e-3])
    assert chi[0].real == pytest.approx(d_mu, rel=1e-5)
    assert chi[1].real == pytest.approx(d_mu, rel=1e-4)
    assert popdens.transfer(pop, 18.0, [0.0], "sigma")[0].real == pytest.approx(d_sig, rel=1e-5)
    assert popdens.transfer(pop, 18.0, [0.0], "noise")[0].real == pytest.approx(d_sig / 8.0, rel=1e-5)
    assert float(popdens.gain_slope(pop, 18.0)) == pytest.approx(d_mu, rel=1e-6)


def test_transfer_recovers_white_noise_as_tau_syn_vanishes():
    white = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(4.0))
    f = [5.0, 50.0]
    chi_w = popdens.transfer(white, 18.0, f)
    chi_c = popdens.transfer(lif_coloured(4.0, 1e-8), 18.0, f)
    assert np.max(np.abs(chi_c / chi_w - 1.0)) < 1e-4


def test_noise_modulation_of_other_drifts():
    # a custom drift written as the LIF's gives the LIF's response (the moving-boundary term uses F'(theta))
    lin = popdens.CustomNeuron("-u", tau_m=20.0, threshold=20.0, reset=10.0, refractory=2.0)
    chi_c = popdens.transfer(popdens.Population(lin, popdens.ColouredNoise(4.0, 2.0)), 18.0, [30.0], "noise")
    chi_l = popdens.transfer(lif_coloured(), 18.0, [30.0], "noise")
    assert abs(chi_c[0] / chi_l[0] - 1.0) < 1e-5
    # a spike cut-off moves nothing: the white-noise response (the twin measures the error)
    eif = popdens.EIF(20.0, 15.0, 2.0, 30.0, 10.0, 2.0)
    chi_c = popdens.transfer(popdens.Population(eif, popdens.ColouredNoise(4.0, 2.0)), 14.0, [10.0], "noise")
    chi_w = popdens.transfer(popdens.Population(eif, popdens.WhiteNoise(4.0)), 14.0, [10.0], "noise")
    assert chi_c[0] == chi_w[0]


def test_high_frequency_limit_is_the_boundary_layer_density():
    # chi(inf) = p(theta)/tau_m with p(theta) = c sqrt(2) tau_m nu0 k / sigma (first order), nu0 from the
    # scipy reference; c is checked against the Milne problem in test_milne_constant
    from popdens.theory.linear_response import MILNE_WALL_DENSITY

    for tau_s in (0.05, 0.2):
        nu0 = fb_rate(18.0, 4.0, tau_s)
        k = math.sqrt(tau_s / 20.0)
        lim = popdens.high_frequency_limit(lif_coloured(4.0, tau_s), 18.0)
        assert lim == pytest.approx(MILNE_WALL_DENSITY * math.sqrt(2.0) * nu0 * k / 4.0, rel=1e-6)
    white = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(4.0))
    with pytest.raises(ValueError, match="coloured noise"):
        popdens.high_frequency_limit(white, 18.0)


@pytest.mark.slow
def test_milne_constant():
    """The wall density of the kinetic boundary layer against a finite-difference solution of the
    half-space problem (tests/references.py); the same solution's extrapolation length against the
    exact |zeta(1/2)| (Hagan, Doering & Levermore 1989) shows the solver's accuracy (measured 0.8 %)."""
    from popdens.theory.linear_response import MILNE_WALL_DENSITY
    from references import milne_layer

    wall, extrapolation = milne_layer(0.005, 0.025)
    print(f"wall density {wall:.4f}, extrapolation length {extrapolation:.4f}")
    assert abs(extrapolation / abs(float(mpmath.zeta(0.5))) - 1.0) < 0.01
    assert abs(wall / MILNE_WALL_DENSITY - 1.0) < 0.015


def test_fokker_planck_solver_reaches_the_coloured_rate():
    pop = lif_coloured(4.0, 2.0)
    res = popdens.simulate(pop, 18.0, t_end=20.0, dt=0.05, n_cells=800)
    assert res.success
    # the solver's discrete stationary state against the scipy reference (cell error, see the guide)
    assert res.rate[-1] == pytest.approx(fb_rate(18.0, 4.0, 2.0), rel=2e-3)
    assert res.method == "fokker-planck"
