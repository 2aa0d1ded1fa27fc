"""Stationary states (fixed points) of a circuit.

A stationary state is a set of rates ``A`` (Hz) with ``A_k = Phi_k(mu_k(A),
sigma_k(A))``, where ``Phi_k`` is the stationary rate (gain function) of
cohort ``k`` and ``mu, sigma`` the diffusion-approximation input
(:meth:`popdens.network.Circuit.stationary_input`).  :func:`fixed_points`
finds all of them in a rate box: for one cohort by scanning ``A - Phi``
for sign changes and polishing with Brent's method, for several by Powell's
hybrid method from a grid of starting points, keeping distinct solutions
whose residual is below tolerance.

Units: rates in Hz, drives and noise amplitudes in mV.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass
from typing import Callable

import numpy as np
from scipy.optimize import brentq, root

from .. import _validation as v
from .._display import Displayable
from ..model.noise import WhiteNoise
from ..model.synaptic import ColouredNoise
from ._conductance_input import conductance_population
from ._shot_input import diffusion_circuit, shot_population, shot_rate
from .circuit import HZ_TO_PER_MS, Circuit

__all__ = ["FixedPoint", "fixed_points", "solver_gain"]


#: Default rate box (Hz) searched for fixed points.
DEFAULT_RATE_RANGE = (0.0, 200.0)


#: Scan points for one cohort (sign changes of A - Phi).
SCAN_POINTS = 400


#: Starting points per cohort and dimension for several cohorts.
STARTS_PER_DIM = 5


#: Absolute residual (Hz) accepted for a fixed point.
RESIDUAL_TOL = 1e-7


#: Two fixed points closer than this (relative, plus 1e-6 Hz) are the same.
SAME_POINT = 1e-6


def solver_gain(population, mu: float) -> float:
    """Stationary rate (Hz) of ``population`` at drive ``mu`` (mV) from the density solvers.

    The exact stationary state of the discrete solver (refractory density for
    escape noise, Fokker--Planck for white noise at the population's
    ``sigma``), so the mean-field integrator of :func:`popdens.network.simulate_network`
    settles exactly here.
    """
    from ..solvers.registry import resolve_method

    cls = resolve_method(population, None)
    s = cls(population, 0.1)
    sigma = float(population.noise.sigma) if isinstance(population.noise, (WhiteNoise, ColouredNoise)) else None
    s.initialize(float(mu), sigma, "stationary")
    return float(s.instantaneous_rate(float(mu), sigma))


def _one_dimensional(gain: Callable) -> Callable:
    """``gain`` with coloured-noise populations on the one-dimensional effective problem (the boundary
    shift; white noise for cut-off models) instead of their default (potential, current) plane: 200-1400x
    cheaper, within the one-dimensional result's error (a few %; contributor guide), so its fixed points
    are starting points for the plane's."""
    from ..theory.steady_state import shift_method  # noqa: PLC0415 - scipy-heavy, loaded on first use

    def coarse(population, mu):
        if isinstance(population.noise, ColouredNoise) and not population.neuron.adapting:
            return gain(population, mu, method=shift_method(population))
        return gain(population, mu)

    return coarse


def _slowest_input(circuit: Circuit, k: int) -> float:
    """The longest synaptic time constant (ms) of cohort ``k``'s current input (its coloured external
    noise, background, pathways): its effective time constant, a weighted mean of their square roots
    squared, never exceeds it."""
    a = circuit.cohorts[k]
    taus = [a.ext_tau_syn] + [p.tau_syn for p in circuit.pathways if p.target == a.name and p.synapse == "current"]
    if a.background is not None and a.background.synapse == "current":
        taus.append(a.background.tau_syn)
    return max(taus)


def _on_plane(circuit: Circuit) -> bool:
    """True when some cohort may reach the default gain with a share of the (potential, current) plane:
    a cut-off model, or a hard threshold with an input slower than ``SHIFT_UNTIL_RATIO tau_m``
    (:func:`popdens.theory._filtered_plane.plane_weight`)."""
    from ..theory._filtered_plane import plane_weight  # noqa: PLC0415

    return any(a.diffusive and not a.population.neuron.adapting
               and plane_weight(a.population.neuron, _slowest_input(circuit, k)) > 0.0
               for k, a in enumerate(circuit.cohorts))


def _default_gain() -> Callable:
    from ..theory.steady_state import gain  # noqa: PLC0415 - scipy-heavy, loaded on first use

    return gain


@dataclass(frozen=True, eq=False)
class FixedPoint(Displayable):
    """A stationary state of a circuit.

    Attributes
    ----------
    names : tuple of str
    rates : ndarray
        Rates (Hz).
    mu : ndarray
        Total drive (mV); for a cohort with conductance synapses its own external drive (the
        synaptic input is its :class:`~popdens.ConductanceNoise`); for one with shot-noise synapses
        that of the diffusion-equivalent input (its rate comes from the jump-density theory,
        :mod:`popdens.network._shot_input`).
    sigma : ndarray
        Total noise amplitude (mV; NaN for escape noise and for conductance input, whose
        fluctuations depend on the potential; shot-noise synapses: diffusion-equivalent).
    residual : float
        ``max |A - Phi(A)|`` (Hz).
    tau_syn : ndarray or None
        Effective synaptic time constant of each cohort's noise (ms; 0 for
        white input), :meth:`Circuit.noise_time_constant`.
    """

    names: tuple
    rates: np.ndarray
    mu: np.ndarray
    sigma: np.ndarray
    residual: float
    tau_syn: np.ndarray | None = None

    def _card(self):
        rows = []
        for k, nm in enumerate(self.names):
            noise = f", noise {self.sigma[k]:.4g} mV" if np.isfinite(self.sigma[k]) else ""
            rows.append((f"cohort {nm}", f"{self.rates[k]:.6g} Hz at a drive of {self.mu[k]:.4g} mV{noise}"))
        return "FixedPoint", rows, f"self-consistent to {self.residual:.2g} Hz"

    def __repr__(self):
        body = ", ".join(f"{n}={r:.6g} Hz" for n, r in zip(self.names, self.rates))
        return f"<FixedPoint {body}; residual {self.residual:.2g} Hz>"


def _rates_of(circuit: Circuit, gain: Callable, rates: np.ndarray) -> np.ndarray:
    mu, sg = circuit.stationary_input(np.maximum(rates, 0.0))
    tau = circuit.noise_time_constant(np.maximum(rates, 0.0))
    out = np.empty(circuit.n)
    for k in range(circuit.n):
        if circuit.synapse_kind(k) == "shot":
            pop, m = shot_population(circuit, k, rates)
            out[k] = shot_rate(gain, pop, circuit.cohorts[k].population.neuron, m)
            continue
        if circuit.synapse_kind(k) == "conductance":
            out[k] = float(gain(conductance_population(circuit, k, rates), float(mu[k])))
            continue
        if circuit.cohorts[k].diffusive and not sg[k] > 0:
            raise ValueError(f"cohort {circuit.names[k]!r}: noise amplitude {sg[k]!r} mV at rates {rates} Hz; "
                             "white-noise populations need sigma > 0")
        out[k] = float(gain(circuit.population_at(k, sg[k], tau[k]), float(mu[k])))
    return out


class _RateMap:
    """``rates -> stationary rates`` (Hz) of a circuit, as :func:`_rates_of`, for many calls.

    The coupling matrices and the external input are computed once, with the arithmetic of
    :meth:`Circuit.stationary_input` and :meth:`Circuit.noise_time_constant` (same values, bit for
    bit), and ``gain`` is called once per distinct (population, drive, noise): cohorts of equal
    population and input, and the root finder's repeated points, share the evaluation (``gain`` is
    taken to be a pure function).
    """

    def __init__(self, circuit: Circuit, gain: Callable):
        self.circuit, self.gain = circuit, gain
        self.wm, self.wv = circuit.coupling()
        cohorts = circuit.cohorts
        self.ext_mu = np.array([a.external_mean(0.0) for a in cohorts])
        self.ext_var = np.array([a.external_variance(0.0) for a in cohorts])
        self.ext_fw = np.array([float(a.external_filter_weight(0.0)) for a in cohorts])
        self.ext_var_f = np.array([float(a.external_variance(0.0)) for a in cohorts])
        self.diffusive = [a.diffusive for a in cohorts]
        self.conductance = [circuit.synapse_kind(k) == "conductance" for k in range(circuit.n)]
        self.shot = [circuit.synapse_kind(k) == "shot" for k in range(circuit.n)]
        self.terms = []  # (target, source, variance per Hz, sqrt(tau_syn)) of each pathway into a white-noise cohort
        for p in circuit.pathways:
            k, l = circuit.index(p.target), circuit.index(p.source)
            a = cohorts[k]
            if a.diffusive and p.synapse != "conductance":
                self.terms.append((k, l, a.tau_m * p.weight ** 2 * p.in_degree * HZ_TO_PER_MS, math.sqrt(p.tau_syn)))
        self.memo: dict = {}

    def __call__(self, rates: np.ndarray) -> np.ndarray:
        c = self.circuit
        r = np.maximum(rates, 0.0)
        mu = self.ext_mu + self.wm @ r
        sg = np.where(self.diffusive, np.sqrt(np.maximum(self.ext_var + self.wv @ r, 0.0)), np.nan)
        num, den = self.ext_fw.copy(), self.ext_var_f.copy()
        for k, l, coeff, root_tau in self.terms:
            var = coeff * max(float(r[l]), 0.0)
            num[k] += var * root_tau
            den[k] += var
        tau = np.where(den > 0.0, (num / np.where(den > 0.0, den, 1.0)) ** 2, 0.0)
        out = np.empty(c.n)
        for k in range(c.n):
            if self.shot[k]:
                pop, m = shot_population(c, k, r)
                key = (pop, m, c.cohorts[k].population.neuron)
                if key not in self.memo:
                    self.memo[key] = shot_rate(self.gain, pop, key[2], m)
                out[k] = self.memo[key]
                continue
            if self.conductance[k]:
                pop = conductance_population(c, k, r)
                key = (pop, float(mu[k]))
                if key not in self.memo:
                    self.memo[key] = float(self.gain(pop, float(mu[k])))
                out[k] = self.memo[key]
                continue
            if self.diffusive[k] and not sg[k] > 0:
                raise ValueError(f"cohort {c.names[k]!r}: noise amplitude {sg[k]!r} mV at rates {rates} Hz; "
                                 "white-noise populations need sigma > 0")
            key = (c.cohorts[k].population, float(sg[k]) if self.diffusive[k] else 0.0, float(tau[k]), float(mu[k]))
            try:
                out[k] = self.memo[key]
            except KeyError:
                out[k] = self.memo[key] = float(self.gain(c.population_at(k, sg[k], tau[k]), float(mu[k])))
            except TypeError:  # pragma: no cover - unhashable custom parameters
                out[k] = float(self.gain(c.population_at(k, sg[k], tau[k]), float(mu[k])))
        return out


def fixed_points(circuit: Circuit, rate_range=DEFAULT_RATE_RANGE, *, gain: Callable | None = None,
                 starts_per_dim: int = STARTS_PER_DIM, scan_points: int = SCAN_POINTS) -> list[FixedPoint]:
    """All self-consistent stationary states with rates in ``rate_range``.

    Parameters
    ----------
    circuit : Circuit
        External input taken at t = 0.
    rate_range : (float, float)
        Rate box (Hz) searched, ``0 <= low < high``.
    gain : callable, optional
        ``gain(population, mu) -> rate (Hz)``; white-noise populations carry
        their total ``sigma``, filtered input makes them coloured-noise
        populations with the effective ``tau_syn``, conductance synapses make them
        :class:`~popdens.ConductanceNoise` populations and shot-noise synapses
        :class:`~popdens.ShotNoise` populations, driven by the cohort's own ``drive``
        (:mod:`popdens.network._conductance_input`, :mod:`popdens.network._shot_input`).  Default: ``popdens.gain`` when
        available, else :func:`solver_gain`.
    starts_per_dim : int
        Starting points per cohort (several cohorts).
    scan_points : int
        Scan points (one cohort).

    Returns
    -------
    list of FixedPoint
        Sorted by the rate of the first cohort.

    Notes
    -----
    With several cohorts the search is a multistart root finder: fixed
    points whose basin of attraction (for Powell's method) contains none
    of the ``starts_per_dim ** n`` starts are missed; raise
    ``starts_per_dim`` when in doubt.

    With shot-noise synapses each stationary rate is a jump-density solve
    (0.05-0.5 s), so the search starts from the fixed points of the
    diffusion approximation (the same circuit with current synapses, found
    as above) and polishes each with Powell's method: a shot-noise fixed
    point with no diffusion-approximation fixed point in its basin is missed.
    Likewise, with the default ``gain``, cohorts of cut-off models (EIF, QIF)
    with coloured or filtered input, and LIF cohorts with an input slower
    than ``tau_syn = 0.1 tau_m``, take their rates from the (potential,
    current) plane (0.1-0.3 s each): the search runs on their
    one-dimensional effective rate (white noise, boundary shift) and polishes
    what it finds on the plane (an E-I pair: 4 s instead of 218 s CPU, the
    same fixed point).  A fixed point of the plane with no one-dimensional
    fixed point in its basin is missed.

    Examples
    --------
    >>> import popdens
    >>> from popdens.network import Cohort, Circuit, Pathway
    >>> pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(3.0))
    >>> c = Circuit([Cohort("E", pop, drive=12.0)], [Pathway("E", "E", 0.1, 200, 1.5)])
    >>> [round(float(fp.rates[0]), 2) for fp in fixed_points(c, (0.0, 300.0))]
    [0.06, 17.57, 242.04]
    """
    if not isinstance(circuit, Circuit):
        raise ValueError(f"`circuit` must be a popdens.network.Circuit, got {circuit!r}")
    circuit.require_current("fixed_points", allow=("conductance", "shot"))
    lo, hi = (v.non_negative("rate_range[0]", rate_range[0]), v.positive("rate_range[1]", rate_range[1]))
    v.less_than("rate_range[0]", lo, "rate_range[1]", hi)
    polish = gain is None and _on_plane(circuit)
    gain = _default_gain() if gain is None else gain
    n = circuit.n
    found: list[np.ndarray] = []

    rate_map = _RateMap(circuit, gain)

    def resid(r):
        return r - rate_map(r)

    def add(r):
        r = np.asarray(r, dtype=float)
        if np.any(r < lo - 1e-9) or np.any(r > hi + 1e-9) or not np.all(np.isfinite(r)):
            return
        if np.max(np.abs(resid(r))) > RESIDUAL_TOL * max(1.0, float(np.max(r))):
            return
        for f in found:
            if np.all(np.abs(f - r) <= SAME_POINT * np.maximum(1.0, np.abs(r))):
                return
        found.append(r)

    if any(rate_map.shot) or polish:
        # each rate costs a jump-density solve (shot noise) or a plane (coloured noise of cut-off
        # models): search with the cheap approximation, polish its fixed points with the full theory
        start_circuit = diffusion_circuit(circuit) if any(rate_map.shot) else circuit
        start_gain = _one_dimensional(gain) if polish else gain
        for fp in fixed_points(start_circuit, (lo, hi), gain=start_gain, starts_per_dim=starts_per_dim,
                               scan_points=scan_points):
            sol = root(resid, fp.rates, method="hybr", options={"xtol": 1e-12})
            if sol.success or np.max(np.abs(sol.fun)) < RESIDUAL_TOL:
                add(sol.x)
    elif n == 1:
        grid = np.linspace(lo, hi, v.positive_int("scan_points", scan_points))
        vals = np.array([resid(np.array([x]))[0] for x in grid])
        for i in range(grid.size - 1):
            if vals[i] == 0.0:
                add([grid[i]])
            elif vals[i] * vals[i + 1] < 0.0:
                x = brentq(lambda a: resid(np.array([a]))[0], grid[i], grid[i + 1], xtol=1e-13, rtol=1e-14)
                add([x])
        if vals[-1] == 0.0:
            add([grid[-1]])
    else:
        per = v.positive_int("starts_per_dim", starts_per_dim)
        axis = lo + (hi - lo) * (np.arange(per) + 0.5) / per
        # rates spread on a square-root scale: low rates are where most cortical states live
        axis = lo + (hi - lo) * ((axis - lo) / (hi - lo)) ** 2
        for start in itertools.product(axis, repeat=n):
            sol = root(resid, np.array(start), method="hybr", options={"xtol": 1e-12})
            if sol.success or np.max(np.abs(sol.fun)) < RESIDUAL_TOL:
                add(sol.x)
    out = []
    for r in sorted(found, key=lambda x: tuple(x)):
        mu, sg = circuit.stationary_input(r)
        sg = np.where(rate_map.conductance, np.nan, sg)  # conductance input: no single noise amplitude
        out.append(FixedPoint(circuit.names, r, mu, sg, float(np.max(np.abs(resid(r)))),
                              circuit.noise_time_constant(r)))
    return out
