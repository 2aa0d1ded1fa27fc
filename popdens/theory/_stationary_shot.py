"""Shot-noise back end of the steady state: stationary rates of populations with :class:`~popdens.ShotNoise`.

Methods (``method`` of :func:`popdens.gain`):

* ``"exponential-psp"`` -- the exact rate of the LIF with exponentially
  distributed amplitudes (Richardson & Swarbrick 2010;
  :mod:`popdens.theory._shot_exact`), for drives with ``rest + mu`` below
  threshold;
* ``"jump-density"`` -- the stationary state of the finite-volume
  jump-density operator (:mod:`popdens.theory._shot_operator`), any neuron
  model and either amplitude law, Richardson-extrapolated from three grids;
* ``"diffusion"`` -- the diffusion approximation: the white-noise rate at
  drive ``mu + tau_m (nu_e <a_e> - nu_i <a_i>)`` and amplitude
  ``sqrt(tau_m (nu_e <a_e^2> + nu_i <a_i^2>))`` (an approximation, reported
  for comparison; its error is tabulated in the contributor guide);
* ``"auto"`` -- ``"exponential-psp"`` where it applies, else ``"jump-density"``.
"""

from __future__ import annotations

import numpy as np
from scipy import linalg, sparse
from scipy.sparse import linalg as sparse_linalg

from ..model.neurons import CODE_LIF
from ..model.noise import Population, WhiteNoise
from ._shot_exact import exact_rate_applies, exact_shot_rate
from ._shot_operator import (dense_jumps, generator, jump_density_rates, lu_ordering, richardson, shot_grid,
                             stationary_masses)

__all__ = ["SHOT_METHODS", "shot_rates", "diffusion_equivalent", "shot_passage_moments", "shot_passage_density",
           "shot_potential_density", "shot_passage_transform"]

SHOT_METHODS = ("auto", "exponential-psp", "jump-density", "diffusion")


def diffusion_equivalent(population) -> tuple[Population, float]:
    """The white-noise population of the diffusion approximation and the drive (mV) it adds."""
    nrn, noise = population.neuron, population.noise
    sigma = noise.diffusion_sigma(nrn.tau_m)
    if not sigma > 0.0:
        raise ValueError("the diffusion approximation needs input: `exc_rate` or `inh_rate` > 0 Hz")
    return Population(nrn, WhiteNoise(sigma)), noise.mean_input(nrn.tau_m)


def _exact(population, mu: float) -> float:
    nrn, noise = population.neuron, population.noise
    return exact_shot_rate(nrn.tau_m, nrn.threshold, nrn.reset, nrn.refractory, nrn.rest, mu, noise.exc_rate,
                           noise.exc_psp, noise.inh_rate, noise.inh_psp)


def shot_rates(population, mus: np.ndarray, method: str, white_gain) -> np.ndarray:
    """Stationary rates (Hz) at drives ``mus`` (mV) by ``method`` (module docstring).

    ``white_gain(population, mu)`` computes white-noise rates (the diffusion approximation's).
    """
    if method not in SHOT_METHODS:
        raise ValueError(f"`method` must be one of {list(SHOT_METHODS)} for shot noise, got {method!r}")
    nrn, noise = population.neuron, population.noise
    flat = np.asarray(mus, dtype=float).ravel()
    if method == "diffusion":
        white, shift = diffusion_equivalent(population)
        return np.asarray(white_gain(white, flat + shift), dtype=float).reshape(np.shape(mus))
    lif = nrn.code == CODE_LIF
    exact_ok = np.array([lif and exact_rate_applies(nrn, noise, m) for m in flat], dtype=bool)
    if method == "exponential-psp":
        if not lif or not noise.exponential:
            raise ValueError("`method` 'exponential-psp' needs a LIF with ShotNoise(amplitudes='exponential'); "
                             "use 'jump-density'")
        if not np.all(exact_ok):
            bad = flat[~exact_ok][0]
            raise ValueError(f"`method` 'exponential-psp' needs excitatory input and rest + `mu` below threshold "
                             f"({nrn.threshold - nrn.rest:g} mV - rest); got mu = {bad:g} mV: use 'jump-density'")
    out = np.empty(flat.size)
    use_exact = exact_ok if method in ("auto", "exponential-psp") else np.zeros(flat.size, dtype=bool)
    for i in np.flatnonzero(use_exact):
        out[i] = _exact(population, float(flat[i]))
    rest = ~use_exact
    if np.any(rest):
        if noise.exc_rate == 0.0 and noise.inh_rate == 0.0:
            raise ValueError("shot noise without input: `exc_rate` or `inh_rate` must be > 0 Hz")
        out[rest] = jump_density_rates(population, flat[rest])
    return out.reshape(np.shape(mus))


#: Grids (h, h/2, ..., each halving the cell width) for the ISI moments, extrapolated as the rates are.
MOMENT_LEVELS = 3
#: Time steps of the ISI density (uniform, then interpolated by cubic splines): backward Euler with
#: steps T/n, T/2n, T/4n, Richardson-extrapolated, for banded generators (fixed amplitudes); the dense
#: generators of exponential amplitudes use the exact one-step propagator at fewer points (each
#: costs a dense product).
ISI_STEPS = 2000
ISI_PROPAGATOR_POINTS_DENSE = 401


def _first_passage(neuron, noise, mu: float, grid):
    """Generator without reinjection, its factorisation, the output per cell and the reset vector."""
    L, out = generator(neuron, noise, mu, grid)
    b = grid.reset_vector(float(neuron.reset))
    if dense_jumps(noise, grid.h):
        lu = linalg.lu_factor(L.toarray())
        solve = lambda rhs: linalg.lu_solve(lu, rhs)  # noqa: E731 - local one-liner
    else:
        solve = sparse_linalg.splu(L.tocsc(), permc_spec=lu_ordering(noise)).solve
    return L, out, b, solve


def shot_passage_moments(population, mu: float) -> tuple[float, float]:
    """First and second moments (ms, ms^2) of the passage time from reset to the boundary (the ISI
    without the refractory period), Richardson-extrapolated over ``MOMENT_LEVELS`` grids.

    On cell masses, a neuron started at reset occupies ``(-L)^-1 b`` in expectation (``L`` the generator
    without reinjection, ``b`` the reset weights), so ``E[T] = 1.(-L)^-1 b`` and
    ``E[T^2] = 2 * 1.(-L)^-2 b`` (moments of a phase-type distribution; Neuts 1981, Matrix-geometric
    solutions in stochastic models, ch. 2).
    """
    nrn, noise = population.neuron, population.noise
    grid = shot_grid(nrn, noise, [mu])
    t1, t2 = [], []
    for _ in range(MOMENT_LEVELS):
        _, _, b, solve = _first_passage(nrn, noise, mu, grid)
        m1 = np.maximum(solve(-b), 0.0)
        m2 = np.maximum(solve(-m1), 0.0)
        t1.append(float(m1.sum()))
        t2.append(2.0 * float(m2.sum()))
        grid = grid.halved()
    return richardson(t1), richardson(t2)


def _implicit_passage(L, out, b, t_max: float, n: int, ordering: str) -> tuple[np.ndarray, np.ndarray]:
    """Output flux and survivor at ``n + 1`` uniform times on ``[0, t_max]``: backward Euler (an
    M-matrix solve per step, so positive and L-stable: the stiff drift modes of the upwind operator are
    damped, not stepped through) with steps ``t_max/n``, ``/2``, ``/4``, Richardson-extrapolated to
    third order in the step."""
    levels = []
    for sub in (1, 2, 4):
        dt = t_max / (n * sub)
        solve = sparse_linalg.splu((sparse.identity(L.shape[0], format="csc") - dt * L).tocsc(),
                                   permc_spec=ordering).solve
        p = b.copy()
        flux, surv = [float(out @ p)], [float(p.sum())]
        for i in range(n * sub):
            p = solve(p)
            if (i + 1) % sub == 0:
                flux.append(float(out @ p))
                surv.append(float(p.sum()))
        levels.append((np.array(flux), np.array(surv)))
    (f1, s1), (f2, s2), (f4, s4) = levels
    return (8.0 * f4 - 6.0 * f2 + f1) / 3.0, (8.0 * s4 - 6.0 * s2 + s1) / 3.0


def shot_passage_density(population, mu: float, t) -> tuple[np.ndarray, np.ndarray]:
    """Density (1/ms) and survivor of the passage time from reset at times ``t`` (ms, >= 0).

    The generator without reinjection propagates the reset mass on grids h and h/2 (extrapolated, first
    order in h): by backward Euler extrapolated in the step (:func:`_implicit_passage`) for banded
    generators (fixed amplitudes), by repeated products with the dense ``expm`` of one step for the
    dense generators of exponential amplitudes; cubic-spline interpolation to ``t``, clipped."""
    from scipy.interpolate import CubicSpline

    nrn, noise = population.neuron, population.noise
    t = np.asarray(t, dtype=float)
    t_max = float(np.max(t, initial=0.0))
    grid = shot_grid(nrn, noise, [mu])
    if not t_max > 0.0:
        return np.zeros(t.shape), np.ones(t.shape)
    dense = noise.exponential
    num = ISI_PROPAGATOR_POINTS_DENSE if dense else ISI_STEPS + 1
    ts = np.linspace(0.0, t_max, num)
    dens, surv = [], []
    for _ in range(2):
        L, out, b, _ = _first_passage(nrn, noise, mu, grid)
        if dense:
            step = linalg.expm(L.toarray() * (ts[1] - ts[0]))
            p = np.empty((num, grid.n))
            p[0] = b
            for i in range(1, num):
                p[i] = step @ p[i - 1]
            dens.append(p @ out)
            surv.append(p.sum(axis=1))
        else:
            f, sv = _implicit_passage(L, out, b, t_max, ISI_STEPS, lu_ordering(noise))
            dens.append(f)
            surv.append(sv)
        grid = grid.halved()
    d = CubicSpline(ts, 2.0 * dens[1] - dens[0])(t)
    s = CubicSpline(ts, 2.0 * surv[1] - surv[0])(t)
    return np.maximum(d, 0.0), np.clip(s, 0.0, 1.0)


def shot_potential_density(population, mu: float) -> tuple[np.ndarray, np.ndarray]:
    """Cell centres (mV) and stationary potential density (1/mV) of the non-refractory neurons on the
    finest of the rate's grids (h/4), normalised with the refractory mass."""
    nrn, noise = population.neuron, population.noise
    grid = shot_grid(nrn, noise, [mu]).halved().halved()
    m, _ = stationary_masses(nrn, noise, mu, grid)
    return grid.centres, m / grid.h


def shot_passage_transform(population, mu: float, s) -> np.ndarray:
    """``E[exp(-s T)]`` of the passage time ``T`` from reset to the boundary (the ISI without the
    refractory period) at Laplace variables ``s`` (complex, 1/ms): ``out.(s - L)^-1 b`` on the cells.

    Banded generators (fixed amplitudes): one sparse complex factorisation per ``s`` on grids h, h/2,
    h/4, Richardson-extrapolated.  Dense ones (exponential amplitudes): a complex Schur form
    ``L = Z T Z*`` per grid (backward stable), then one triangular solve per ``s``, on grids h and h/2.
    """
    nrn, noise = population.neuron, population.noise
    s = np.asarray(s, dtype=complex).ravel()
    grid = shot_grid(nrn, noise, [mu])
    dense = noise.exponential
    values = []
    for _ in range(2 if dense else MOMENT_LEVELS):
        L, out, b, _ = _first_passage(nrn, noise, mu, grid)
        vals = np.empty(s.size, dtype=complex)
        if dense:
            t_mat, z = linalg.schur(L.toarray().astype(complex), output="complex")
            zb, zo = z.conj().T @ b, z.T @ out  # out.(sI - L)^-1 b = (Z^T out).(sI - T)^-1 (Z* b)
            eye = np.eye(grid.n)
            for i, si in enumerate(s):
                vals[i] = zo @ linalg.solve_triangular(si * eye - t_mat, zb)
        else:
            eye = sparse.identity(grid.n, dtype=complex, format="csc")
            lc = L.astype(complex).tocsc()
            for i, si in enumerate(s):
                lu = sparse_linalg.splu((si * eye - lc).tocsc(), permc_spec=lu_ordering(noise))
                vals[i] = out @ lu.solve(b.astype(complex))
        values.append(vals)
        grid = grid.halved()
    if dense:
        return 2.0 * values[1] - values[0]
    return (8.0 * values[2] - 6.0 * values[1] + values[0]) / 3.0
