"""Fokker--Planck solver: Siegert rates, first-passage densities, convergence, conservation."""

from __future__ import annotations

import re
import warnings

import numpy as np
import pytest
from scipy import integrate, stats
from scipy.special import erfcx

import popdens
from popdens import drive
from popdens.exceptions import AccuracyWarning
from references import eif_rate
from popdens.solvers.grids import Grid, refined_grid


def siegert_rate(mu, sigma, tau_m, theta, reset, tau_ref, rest=0.0):
    """Stationary LIF rate (Hz) for tau_m du = (-(u - rest) + mu) dt + sigma sqrt(tau_m) dW.

    Siegert formula (Siegert 1951; Brunel & Hakim 1999, Neural Comput. 11:1621, eq. 21),
    written with erfcx(-x) = exp(x^2)(1 + erf(x)) for numerical stability.
    """
    lo = (reset - mu - rest) / sigma
    hi = (theta - mu - rest) / sigma
    integral = integrate.quad(lambda x: erfcx(-x), lo, hi, limit=200, epsabs=0.0, epsrel=1e-12)[0]
    return 1000.0 / (tau_ref + tau_m * np.sqrt(np.pi) * integral)


def general_stationary_rate(drift, mu, sigma, tau_m, boundary, reset, tau_ref, lower):
    """Stationary rate (Hz) of a 1-D diffusion with absorbing boundary and reset.

    With A = (F + mu)/tau_m, D = sigma^2/(2 tau_m) and Phi' = A/D, the stationary
    density p(u) = (r/D) int_{max(u, reset)}^{boundary} exp(Phi(u) - Phi(y)) dy, so
    1/r = tau_ref + (1/D) int_reset^boundary dy int_lower^y exp(Phi(u) - Phi(y)) du
    (standard first-passage result, e.g. Brunel & Hakim 1999; Fourcaud-Trocme et al. 2003).
    """
    dd = sigma ** 2 / (2.0 * tau_m)

    def phi(u):
        return integrate.quad(lambda x: (drift(x) + mu) / tau_m / dd, reset, u, limit=200)[0]

    def inner(y):
        py = phi(y)
        return integrate.quad(lambda u: np.exp(phi(u) - py), lower, y, limit=200)[0]

    total = integrate.quad(inner, reset, boundary, limit=200)[0]
    return 1000.0 / (tau_ref + total / dd)


def white(neuron, sigma):
    return popdens.Population(neuron, popdens.WhiteNoise(sigma))


# (mu, sigma) from strongly subthreshold to suprathreshold; theta = 20, reset = 10 mV
SIEGERT_TABLE = [(10.0, 2.0), (15.0, 3.0), (12.0, 6.0), (18.0, 5.0), (20.0, 1.0), (25.0, 4.0), (30.0, 8.0),
                 (30.0, 1.5)]


@pytest.mark.parametrize("tau_ref", [0.0, 2.0])
@pytest.mark.parametrize("mu,sigma", SIEGERT_TABLE)
def test_stationary_rate_matches_siegert(mu, sigma, tau_ref):
    pop = white(popdens.LIF(tau_m=20.0, threshold=20.0, reset=10.0, refractory=tau_ref), sigma)
    res = popdens.simulate(pop, mu, t_end=50.0, dt=0.1)
    exact = siegert_rate(mu, sigma, 20.0, 20.0, 10.0, tau_ref)
    assert res.success
    err0 = abs(res.rate[0] / exact - 1.0)
    print(f"mu={mu} sigma={sigma} tau_ref={tau_ref}: rate {res.rate[0]:.6g} Hz, Siegert {exact:.6g} Hz, "
          f"rel. error {err0:.2e}")
    assert err0 <= 1e-3
    # a constant drive keeps the discrete stationary state: constant rate during the run
    assert np.allclose(res.rate, res.rate[0], rtol=1e-9, atol=0.0)
    assert np.allclose(res.refractory_fraction, res.rate[0] * 1e-3 * tau_ref, rtol=1e-9, atol=1e-300)


def test_siegert_with_nonzero_rest_and_reinjection_below_lower_default():
    pop = white(popdens.LIF(tau_m=10.0, threshold=-50.0, reset=-60.0, refractory=1.0, rest=-65.0), 4.0)
    res = popdens.simulate(pop, 12.0, t_end=5.0)
    exact = siegert_rate(12.0, 4.0, 10.0, -50.0, -60.0, 1.0, rest=-65.0)  # Siegert (Brunel & Hakim 1999)
    assert abs(res.rate[0] / exact - 1.0) <= 1e-3


@pytest.mark.parametrize("model", ["EIF", "QIF", "custom"])
def test_stationary_rate_of_nonlinear_models_matches_first_passage_integral(model):
    if model == "EIF":
        nrn = popdens.EIF(tau_m=20.0, soft_threshold=15.0, slope_factor=2.0, cutoff=30.0, reset=10.0, refractory=2.0)

        def f(u):
            return -u + 2.0 * np.exp((u - 15.0) / 2.0)
        mu, sigma = 10.0, 4.0
    elif model == "QIF":
        nrn = popdens.QIF(tau_m=10.0, critical=10.0, cutoff=30.0, reset=0.0, refractory=1.0)

        def f(u):
            return u * (u - 10.0) / 10.0
        mu, sigma = 1.0, 3.0
    else:
        nrn = popdens.CustomNeuron("-(u - 2) + 0.02*(u - 2)**2", tau_m=15.0, threshold=18.0, reset=5.0,
                                   refractory=0.5)

        def f(u):
            return -(u - 2.0) + 0.02 * (u - 2.0) ** 2
        mu, sigma = 10.0, 5.0
    res = popdens.simulate(white(nrn, sigma), mu, t_end=5.0)
    lower = res.diagnostics["u_min_mV"]
    exact = general_stationary_rate(f, mu, sigma, nrn.tau_m, nrn.boundary, nrn.reset, nrn.refractory, lower)
    print(f"{model}: {res.rate[0]:.6g} Hz vs first-passage integral {exact:.6g} Hz")
    assert res.success
    assert abs(res.rate[0] / exact - 1.0) <= 1e-3
    assert np.allclose(res.rate, res.rate[0], rtol=1e-8)


def renewal_density_pif(t, drift_mv_ms, sigma2_eff, distance):
    """Mean rate over the bins of ``t`` (Hz) for a PIF started at reset at t = 0, no refractoriness.

    The k-th spike time is the first passage of a drifted Brownian motion over k * distance,
    inverse Gaussian with mean k a / v and shape (k a)^2 / sigma_eff^2 (Gerstein & Mandelbrot 1964);
    the rate is the sum of their densities (renewal density, Cox 1962).  scipy's invgauss(m/lam, scale=lam)
    has mean m and shape lam.
    """
    cdf = np.zeros_like(t)
    for k in range(1, 40):
        lam = (k * distance) ** 2 / sigma2_eff
        m = k * distance / drift_mv_ms
        cdf = cdf + stats.invgauss(m / lam, scale=lam).cdf(t)
    return np.diff(cdf) / np.diff(t) * 1000.0


PIF_CASE = dict(tau_m=20.0, threshold=20.0, reset=10.0, mu=10.0, sigma=5.0)


def _pif_run(dt, n_cells, scheme="tr-bdf2", t_end=100.0, interval=1.0):
    c = PIF_CASE
    pop = white(popdens.PIF(c["tau_m"], c["threshold"], c["reset"], 0.0), c["sigma"])
    res = popdens.simulate(pop, c["mu"], t_end=t_end, dt=dt, initial="synchronous", record_interval=interval,
                           n_cells=n_cells, scheme=scheme, error_control="off")  # errors measured here
    ref = renewal_density_pif(res.t, c["mu"] / c["tau_m"], c["sigma"] ** 2 / c["tau_m"], c["threshold"] - c["reset"])
    return res, ref


def test_pif_rate_from_synchronous_start_is_inverse_gaussian_renewal_density():
    res, ref = _pif_run(0.1, 400)
    assert res.success
    err = np.abs(res.rate[1:] - ref)
    print(f"PIF first passage: max error {err.max():.3g} Hz of peak {ref.max():.3g} Hz")
    assert err.max() <= 1e-3 * ref.max()
    # before second passages matter (P(second spike < 8 ms) < 1e-6) the rate is the
    # first-passage density alone: inverse Gaussian (Gerstein & Mandelbrot 1964)
    c = PIF_CASE
    a, v, s2 = c["threshold"] - c["reset"], c["mu"] / c["tau_m"], c["sigma"] ** 2 / c["tau_m"]
    lam = a * a / s2
    second = stats.invgauss((2 * a / v) / (4 * lam), scale=4 * lam).cdf(8.0)
    assert second < 1e-6
    first = np.diff(stats.invgauss((a / v) / lam, scale=lam).cdf(res.t)) / np.diff(res.t) * 1000.0
    early = res.t[1:] <= 8.0
    assert np.all(np.abs(res.rate[1:][early] - first[early]) <= 1e-3 * ref.max())


def _order(errors, factor=2.0):
    e = np.asarray(errors)
    return np.log(e[:-1] / e[1:]) / np.log(factor)


# the coarsest grids of this study are coarse on purpose (they trigger the n_cells guard)
@pytest.mark.filterwarnings("ignore::popdens.exceptions.AccuracyWarning")
def test_convergence_order_in_grid_spacing():
    """Error of the stationary rate against Siegert (Brunel & Hakim 1999) halves the cells each time."""
    pop = white(popdens.LIF(tau_m=20.0, threshold=20.0, reset=10.0, refractory=2.0), 3.0)
    exact = siegert_rate(18.0, 3.0, 20.0, 20.0, 10.0, 2.0)
    errs = [abs(popdens.simulate(pop, 18.0, t_end=0.1, n_cells=n).rate[0] / exact - 1.0) for n in (50, 100, 200, 400)]
    orders = _order(errs)
    print("grid errors", errs, "orders", orders)
    assert np.all(orders > 1.8)  # second-order finite volumes


@pytest.mark.parametrize("scheme,expected", [("backward-euler", 1.0), ("tr-bdf2", 2.0)])
def test_convergence_order_in_dt(scheme, expected):
    """RMS error against the inverse-Gaussian renewal density (Gerstein & Mandelbrot 1964) on a
    fine grid, t > 5 ms, for dt = 0.8, 0.4, 0.2 ms; expected orders from the schemes' theory
    (backward Euler 1, TR-BDF2 2: Hosea & Shampine 1996)."""
    errs = []
    for dt in (0.8, 0.4, 0.2):
        res, ref = _pif_run(dt, 3200, scheme, t_end=80.0, interval=1.6)
        late = res.t[1:] > 5.0
        errs.append(np.sqrt(np.mean((res.rate[1:] - ref)[late] ** 2)))
    orders = _order(errs)
    print(scheme, "dt errors", errs, "orders", orders)
    assert orders[-1] > expected - 0.25
    assert orders[-1] < expected + 0.5


@pytest.mark.parametrize("scheme", ["backward-euler", "tr-bdf2"])
@pytest.mark.parametrize("tau_ref", [0.0, 0.25, 2.0, 2.35])
def test_mass_conservation_and_positivity_under_irregular_drive(scheme, tau_ref):
    rng = np.random.default_rng(5)
    tt = np.arange(0.0, 301.0, 1.0)
    mu = drive.Trace(times=tt, values=18.0 + 8.0 * rng.standard_normal(tt.size))
    sigma = drive.Sine(mean=4.0, amplitude=2.5, frequency=17.0)
    nrn = popdens.LIF(tau_m=10.0, threshold=20.0, reset=10.0, refractory=tau_ref)
    pop = popdens.Population(nrn, popdens.WhiteNoise(sigma))
    solver = popdens.solvers.FokkerPlanckSolver(pop, 0.1, scheme=scheme)
    solver.initialize(18.0, 4.0, "synchronous")
    t = np.arange(3001) * 0.1
    worst_mass, worst_neg = 0.0, 0.0
    for k0 in range(0, 3000, 100):
        rate, _, refr = solver.advance(mu(t[k0:k0 + 101]), sigma(t[k0:k0 + 101]))
        worst_mass = max(worst_mass, abs(solver.mass() - 1.0))
        worst_neg = min(worst_neg, solver.density().min() / solver.density().max())
        assert np.all(rate >= 0.0)
        assert np.all((refr >= 0.0) & (refr <= 1.0))
    print(scheme, tau_ref, "mass error", worst_mass, "most negative relative density", worst_neg)
    assert solver.status == popdens.result.STATUS_OK
    assert worst_mass <= 1e-12
    if scheme == "backward-euler":
        assert worst_neg >= 0.0  # M-matrix: non-negative for every dt (Chang & Cooper 1970)
    else:
        assert worst_neg >= -1e-6


def test_refractory_fraction_after_synchronous_start():
    """All neurons fire at t = 0: the refractory fraction is 1 until tau_ref, the rate 0 meanwhile."""
    pop = white(popdens.LIF(tau_m=10.0, threshold=20.0, reset=10.0, refractory=3.0), 3.0)
    res = popdens.simulate(pop, 15.0, t_end=10.0, initial="synchronous")
    before = res.t < 2.95
    assert np.allclose(res.refractory_fraction[before], 1.0, atol=1e-12)
    assert np.all(res.rate[before] == 0.0)
    assert res.refractory_fraction[-1] < 0.5


def test_snapshots_are_densities_on_cell_centres():
    pop = white(popdens.LIF(tau_m=10.0, threshold=20.0, reset=10.0, refractory=2.0), 4.0)
    res = popdens.simulate(pop, drive.Step(t=5.0, before=12.0, after=22.0), t_end=20.0, snapshot_interval=5.0)
    assert res.snapshots.shape == (5, res.axis.size)
    assert np.all(np.diff(res.axis) > 0) and res.axis[-1] < 20.0
    # stationary LIF density integrates (with the refractory mass) to 1; trapezoid on centres is close
    mass = np.trapezoid(res.snapshots[0], res.axis) + res.refractory_fraction[0]
    assert abs(mass - 1.0) < 1e-2


def test_grid_options_and_validation():
    pop = white(popdens.LIF(tau_m=10.0, threshold=20.0, reset=10.0, refractory=2.0), 4.0)
    g = refined_grid(-30.0, 20.0, 10.0, n_cells=300)
    assert isinstance(g, Grid)
    assert abs(g.centres[g.reset_cell] - 10.0) < 1e-12
    with pytest.raises(ValueError):
        g.edges[0] = 0.0
    res = popdens.simulate(pop, 15.0, t_end=1.0, grid=g)
    assert res.diagnostics["n_cells"] == g.n_cells
    exact = siegert_rate(15.0, 4.0, 10.0, 20.0, 10.0, 2.0)  # Siegert (Brunel & Hakim 1999)
    assert abs(res.rate[0] / exact - 1.0) < 2e-3
    with pytest.raises(ValueError, match="grid"):
        popdens.simulate(pop, 15.0, t_end=1.0, grid=refined_grid(-30.0, 25.0, 10.0))
    with pytest.raises(ValueError, match="scheme"):
        popdens.simulate(pop, 15.0, t_end=1.0, scheme="rk4")
    with pytest.raises(ValueError, match="u_min"):
        popdens.simulate(pop, 15.0, t_end=1.0, u_min=12.0)
    res = popdens.simulate(pop, 15.0, t_end=1.0, u_min=-40.0)
    assert res.diagnostics["u_min_mV"] == -40.0


@pytest.mark.parametrize("case", ["eif-sharp-onset", "eif-steep", "lif-low-noise"])
def test_default_grid_resolves_steep_drift_and_low_noise(case):
    """At default settings the stationary rate is within 1e-3 of the reference: a Radau integration
    of the stationary EIF equation (references.eif_rate) or the Siegert formula.  At the former
    fixed 400 cells these were 1.8e-3 (slope factor 1 mV, cut-off 10 mV above the soft threshold,
    sigma 1 mV), 1.6e-3 (slope factor 0.5 mV) and 2.8e-3 (LIF, sigma 0.5 mV) off."""
    if case == "lif-low-noise":
        pop = popdens.Population(popdens.LIF(20.0, 20.0, 0.0, 0.0), popdens.WhiteNoise(0.5))
        mu, ref = 20.2, siegert_rate(20.2, 0.5, 20.0, 20.0, 0.0, 0.0)
    else:
        d_t = 1.0 if case == "eif-sharp-onset" else 0.5
        pop = popdens.Population(popdens.EIF(10.0, 10.0, d_t, 20.0, 0.0, 2.0), popdens.WhiteNoise(1.0))
        mu = 9.0 if d_t == 1.0 else 9.5
        ref = eif_rate(mu, 1.0, dT=d_t)
    res = popdens.simulate(pop, mu, t_end=1.0)
    assert abs(res.rate[0] / ref - 1.0) < 1e-3
    assert abs(res.rate[-1] / ref - 1.0) < 1e-3
    assert res.diagnostics["n_cells"] > 400


def test_too_coarse_grid_warns_and_the_suggestion_is_accurate():
    """A user-given grid whose estimated rate error (stationary rates on n and 2n cells, Richardson)
    exceeds max(1e-3 rate, 0.01 Hz) gives an AccuracyWarning naming n_cells; the suggested count
    meets the tolerance against the Siegert formula."""
    pop = popdens.Population(popdens.LIF(20.0, 20.0, 0.0, 0.0), popdens.WhiteNoise(0.5))
    ref = siegert_rate(20.2, 0.5, 20.0, 20.0, 0.0, 0.0)  # Siegert (Brunel & Hakim 1999)
    with pytest.warns(AccuracyWarning, match="n_cells") as rec:
        popdens.simulate(pop, 20.2, t_end=1.0, n_cells=200)
    n_new = int(re.search(r"n_cells = (\d+)", str(rec[0].message)).group(1))
    with warnings.catch_warnings():
        warnings.simplefilter("error", AccuracyWarning)
        res = popdens.simulate(pop, 20.2, t_end=1.0, n_cells=n_new)
    assert abs(res.rate[0] - ref) < max(1e-3 * ref, 0.01)
