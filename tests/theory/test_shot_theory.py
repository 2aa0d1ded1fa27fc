"""Stationary rates under shot noise: the exact formula for exponential PSPs (Richardson & Swarbrick 2010)
and the jump-density operator, against closed forms and against each other (independent derivations:
a transform of the master equation, and a finite-volume discretisation of it)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate

import popdens
from popdens.theory._shot_exact import exact_shot_rate
from popdens.theory._shot_operator import ShotGrid, jump_fractions, shot_grid, stationary_masses

LIF = popdens.LIF(20.0, 20.0, 10.0, 2.0)


@pytest.mark.parametrize("law,amp,h", [("fixed", 0.5, 0.1), ("fixed", 0.33, 0.1), ("exponential", 0.7, 0.05)])
def test_jump_fractions_are_the_cell_averaged_jump_law(law, amp, h):
    """Fraction of a uniformly filled cell that a jump moves d cells up: by scipy quadrature of
    P(d h <= x + a < (d+1) h) over x uniform in [0, h) (fixed: a = amp; exponential: a ~ Exp(amp))."""
    f, _ = jump_fractions(law, amp, h)
    assert f.sum() == pytest.approx(1.0, abs=1e-14) and np.all(f >= 0.0)

    def p_land(d):
        def inner(x):
            lo, hi = d * h - x, (d + 1) * h - x
            if law == "fixed":
                return float(lo <= amp < hi)
            return np.exp(-max(lo, 0.0) / amp) - np.exp(-max(hi, 0.0) / amp)
        return integrate.quad(inner, 0.0, h, points=[min(max(d * h - amp, 0.0), h)] if law == "fixed" else None,
                              epsabs=1e-13, limit=200)[0] / h

    for d in range(min(f.size - 1, 12)):
        assert f[d] == pytest.approx(p_land(d), abs=1e-9)


@pytest.mark.parametrize("params", [
    pytest.param((1000.0, 1.0, 0.0, 0.5, 0.0), marks=pytest.mark.slow),  # excitation only
    (2000.0, 0.5, 500.0, 0.5, 0.0),  # excitation and inhibition
    pytest.param((800.0, 1.0, 200.0, 1.0, 5.0), marks=pytest.mark.slow),  # large PSPs
])
def test_exact_rate_agrees_with_the_jump_density_operator(params):
    """Two independent derivations of the same rate: the closed-form integral and the stationary state of
    the finite-volume master equation (first order in the cell width, extrapolated over h, h/2, h/4).
    Measured agreement 3e-7 to 8e-6; bound 1e-4."""
    re, ae, ri, ai, mu = params
    pop = popdens.Population(LIF, popdens.ShotNoise(re, ae, ri, ai, "exponential"))
    exact = exact_shot_rate(20.0, 20.0, 10.0, 2.0, 0.0, mu, re, ae, ri, ai)
    numeric = float(popdens.gain(pop, mu, method="jump-density"))
    assert float(popdens.gain(pop, mu)) == pytest.approx(exact, rel=1e-12)  # "auto" takes the exact formula
    assert numeric == pytest.approx(exact, rel=1e-4)


def test_exact_rate_by_direct_quadrature_of_the_published_integral():
    """The formula evaluated naively with scipy (no scaling, no weight function) at moderate parameters:
    1/r = t_ref + tau int_0^1 dz/z (1 + z a_i/a_e)^{tau R_i} [(1-z)^{tau R_e - 1} e^{z(th-E)/a_e}
    - (1-z)^{tau R_e} e^{z(re-E)/a_e}] (Richardson & Swarbrick 2010)."""
    tau, th, re_, tref, e = 20.0, 20.0, 10.0, 2.0, 3.0
    r_e, a_e, r_i, a_i = 1.5, 0.8, 0.4, 0.6  # 1/ms, mV

    def f(z):
        return (1 + z * a_i / a_e) ** (tau * r_i) * ((1 - z) ** (tau * r_e - 1) * np.exp(z * (th - e) / a_e)
                                                    - (1 - z) ** (tau * r_e) * np.exp(z * (re_ - e) / a_e)) / z
    ref = 1000.0 / (tref + tau * integrate.quad(f, 0.0, 1.0, epsabs=0.0, epsrel=1e-12, limit=400)[0])
    assert exact_shot_rate(tau, th, re_, tref, 0.0, e, 1500.0, a_e, 400.0, a_i) == pytest.approx(ref, rel=1e-9)


@pytest.mark.parametrize("k", [1, 4, 10])
def test_perfect_integrator_counting_jumps(k):
    """PIF without drive, fixed PSPs a, threshold k a above reset: each interval is k input intervals,
    rate = 1/(t_ref + k/nu) exactly; the grid aligns with a, so the operator's shifts are exact."""
    a, nu, tref = 0.5, 0.8, 2.0
    pif = popdens.PIF(10.0, k * a, 0.0, tref)
    pop = popdens.Population(pif, popdens.ShotNoise(nu * 1e3, a))
    grid = shot_grid(pif, pop.noise, [0.0])
    _, r = stationary_masses(pif, pop.noise, 0.0, grid)
    assert r == pytest.approx(1e3 / (tref + k / nu), rel=1e-10)


def test_perfect_integrator_with_exponential_jumps():
    """PIF without drive, exponential PSPs of mean a, gap D: the jump sums form a Poisson process of
    rate 1/a in potential, so 1 + Poisson(D/a) input spikes end an interval: 1/r = t_ref + (1 + D/a)/nu."""
    a, nu, tref, gap = 0.5, 0.8, 2.0, 3.0
    pif = popdens.PIF(10.0, gap, 0.0, tref)
    pop = popdens.Population(pif, popdens.ShotNoise(nu * 1e3, a, amplitudes="exponential"))
    assert float(popdens.gain(pop, 0.0)) == pytest.approx(1e3 / (tref + (1 + gap / a) / nu), rel=1e-4)


def test_operator_conserves_mass_and_keeps_the_density_positive():
    """Columns of L + b out^T sum to zero; off-diagonal entries >= 0 (M-matrix): stationary masses >= 0."""
    from popdens.theory._shot_operator import generator
    noise = popdens.ShotNoise(1200.0, 0.7, 400.0, 0.45)
    grid = ShotGrid(-20.0, 20.0, 400)
    L, out = generator(LIF, noise, 5.0, grid)
    dense = L.toarray()
    k, w = grid.reset_weights(10.0)
    b = np.zeros(grid.n)
    b[k], b[k + 1] = 1 - w, w
    full = dense + np.outer(b, out)
    assert np.max(np.abs(full.sum(axis=0))) < 1e-12
    off = full - np.diag(np.diag(full))
    assert off.min() >= 0.0
    m, r = stationary_masses(LIF, noise, 5.0, grid)
    assert m.min() >= 0.0 and m.sum() + r * 1e-3 * 2.0 == pytest.approx(1.0, rel=1e-12)


def test_shot_noise_front_end_errors():
    pop = popdens.Population(LIF, popdens.ShotNoise(1000.0, 0.5, amplitudes="exponential"))
    with pytest.raises(ValueError, match="`sigma`"):
        popdens.gain(pop, 0.0, sigma=2.0)
    with pytest.raises(ValueError, match="`method`"):
        popdens.gain(pop, 0.0, method="siegert")
    with pytest.raises(ValueError, match="`mu`"):
        popdens.gain(pop, 25.0, method="exponential-psp")
    with pytest.raises(ValueError, match="`method` 'diffusion'"):
        popdens.stationary(pop, 0.0, method="diffusion")
    with pytest.raises(ValueError, match="ShotNoise"):
        popdens.Cohort("E", pop, size=100, drive=0.0)
    fixed = popdens.Population(LIF, popdens.ShotNoise(1000.0, 0.5))
    with pytest.raises(ValueError, match="exponential-psp"):
        popdens.gain(fixed, 0.0, method="exponential-psp")


def test_suprathreshold_drive_uses_the_operator():
    """rest + mu above threshold: the drift crosses it, the closed form does not apply; 'auto' falls back
    to the operator, which must exceed the noise-free LIF rate 1/(t_ref + tau ln((mu - re)/(mu - th)))
    (excitatory PSPs only speed the neuron up)."""
    pop = popdens.Population(LIF, popdens.ShotNoise(300.0, 0.5, amplitudes="exponential"))
    r = float(popdens.gain(pop, 25.0))
    det = 1e3 / (2.0 + 20.0 * np.log(15.0 / 5.0))
    assert r > det


# ------------------------------------------------------------------ linear response (transfer)
def test_transfer_at_zero_frequency_is_the_slope_of_the_exact_rate():
    """Exponential PSPs: chi(0) of the jump-density operator against d(rate)/d(mu) of the exact rate
    (Richardson & Swarbrick 2010, an independent derivation), by a central difference (step 1e-3 mV,
    error ~1e-7 relative); measured agreement 1.4e-6."""
    pop = popdens.Population(LIF, popdens.ShotNoise(2000.0, 0.5, 500.0, 0.5, "exponential"))
    chi, err = popdens.transfer(pop, 5.0, [0.0], return_error=True)
    d = 1e-3
    def rate(mu):
        return exact_shot_rate(20.0, 20.0, 10.0, 2.0, 0.0, mu, 2000.0, 0.5, 500.0, 0.5)

    slope = (rate(5.0 + d) - rate(5.0 - d)) / (2 * d)
    assert abs(chi[0] / slope - 1.0) < 1e-4
    assert abs(chi[0].imag) == 0.0 and err[0] < 0.01 * abs(chi[0])


def test_transfer_tends_to_the_static_slope_as_the_frequency_falls():
    """The dynamic formula (a resolvent at lambda = 2 pi i f) has the static slope as its f -> 0 limit
    (general property of a linear response; common practice): at 1 mHz within 1e-4, with a phase lag
    of order 2 pi f times the response time."""
    pop = popdens.Population(LIF, popdens.ShotNoise(2000.0, 0.5, 500.0, 0.5, "fixed"))
    chi = popdens.transfer(pop, 5.0, [0.0, 1e-3])
    assert abs(chi[1] / chi[0] - 1.0) < 1e-4
    assert -1e-4 < np.angle(chi[1]) < 0.0


def test_transfer_rejects_what_shot_noise_does_not_have():
    pop = popdens.Population(LIF, popdens.ShotNoise(2000.0, 0.5))
    with pytest.raises(ValueError, match="`modulate` must be 'mean'"):
        popdens.transfer(pop, 5.0, [1.0], modulate="sigma")
    with pytest.raises(ValueError, match="'jump-density'"):
        popdens.transfer(pop, 5.0, [1.0], method="renewal")


@pytest.mark.slow
def test_transfer_high_frequency_limits():
    """Drift up at the boundary (mu = 25 > threshold - rest): the density at threshold is finite (finite
    PSPs), so the drift's flux follows the drive at once: chi flat and lag-free at 10-20 kHz.  Drift down
    (mu = 5): only jumps cross, chi ~ 1/f and the lag tends to pi/2 (closed-form limits of the formula in
    popdens.theory._shot_response; the twin checks the middle frequencies)."""
    pop = popdens.Population(LIF, popdens.ShotNoise(2000.0, 0.5, 500.0, 0.5, "fixed"))
    up = popdens.transfer(pop, 25.0, [1e4, 2e4])
    assert abs(abs(up[1]) / abs(up[0]) - 1.0) < 1e-3 and np.all(np.abs(np.angle(up)) < 0.01)
    down = popdens.transfer(pop, 5.0, [1e4, 2e4])
    assert abs(abs(down[1]) * 2e4 / (abs(down[0]) * 1e4) - 1.0) < 5e-3
    assert np.all(np.abs(np.angle(down) + np.pi / 2) < 0.05)


# ------------------------------------------------------------------ stationary (ISI statistics)
def test_stationary_counting_jumps_gives_the_erlang_interval():
    """PIF without drive, fixed PSPs a, threshold k a above reset: an interval is t_ref plus the sum of k
    exponential waits of rate nu (an Erlang distribution; Cox 1962, Renewal theory): CV
    sqrt(k)/nu / (t_ref + k/nu), density the gamma density (scipy).  The grid aligns with a, so the
    operator's shifts are exact; what remains is the linear interpolation from the propagator's 2001 time
    points (measured 1.1e-5 of the peak with 2001 points, 4.4e-5 expected with 1001)."""
    from scipy import stats

    a, nu, tref, k = 0.5, 0.8, 2.0, 4
    pop = popdens.Population(popdens.PIF(10.0, k * a, 0.0, tref), popdens.ShotNoise(nu * 1e3, a))
    st = popdens.stationary(pop, 0.0, isi_t=np.linspace(0.0, 30.0, 301))
    assert st.cv == pytest.approx(math.sqrt(k) / nu / (tref + k / nu), rel=1e-8)  # Erlang closed form
    ref = stats.gamma.pdf(st.isi_t - tref, k, scale=1.0 / nu)
    assert np.max(np.abs(st.isi_density - ref)) < 1e-4 * ref.max()  # scipy gamma density
    assert np.max(np.abs(st.survivor - stats.gamma.sf(st.isi_t - tref, k, scale=1.0 / nu))) < 1e-4


def test_stationary_with_exponential_jumps_matches_the_compound_count():
    """PIF without drive, exponential PSPs of mean a, gap D: N = 1 + Poisson(D/a) inputs end an interval
    (the jump sums are a Poisson process of rate 1/a in potential), so the passage time is a Poisson
    mixture of Erlang(n, nu): mean (1 + D/a)/nu, variance (1 + 2 D/a)/nu^2 (compound sums; Feller 1968,
    vol. 1).  The exponential jumps are not aligned with the grid: first order in h, extrapolated."""
    from scipy import stats

    a, nu, tref, gap = 0.5, 0.8, 2.0, 3.0
    pop = popdens.Population(popdens.PIF(10.0, gap, 0.0, tref),
                             popdens.ShotNoise(nu * 1e3, a, amplitudes="exponential"))
    st = popdens.stationary(pop, 0.0, isi_t=np.linspace(0.0, 40.0, 201))
    mean = tref + (1 + gap / a) / nu
    assert st.cv == pytest.approx(math.sqrt(1 + 2 * gap / a) / nu / mean, rel=1e-3)  # compound Poisson
    n = np.arange(1, 60)
    w = stats.poisson.pmf(n - 1, gap / a)
    ref = np.array([np.sum(w * stats.gamma.pdf(t - tref, n, scale=1.0 / nu)) for t in st.isi_t])
    assert np.max(np.abs(st.isi_density - ref)) < 2e-3 * ref.max()  # Poisson mixture of gamma densities
    # potential density: each interval visits the levels of a Poisson process of rate 1/a in potential
    # and stays Exp(nu) at each, so between reset and threshold the density is rate / (a nu) (renewal
    # reward argument; Cox 1962); the finest grid (h = 0.025 mV) is first order: measured +0.29 %
    inside = (st.u > 0.3) & (st.u < gap - 0.3)
    assert np.allclose(st.density[inside], st.rate * 1e-3 / (a * nu), rtol=5e-3)
