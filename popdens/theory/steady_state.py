"""Steady state of a population at constant drive: gain functions, ISI statistics, inverse design.

For a constant drive ``mu`` (mV) a population settles into a stationary
state: every neuron is a renewal process whose inter-spike intervals (ISIs)
have a fixed distribution.  This module computes, without simulating,

* :func:`gain` -- the stationary rate (Hz) over an array of drives;
* :func:`gain_slope` -- its derivative d(rate)/d(mu) (Hz/mV);
* :func:`stationary` -- rate, ISI coefficient of variation, ISI density and
  survivor function, the stationary membrane (diffusive) or age (escape)
  density and the mean potential, as a :class:`SteadyState`;
* :func:`drive_for_rate` -- the drive giving a target rate;
* :func:`drive_and_noise_for` -- for white noise, the (mu, sigma) pair giving a
  target rate and CV.

Methods
-------
* White noise, LIF: the Siegert formula (Siegert 1951; Brunel & Hakim 1999),
  evaluated stably (:mod:`popdens.theory._siegert`).
* White noise, PIF: the inverse-Gaussian closed form (Gerstein & Mandelbrot 1964).
* White noise, any drift: threshold integration (Richardson 2007, Phys. Rev.
  E 76:021919), :mod:`popdens.theory._stationary_white`: second order in the cell width
  (fourth for the LIF's linear drift, measured against the Siegert formula),
  Richardson-extrapolated from two widths.
* Escape noise: renewal theory along the free trajectory after reset
  (:mod:`popdens.theory._stationary_escape`).
* Coloured noise (:class:`~popdens.ColouredNoise`), hard threshold (LIF,
  PIF), ``tau_syn <= 0.1 tau_m``: every white-noise method above, applied to
  the white-noise population with threshold and reset moved up by ``sigma
  alpha/2 sqrt(tau_syn/tau_m)`` (Brunel & Sergi 1998; Fourcaud & Brunel
  2002): first order in ``sqrt(tau_syn/tau_m)``, see
  :mod:`popdens.model.effective`.  Beyond, where that shift misses the
  rate by more than 2 % (-5.7 % at 0.25, -15.6 % at 0.5, measured), the
  stationary two-dimensional (potential, current) density
  (``method="plane"``), blended linearly in ``tau_syn`` with the shift
  between 0.1 and 0.15 so that sweeps over ``tau_syn`` stay continuous.
  Models with a spike cut-off (EIF, QIF), whose correction is of order
  ``tau_syn/tau_m`` and not captured by a boundary shift: the plane at
  every ``tau_syn``.  Any model may ask for either (``method="plane"``; a
  white-noise method name gives the shift),
  :mod:`popdens.theory._filtered_plane`.
* Shot noise (:class:`~popdens.ShotNoise`): the exact rate of the LIF with
  exponentially distributed PSPs (Richardson & Swarbrick 2010), else the
  stationary state of the jump-density operator; :func:`stationary` takes
  the ISI moments, the ISI density and the potential density from the
  same operator (:mod:`popdens.theory._stationary_shot`).
* Conductance input (:class:`~popdens.ConductanceNoise`): threshold
  integration with voltage-dependent drift and diffusion (the
  effective-time-constant approximation with the fluctuations' driving
  force), threshold and reset moved for the synaptic filtering
  (:mod:`popdens.theory._conductance`); :func:`stationary` takes the ISI
  moments and density from the transform of the same equation (renewal:
  the conductances' memory across spikes is ignored).

The ISI CV of white-noise populations comes from the first two moments of
the passage time from reset to the boundary; the ISI density from the
Laplace transform of the passage time, obtained by threshold integration at
complex frequency and inverted by a damped discrete Fourier series.

Units: drives and noise amplitudes in mV, times in ms, rates in Hz,
densities in 1/mV (potential) or 1/ms (age, ISI).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
from scipy.optimize import brentq

from .. import _validation as v
from .._display import Displayable, fmt
from ..exceptions import ConvergenceError, UnreachableTargetError
from ..model.drive import Constant, Drive
from ..model.neurons import CODE_LIF, CODE_PIF
from ..model.effective import white_equivalent
from ..model.noise import EscapeNoise, Population, WhiteNoise
from ..model.shot import ShotNoise
from ..model.conductance import ConductanceNoise
from ..model.synaptic import ColouredNoise
from ._adapted import escape_adapted, white_adapted
from ._filtered_plane import (PLANE_FLOOR_RATIO, PLANE_MIN_RATE_HZ, below_floor, extrapolated_levels,
                              filtered_rates, plane_states, plane_weight)
from ._shot_exact import exact_rate_applies
from ._stationary_shot import shot_passage_density, shot_passage_moments, shot_potential_density, shot_rates
from ._conductance import conductance_rates, conductance_stationary
from ._isi_diffusive import density_from_transform, passage_time_density
from ._isi_markov import isi_chain
from ._renewal import STATUS_OK as _RENEWAL_OK
from ._renewal import RENEWAL_TOL, reaches_cutoff, renewal_moments
from ._scales import scratch
from ._siegert import siegert_rate, siegert_slopes
from ._stationary_escape import CUTOFF_PROBES, renewal_args, renewal_rates_hz
from ._stationary_white import cv_diffusive, diffusive_sweep, pif_rate_slope, threshold_rates

__all__ = ["SteadyState", "gain", "gain_slope", "stationary", "drive_for_rate", "drive_and_noise_for"]

#: Largest number of recorded renewal steps (ISI output).
RECORD_CAPACITY = 200_000
#: Step (mV) of the fourth-order central difference used for gain slopes where no
#: closed form exists (truncation ~ (step/scale)^4 for a scale of ~1 mV).
SLOPE_STEP_MV = 1e-2
#: Survivor level down to which the ISI output grid extends by default.
ISI_GRID_SURVIVOR = 1e-6
#: Default number of points of the ISI output grid.
ISI_GRID_POINTS = 2001
#: Largest |drive| (mV) tried when bracketing an inverse problem.
MAX_DRIVE_MV = 1e6

METHODS = ("auto", "siegert", "inverse-gaussian", "threshold-integration", "renewal", "plane")


# ---------------------------------------------------------------- helpers
def _check_population(population) -> None:
    if not isinstance(population, Population):
        raise ValueError(f"`population` must be a popdens.Population, got {population!r}")


def _constant_sigma(population, sigma) -> float | None:
    """The noise amplitude (mV) for the steady state, or None for escape noise."""
    noise = population.noise
    if isinstance(noise, ShotNoise):
        _shot(population, sigma)
        return None
    if isinstance(noise, ConductanceNoise):
        _conductance(population, sigma)
        return None
    if isinstance(noise, EscapeNoise):
        if sigma is not None:
            raise ValueError("`sigma` applies to white-noise populations only; this population has escape noise")
        return None
    if sigma is not None:
        return v.positive("sigma", sigma)
    s = noise.sigma
    if isinstance(s, Constant):
        return float(s.mu)
    if isinstance(s, Drive):
        raise ValueError(
            "the steady state needs a constant noise amplitude: `population.noise.sigma` is "
            f"{s!r}; pass `sigma=` (mV) or use a number / popdens.drive.Constant"
        )
    return float(s)


def _shot(population, sigma) -> bool:
    """True for shot noise (after the checks that apply to it)."""
    if not isinstance(population.noise, ShotNoise):
        return False
    if sigma is not None:
        raise ValueError("`sigma` does not apply to ShotNoise: its fluctuations follow from the input rates "
                         "and PSP amplitudes")
    if population.neuron.adapting:
        raise ValueError("the steady state of shot noise does not support `adaptation` yet; remove it from the "
                         "neuron model or use popdens.montecarlo")
    return True


def _conductance(population, sigma) -> bool:
    """True for conductance input (after the checks that apply to it)."""
    if not isinstance(population.noise, ConductanceNoise):
        return False
    if sigma is not None:
        raise ValueError("`sigma` does not apply to ConductanceNoise: its fluctuations follow from the input "
                         "rates, weights and reversal potentials")
    return True


def _white_rates(population, mus):
    return gain(population, mus)


def _as_white(population, sigma):
    """Coloured noise -> its white-noise equivalent (the ``sigma`` override consumed); else unchanged."""
    if isinstance(population.noise, ColouredNoise):
        if sigma is not None:
            sigma = v.positive("sigma", sigma)
        return white_equivalent(population, sigma), None
    return population, sigma


def _plane_share(population, method) -> float:
    """Weight (0 to 1) of the (potential, current) plane in the rate: 1 with ``method="plane"`` (any
    coloured-noise renewal neuron); with ``method="auto"`` :func:`._filtered_plane.plane_weight` (1 for
    a spike cut-off; hard thresholds blend from the boundary shift to the plane between ``tau_syn/tau_m``
    = ``SHIFT_UNTIL_RATIO`` and ``PLANE_FROM_RATIO``); 0 otherwise."""
    noise = population.noise
    if method == "plane" and not isinstance(noise, ColouredNoise):
        raise ValueError(f"`method` 'plane' is for ColouredNoise populations, not {type(noise).__name__}")
    if not isinstance(noise, ColouredNoise) or population.neuron.adapting:
        if method == "plane":
            raise ValueError("`method` 'plane' does not support `adaptation` yet; use method='auto'")
        return 0.0
    if method == "plane":
        return 1.0
    return plane_weight(population.neuron, float(noise.tau_syn)) if method == "auto" else 0.0


def shift_method(population) -> str:
    """The default one-dimensional method of ``population``'s white-noise equivalent (for coloured
    noise: the effective boundary shift): Siegert (LIF), inverse Gaussian (PIF), threshold integration."""
    return {CODE_LIF: "siegert", CODE_PIF: "inverse-gaussian"}.get(population.neuron.code, "threshold-integration")


def _blend(shift, plane, share: float):
    """``shift + share (plane - shift)``: the default between the boundary shift and the plane."""
    return np.asarray(shift) + share * (np.asarray(plane) - np.asarray(shift))


def _plane_sigma(population, sigma) -> float:
    if sigma is not None:
        return v.positive("sigma", sigma)
    s = population.noise.constant_sigma()
    if s is None:
        raise ValueError("the steady state of coloured noise needs a constant `sigma` (mV): pass `sigma=` or use "
                         "a number / popdens.drive.Constant")
    return s


def _plane_rates(population, mus, sigma) -> np.ndarray:
    """Coloured-noise rates (Hz) from the (potential, current) plane (see :mod:`._filtered_plane`)."""
    nrn, sg = population.neuron, _plane_sigma(population, sigma)

    def effective(tau, drives):  # the one-dimensional effective-boundary theory at time constant tau
        pop = white_equivalent(Population(nrn, ColouredNoise(sg, tau)), sg)
        return gain(pop, drives)

    return filtered_rates(nrn, mus, sg, float(population.noise.tau_syn), effective)


def _drives(mu) -> np.ndarray:
    arr = np.asarray(mu, dtype=float)
    if not np.all(np.isfinite(arr)):
        raise ValueError("`mu` must contain only finite drives (mV)")
    return arr



def _resolve_method(population, method) -> str:
    if method not in METHODS:
        raise ValueError(f"`method` must be one of {list(METHODS)}, got {method!r}")
    escape = isinstance(population.noise, EscapeNoise)
    if method == "auto":
        if escape:
            return "renewal"
        code = population.neuron.code
        return {CODE_LIF: "siegert", CODE_PIF: "inverse-gaussian"}.get(code, "threshold-integration")
    if method == "plane":
        raise ValueError("`method` 'plane' is for ColouredNoise populations")
    if escape and method != "renewal":
        raise ValueError(f"`method` {method!r} is for white noise; escape noise uses 'renewal'")
    if not escape and method == "renewal":
        raise ValueError("`method` 'renewal' is for escape noise; white noise uses 'siegert' or 'threshold-integration'")
    if method == "siegert" and population.neuron.code != CODE_LIF:
        raise ValueError("`method` 'siegert' applies to the LIF only; use 'threshold-integration'")
    if method == "inverse-gaussian" and population.neuron.code != CODE_PIF:
        raise ValueError("`method` 'inverse-gaussian' applies to the PIF only; use 'threshold-integration'")
    return method




def _renewal_population(population) -> Population:
    """The population with its neuron's adaptation removed."""
    return Population(population.neuron.without_adaptation(), population.noise)


def _adapted_state(population, mu: float, sg, method: str):
    """Stationary state of an adapting population (see :mod:`popdens.theory._adapted`)."""
    if sg is None:
        return escape_adapted(population, mu)
    renewal = _renewal_population(population)
    return white_adapted(population, mu, lambda d: float(gain(renewal, d, sigma=sg, method=method)),
                         lambda d: diffusive_sweep(renewal, d, sg).mean_u)


# ---------------------------------------------------------------- public API
def gain(population, mu, *, sigma=None, method="auto") -> np.ndarray:
    """Stationary firing rate (Hz) for each constant drive in ``mu``.

    Parameters
    ----------
    population : Population
        Any neuron model with escape or white noise.
    mu : float or array_like
        Constant drives (mV).
    sigma : float or array_like, optional
        White-noise amplitude (mV) overriding the population's (for sweeps
        over the noise); a list gives one gain curve per level, as a scenario's
        ``[gain] sigma = [...]`` does.  Not allowed for escape noise.
    method : {"auto", "siegert", "inverse-gaussian", "threshold-integration", "renewal", "plane"}
        ``"auto"``: Siegert formula for the white-noise LIF, the
        inverse-Gaussian closed form for the white-noise PIF, threshold
        integration for other white-noise models, renewal theory for escape
        noise.  Coloured noise: ``"auto"`` is, for hard thresholds (LIF,
        PIF), the effective boundary shift (one of the white-noise methods
        above) up to ``tau_syn = 0.1 tau_m`` and ``"plane"``, the stationary
        (potential, current) density, from ``0.15 tau_m`` (the two blended
        linearly in ``tau_syn`` between; 0.1-0.3 s CPU per rate on the
        plane), and ``"plane"`` for models with a spike cut-off; a
        white-noise method name gives the effective boundary-shift result
        for any model.  Shot noise (:class:`~popdens.ShotNoise`) takes ``"auto"``,
        ``"exponential-psp"`` (exact, LIF with exponential PSPs),
        ``"jump-density"`` or ``"diffusion"`` (the diffusion approximation),
        see :mod:`popdens.theory._stationary_shot`.  Conductance input
        (:class:`~popdens.ConductanceNoise`) takes ``"auto"`` (=
        ``"filtered"``), ``"diffusion"`` or ``"current-based"`` (the naive
        approximation, for comparison), see
        :mod:`popdens.theory._conductance`.

    Returns
    -------
    ndarray
        Rates in Hz, the shape of ``mu`` (``(len(sigma),) + mu.shape`` for a list of ``sigma``).

    Raises
    ------
    ValueError
        Bad arguments, or a noise amplitude that varies in time.
    ConvergenceError
        No stationary state could be computed (the message names the drive).

    Notes
    -----
    Adapting neurons (``adaptation=[...]``): escape noise gives the
    stationary rate of the spike-weighted closure (the refractory-density
    solver's default), white noise the mean-adaptation rate ``r = Phi(mu -
    sum_k w_k)`` with ``w_k = a_k(<u> - rest) + jump_k tau_k r`` (see
    :mod:`popdens.theory._adapted`); ``method`` then names how the renewal
    part is computed.

    Examples
    --------
    >>> import popdens
    >>> pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(5.0))
    >>> r = gain(pop, [10.0, 20.0])
    >>> bool(r[0] < r[1])
    True
    """
    _check_population(population)
    if _shot(population, sigma):
        return shot_rates(population, _drives(mu), method, _white_rates)
    if _conductance(population, sigma):
        return conductance_rates(population, _drives(mu), method, _white_rates)
    if sigma is not None and np.ndim(sigma) > 0:
        levels = np.asarray(sigma, dtype=float).ravel()
        if levels.size == 0:
            raise ValueError("`sigma` must hold at least one noise level (mV), got an empty list")
        return np.stack([gain(population, mu, sigma=float(s), method=method) for s in levels])
    share = _plane_share(population, method)
    if share > 0.0:
        plane = _plane_rates(population, _drives(mu), sigma)
        if share == 1.0:
            return plane
        return _blend(gain(population, mu, sigma=sigma, method=shift_method(population)), plane, share)
    population, sigma = _as_white(population, sigma)
    sg = _constant_sigma(population, sigma)
    mus = _drives(mu)
    m = _resolve_method(population, method)
    if population.neuron.adapting:
        flat = mus.ravel()
        out = np.array([_adapted_state(population, float(x), sg, m).rate for x in flat])
        return out.reshape(mus.shape)
    if m == "siegert":
        nrn = population.neuron
        return siegert_rate(mus, sg, nrn.tau_m, nrn.threshold, nrn.reset, nrn.refractory, nrn.rest) * 1000.0
    if m == "inverse-gaussian":
        return pif_rate_slope(population.neuron, mus)[0]
    if m == "threshold-integration":
        return threshold_rates(population, mus, sg)
    return renewal_rates_hz(population, mus)



def gain_slope(population, mu, *, sigma=None, method="auto") -> np.ndarray:
    """Derivative of the gain function, d(rate)/d(mu) (Hz/mV), at each drive in ``mu``.

    Exact for the white-noise LIF without adaptation (derivative of the Siegert
    formula); otherwise a fourth-order central difference with step
    ``SLOPE_STEP_MV`` (mV) of the accurate rates.

    Parameters
    ----------
    population : Population
        The neurons and their noise model.
    mu : float or array_like
        Drives (mV).
    sigma : float, optional
        White-noise amplitude override (mV).
    method : str
        As in :func:`gain`.
    """
    _check_population(population)
    if (_shot(population, sigma) or _conductance(population, sigma)
            or _plane_share(population, method) > 0.0):
        h = SLOPE_STEP_MV
        mus = _drives(mu)
        r = gain(population, np.stack([mus - 2 * h, mus - h, mus + h, mus + 2 * h]), sigma=sigma, method=method)
        return (8.0 * (r[2] - r[1]) - (r[3] - r[0])) / (12.0 * h)
    population, sigma = _as_white(population, sigma)
    sg = _constant_sigma(population, sigma)
    mus = _drives(mu)
    m = _resolve_method(population, method)
    nrn = population.neuron
    if m == "inverse-gaussian" and not nrn.adapting:
        return pif_rate_slope(nrn, mus)[1]
    if m == "siegert" and not nrn.adapting:
        _, d_mu, _ = siegert_slopes(mus, sg, nrn.tau_m, nrn.threshold, nrn.reset, nrn.refractory, nrn.rest)
        return d_mu * 1000.0
    h = SLOPE_STEP_MV
    stencil = np.stack([mus - 2 * h, mus - h, mus + h, mus + 2 * h])
    r = gain(population, stencil, sigma=sigma, method=m)
    return (8.0 * (r[2] - r[1]) - (r[3] - r[0])) / (12.0 * h)


@dataclass(frozen=True, repr=False)
class SteadyState(Displayable):
    """Stationary state of a population at constant drive (see :func:`stationary`).

    Attributes
    ----------
    population : Population
    mu : float
        Drive (mV).
    sigma : float or None
        White-noise amplitude (mV); None for escape noise.
    rate : float
        Stationary rate (Hz).
    cv : float
        Coefficient of variation of the ISI (dimensionless).
    mean_isi : float
        Mean ISI (ms), ``1000/rate``.
    mean_u : float
        Mean membrane potential (mV), refractory neurons counted at reset.
    refractory_fraction : float
        Fraction of neurons in their absolute refractory period, ``rate * tau_ref``.
    isi_t : ndarray
        Time grid (ms) of the ISI statistics.
    isi_density : ndarray
        ISI probability density (1/ms) on ``isi_t``.
    survivor : ndarray
        Probability that an ISI exceeds ``isi_t`` (dimensionless).
    isi_atom : tuple or None
        ``(age, mass)`` when a free trajectory reaches a spike cut-off under
        escape noise: the survivors fire deterministically at that age (ms).
    u, density, flux : ndarray or None
        White noise: potential grid (mV), density of non-refractory neurons
        (1/mV; integrates to ``1 - refractory_fraction``) and probability
        flux (Hz).
    age, age_density : ndarray or None
        Escape noise: age since the last spike (ms) and the stationary age
        density (1/ms; integrates to 1 over all ages, ``rate * survivor``).
    serial_correlation : ndarray or None
        Adapting escape-noise neurons with one adaptation component (no
        coupling): correlation coefficients of ISIs 1, 2, ... apart, from the
        Markov chain of the post-spike adaptation (exact up to its grids);
        None otherwise (renewal neurons: zero).
    method : str
        How the rate was computed.
    """

    population: Any
    mu: float
    sigma: float | None
    rate: float
    cv: float
    mean_isi: float
    mean_u: float
    refractory_fraction: float
    isi_t: np.ndarray
    isi_density: np.ndarray
    survivor: np.ndarray
    method: str
    isi_atom: tuple | None = None
    u: np.ndarray | None = None
    density: np.ndarray | None = None
    flux: np.ndarray | None = None
    age: np.ndarray | None = None
    age_density: np.ndarray | None = None
    serial_correlation: np.ndarray | None = None
    diagnostics: dict = field(default_factory=dict)

    def _card(self):
        who = f"{type(self.population.neuron).__name__}, {type(self.population.noise).__name__}"
        rows = [("population", who), ("drive", fmt(self.mu, "mV"))]
        if self.sigma is not None:
            rows.append(("noise sigma", fmt(self.sigma, "mV")))
        rows += [("rate", fmt(self.rate, "Hz", 6)), ("ISI CV", fmt(self.cv)), ("mean ISI", fmt(self.mean_isi, "ms")),
                 ("mean potential", fmt(self.mean_u, "mV")), ("refractory fraction", fmt(self.refractory_fraction, "", 3)),
                 ("method", self.method)]
        return "SteadyState", rows, None

    def __repr__(self) -> str:
        who = f"{type(self.population.neuron).__name__}/{type(self.population.noise).__name__}"
        noise = f", sigma={self.sigma:g} mV" if self.sigma is not None else ""
        return (f"<SteadyState {who} at mu={self.mu:g} mV{noise}: rate {self.rate:.6g} Hz, CV {self.cv:.4g}, "
                f"mean u {self.mean_u:.4g} mV, refractory fraction {self.refractory_fraction:.3g} ({self.method})>")

    def plot(self):
        """ISI density and the stationary (potential or age) density; returns the Figure."""
        from ..plotting import plot_steady_state

        return plot_steady_state(self)


def _default_isi_grid(t_max: float) -> np.ndarray:
    return np.linspace(0.0, t_max, ISI_GRID_POINTS)


def _escape_stationary(population, mu: float, isi_t) -> SteadyState:
    from scipy.interpolate import CubicHermiteSpline

    nrn, hz, kn, kh = renewal_args(population)
    stack, xbuf = scratch(nrn.program, hz.program)
    mode = 1 if (nrn.has_cutoff and reaches_cutoff(*kn, float(nrn.reset), float(nrn.boundary), mu,
                                                    CUTOFF_PROBES, stack, xbuf)) else 0
    rec = np.zeros((RECORD_CAPACITY, 5))
    m0, m1, mi, a_end, s_end, atom, n_rec, st = renewal_moments(
        *kn, float(nrn.tau_m), float(nrn.reset), float(nrn.boundary), float(nrn.refractory), mu, *kh,
        float(nrn.threshold), mode, np.zeros((10, 5)), rec, True, stack, xbuf)
    if st != _RENEWAL_OK:
        raise ConvergenceError(f"the renewal integrals did not converge at `mu` = {mu!r} mV")
    if not math.isfinite(m0):
        raise ValueError(f"at `mu` = {mu!r} mV the neurons stop firing (the hazard vanishes along the free "
                         "trajectory): the rate is 0 and there is no stationary ISI distribution")
    rec = rec[:n_rec]
    rate_ms = 1.0 / m0
    h_end = rec[-1, 4]
    if isi_t is None:
        t_max = rec[-1, 0]
        if not atom and s_end > ISI_GRID_SURVIVOR and h_end > 0.0:
            t_max = a_end + math.log(s_end / ISI_GRID_SURVIVOR) / h_end
        isi_t = _default_isi_grid(max(t_max, 1e-9))
    else:
        isi_t = v.finite_array("isi_t", isi_t)
        if np.any(isi_t < 0.0):
            raise ValueError("`isi_t` must be >= 0 (ms)")
    a_rec = rec[:, 0]
    keep = np.concatenate([[True], np.diff(a_rec) > 0.0])
    a_rec, u_rec, big_h, du_rec, h_rec = (rec[keep, k] for k in range(5))
    big_h_at = np.zeros(isi_t.shape)
    u_at = np.full(isi_t.shape, float(nrn.reset))
    inside = (isi_t >= a_rec[0]) & (isi_t <= a_rec[-1])
    if a_rec.size >= 2:
        big_h_at[inside] = CubicHermiteSpline(a_rec, big_h, h_rec)(isi_t[inside])
        u_at[inside] = CubicHermiteSpline(a_rec, u_rec, du_rec)(isi_t[inside])
    beyond = isi_t > a_rec[-1]
    if atom:
        surv = np.where(beyond, 0.0, np.exp(-big_h_at))
    else:
        big_h_at[beyond] = big_h[-1] + h_end * (isi_t[beyond] - a_rec[-1])
        u_at[beyond] = u_rec[-1]
        surv = np.exp(-big_h_at)
    free = isi_t >= nrn.refractory
    du_at = np.interp(isi_t, a_rec, du_rec)
    haz = np.where(free, np.asarray(hz.rate(u_at, nrn.threshold, du_at), dtype=float) * 1e-3, 0.0)
    if atom:
        haz = np.where(beyond, 0.0, haz)
    mean_isi = m0
    var = 2.0 * m1 - m0 * m0
    cv = math.sqrt(max(var, 0.0)) / mean_isi if math.isfinite(var) else float("nan")
    return SteadyState(
        population=population, mu=mu, sigma=None, rate=rate_ms * 1000.0, cv=cv, mean_isi=mean_isi,
        mean_u=float(mi * rate_ms), refractory_fraction=float(rate_ms * nrn.refractory),
        isi_t=isi_t, isi_density=haz * surv, survivor=surv, method="renewal",
        isi_atom=(float(a_end), float(s_end)) if atom else None,
        age=isi_t, age_density=rate_ms * surv,
        # global error bound of the adaptive integration: the local tolerances summed over its steps
        diagnostics={"renewal_steps": int(n_rec), "mode": "potential" if mode else "age",
                     "rate_error_hz": rate_ms * 1000.0 * RENEWAL_TOL * max(int(n_rec), 1)},
    )


def _diffusive_stationary(population, mu: float, sigma: float, isi_t, method: str) -> SteadyState:
    nrn = population.neuron
    sw = diffusive_sweep(population, mu, sigma)
    rate = sw.rate
    if method == "siegert":
        rate = float(siegert_rate(mu, sigma, nrn.tau_m, nrn.threshold, nrn.reset, nrn.refractory, nrn.rest)) * 1000.0
    mean_isi = sw.t1 + nrn.refractory
    var = sw.t2 - sw.t1 * sw.t1
    if method == "inverse-gaussian":
        # closed forms (Gerstein & Mandelbrot 1964): mean d/v, variance 2 D d / v^3
        v_ms, dd = mu / nrn.tau_m, sigma * sigma / (2.0 * nrn.tau_m)
        dist = nrn.boundary - nrn.reset
        rate = float(pif_rate_slope(nrn, np.array(mu))[0])
        mean_isi, var = nrn.refractory + dist / v_ms, 2.0 * dd * dist / v_ms ** 3
    cv = math.sqrt(max(var, 0.0)) / mean_isi

    std = math.sqrt(max(var, 0.0))
    if isi_t is None:
        # past the mean by many standard deviations: S < ~1e-6 for Poisson-like tails (cv ~ 1)
        isi_t = _default_isi_grid(nrn.refractory + sw.t1 + 14.0 * std)
    else:
        isi_t = v.finite_array("isi_t", isi_t)
        if np.any(isi_t < 0.0):
            raise ValueError("`isi_t` must be >= 0 (ms)")
    dens, surv, residual = passage_time_density(population, mu, sigma, isi_t - nrn.refractory, sw.t1, std)
    return SteadyState(
        population=population, mu=mu, sigma=sigma, rate=rate, cv=cv, mean_isi=1000.0 / rate,
        mean_u=sw.mean_u, refractory_fraction=float(rate * 1e-3 * nrn.refractory),
        isi_t=isi_t, isi_density=dens, survivor=surv, method=method,
        u=sw.u, density=sw.density, flux=sw.flux,
        diagnostics={"cells": int(sw.u.size - 1), "threshold_integration_rate_hz": sw.rate,
                     "rate_error_hz": 0.0 if method in ("siegert", "inverse-gaussian") else sw.rate_error,
                     "mean_passage_ms": sw.t1, "isi_spectrum_residual": residual},
    )


def _conductance_stationary(population, mu: float, isi_t, method: str) -> SteadyState:
    """Stationary state of conductance input (:func:`popdens.theory._conductance.conductance_stationary`)."""
    if method not in ("auto", "filtered"):
        raise ValueError(f"`method` must be 'auto' or 'filtered' for `stationary` with conductance input, "
                         f"got {method!r}")
    nrn = population.neuron
    st = conductance_stationary(population, mu)
    m1, rate = st["m1"], st["rate"]
    var = st["m2"] - m1 * m1
    std = math.sqrt(max(var, 0.0))
    if isi_t is None:
        isi_t = _default_isi_grid(m1 + 14.0 * std)
    else:
        isi_t = v.finite_array("isi_t", isi_t)
        if np.any(isi_t < 0.0):
            raise ValueError("`isi_t` must be >= 0 (ms)")
    dens, surv, residual = density_from_transform(st["transform"], isi_t - nrn.refractory, m1 - nrn.refractory, std)
    u, density = st["u"], st["density"]
    mean_u = float(np.sum(0.5 * (u[1:] * density[1:] + u[:-1] * density[:-1]) * np.diff(u))) \
        + rate * 1e-3 * nrn.refractory * nrn.reset
    return SteadyState(
        population=population, mu=mu, sigma=None, rate=rate, cv=std / m1, mean_isi=m1, mean_u=mean_u,
        refractory_fraction=float(rate * 1e-3 * nrn.refractory), isi_t=isi_t, isi_density=dens, survivor=surv,
        method="filtered", u=u, density=density, flux=st["flux"],
        diagnostics={"nodes": st["nodes"], "rate_error_hz": st["rate_error_hz"], "isi_spectrum_residual": residual},
    )


def _shot_stationary(population, mu: float, isi_t, method: str) -> SteadyState:
    """Stationary state of shot noise: the rate as :func:`gain`, the ISI moments, density and the
    potential density from the jump-density operator (:mod:`popdens.theory._stationary_shot`)."""
    if method == "diffusion":
        raise ValueError("`method` 'diffusion' is not available for `stationary` with shot noise; call "
                         "`stationary` on the diffusion approximation's white-noise population instead")
    nrn = population.neuron
    rate = float(shot_rates(population, np.array([mu]), method, _white_rates)[0])
    t1, t2 = shot_passage_moments(population, mu)
    if not rate > 0.0:
        raise ValueError(f"the population is silent at `mu` = {mu:g} mV: no ISI statistics")
    mean_isi = 1000.0 / rate
    std = math.sqrt(max(t2 - t1 * t1, 0.0))
    if isi_t is None:
        isi_t = _default_isi_grid(nrn.refractory + t1 + 14.0 * std)
    else:
        isi_t = v.finite_array("isi_t", isi_t)
        if np.any(isi_t < 0.0):
            raise ValueError("`isi_t` must be >= 0 (ms)")
    after = np.maximum(isi_t - nrn.refractory, 0.0)
    dens, surv = shot_passage_density(population, mu, after)
    before = isi_t < nrn.refractory
    dens[before], surv[before] = 0.0, 1.0
    u, density = shot_potential_density(population, mu)
    refr = rate * 1e-3 * nrn.refractory
    mean_u = float(np.sum(u * density) * (u[1] - u[0])) + refr * nrn.reset
    used = "exponential-psp" if (method in ("auto", "exponential-psp") and nrn.code == CODE_LIF
                                 and exact_rate_applies(nrn, population.noise, mu)) else "jump-density"
    return SteadyState(
        population=population, mu=mu, sigma=None, rate=rate, cv=std / mean_isi, mean_isi=mean_isi, mean_u=mean_u,
        refractory_fraction=float(refr), isi_t=isi_t, isi_density=dens, survivor=surv, method=used,
        u=u, density=density, flux=None,
        diagnostics={"cells": int(u.size), "operator_mean_isi_ms": nrn.refractory + t1,
                     "passage_second_moment_ms2": t2},
    )


def stationary(population, mu, *, sigma=None, isi_t=None, method="auto") -> SteadyState:
    """Stationary state at the constant drive ``mu`` (mV).

    Parameters
    ----------
    population : Population
        The neurons and their noise model.
    mu : float
        Drive (mV).
    sigma : float, optional
        White-noise amplitude override (mV).
    isi_t : array_like, optional
        Times (ms) at which to report the ISI density and survivor function;
        default 2001 points up to where the survivor function falls to
        ``ISI_GRID_SURVIVOR`` (escape) or well past the mean ISI (white noise).
    method : str
        As in :func:`gain` (conductance input: ``"auto"`` or ``"filtered"``,
        the renewal problem of the effective equation; coloured noise with
        ``"plane"``, the default where :func:`gain` takes it: rate, ISI
        CV, potential density, flux and mean potential from the (potential,
        current) plane, the ISI density from the effective renewal problem,
        named in ``diagnostics["isi_density_from"]``; between ``tau_syn =
        0.1`` and ``0.15 tau_m`` (hard thresholds) rate and CV blended with
        the boundary shift's, ``diagnostics["plane_weight"]``; shot noise: the
        rate's method, ``"diffusion"`` excepted, with the ISI statistics and
        densities from the jump-density operator).

    Returns
    -------
    SteadyState
        Rate (Hz), CV, ISI density (1/ms) and survivor on ``isi_t``, the
        stationary potential density (white noise) or age density (escape
        noise), mean potential (mV).
    """
    _check_population(population)
    if _shot(population, sigma):
        return _shot_stationary(population, v.as_finite_float("mu", mu), isi_t, method)
    if _conductance(population, sigma):
        return _conductance_stationary(population, v.as_finite_float("mu", mu), isi_t, method)
    share = _plane_share(population, method)
    if share > 0.0:
        return _plane_stationary(population, v.as_finite_float("mu", mu), sigma, isi_t, share)
    original = population
    population, sigma = _as_white(population, sigma)
    sg = _constant_sigma(population, sigma)
    mu = v.as_finite_float("mu", mu)
    m = _resolve_method(population, method)
    if population.neuron.adapting:
        return _adapted_stationary(population, mu, sg, isi_t, m)
    if sg is None:
        return _escape_stationary(population, mu, isi_t)
    out = _diffusive_stationary(population, mu, sg, isi_t, m)
    if population is original:
        return out
    shift = float(population.neuron.reset - original.neuron.reset)
    return replace(out, population=original, method=f"{m} (boundary shift)",
                   diagnostics={**out.diagnostics, "boundary_shift_mV": shift})


def _plane_stationary(population, mu: float, sigma, isi_t, share: float = 1.0) -> SteadyState:
    """Coloured noise on the (potential, current) plane: rate and ISI CV (exact for the stationary
    sequence of ISIs; extrapolated over two or three grids, scaled below the floor as in
    :func:`._filtered_plane.below_floor`), and at ``tau_syn >= PLANE_FLOOR_RATIO tau_m`` the marginal
    potential density, flux and mean potential of the fine grid; the ISI density is that of the
    effective renewal problem (the white-noise population with the boundary shift; the current's memory
    across spikes ignored), named in ``diagnostics["isi_density_from"]``.  With ``share < 1`` (hard
    thresholds between ``SHIFT_UNTIL_RATIO`` and ``PLANE_FROM_RATIO``) rate and CV are blended with
    the boundary shift's (:func:`._filtered_plane.plane_weight`)."""
    nrn, noise = population.neuron, population.noise
    sg = _plane_sigma(population, sigma)
    tau_syn = float(noise.tau_syn)
    floor = PLANE_FLOOR_RATIO * nrn.tau_m

    def effective(tau):
        return white_equivalent(Population(nrn, ColouredNoise(sg, tau)), sg)

    renewal = stationary(effective(tau_syn), mu, isi_t=isi_t)
    shift = float(renewal.population.neuron.reset - nrn.reset)
    if renewal.rate < PLANE_MIN_RATE_HZ:  # firing too rare to solve on the plane (see _filtered_plane)
        return replace(renewal, population=population, method=f"{renewal.method} (boundary shift; rate below "
                       f"{PLANE_MIN_RATE_HZ:g} Hz, not solved on the plane)",
                       diagnostics={**renewal.diagnostics, "boundary_shift_mV": shift})
    grids = plane_states(nrn, mu, sg, max(tau_syn, floor))
    fine = grids[-1]
    rate = float(below_floor(nrn, tau_syn, extrapolated_levels([g.rate for g in grids]),
                             lambda t: float(gain(effective(t), mu))))
    cv = float(below_floor(nrn, tau_syn, extrapolated_levels([g.cv for g in grids]),
                           lambda t: cv_diffusive(effective(t), mu, sg)))
    if share < 1.0:
        rate, cv = float(_blend(renewal.rate, rate, share)), float(_blend(renewal.cv, cv, share))
    used = "plane" if share == 1.0 else f"plane blended with the boundary shift (plane weight {share:.3g})"
    out = replace(renewal, population=population, rate=rate, cv=cv, mean_isi=1000.0 / rate,
                  refractory_fraction=rate * 1e-3 * nrn.refractory, method=used,
                  diagnostics={**renewal.diagnostics, "boundary_shift_mV": shift, "plane_weight": share,
                               "isi_density_from": f"effective renewal problem ({renewal.method}, boundary shift "
                                                   f"{shift:.4g} mV)"})
    if tau_syn < floor:
        return out
    st = fine
    h = np.diff(st.faces)
    vel = ((np.asarray(nrn.drift(st.faces), dtype=float) + mu)[:, None] + st.current_sd * st.z[None, :]) / nrn.tau_m
    below = np.vstack([np.zeros((1, st.z.size)), st.mass])  # the cell under each face (none under the lowest)
    above = np.vstack([st.mass, np.zeros((1, st.z.size))])
    hz = np.concatenate([h[:1], h])
    flux = (np.maximum(vel, 0.0) * below / hz[:, None] - np.maximum(-vel, 0.0) * above / hz[:, None]).sum(axis=1)
    flux = 0.5 * (flux[1:] + flux[:-1]) * 1000.0  # Hz, at the cell centres
    mean_u = float(st.u @ st.mass.sum(axis=1)) + (1.0 - float(st.mass.sum())) * nrn.reset
    return replace(out, u=st.u, density=st.density, flux=flux, mean_u=mean_u,
                   diagnostics={**out.diagnostics, "plane_cells": st.mass.shape, "plane_rate_fine_grid_hz": st.rate})


def _adapted_isi(population, mu: float, z0: np.ndarray, isi_t: np.ndarray):
    """Survivor and ISI density (1/ms) on ``isi_t`` of the trajectory leaving a spike with adaptation ``z0``.

    The same ODE as :mod:`popdens.theory._adapted`'s compiled integrator, evaluated with scipy's
    LSODA (rtol 1e-10) for dense output.
    """
    from scipy.integrate import solve_ivp

    nrn, hz = population.neuron, population.noise.hazard
    comps = nrn.adaptation
    current = np.array([a.kind == 0 for a in comps])
    taus = np.array([a.tau for a in comps])
    coup = np.array([a.coupling_value for a in comps])
    target = np.where(current, coup * (nrn.reset - nrn.rest), 0.0)
    z_ref = target + (z0 - target) * np.exp(-nrn.refractory / taus)

    def state(y):
        u, z = y[0], y[1:-1]
        du = (float(nrn.drift(u)) + mu - float(np.sum(z[current]))) / nrn.tau_m
        return u, z, du, float(hz.rate(u, nrn.threshold + float(np.sum(z[~current])), du)) * 1e-3

    def rhs(_, y):
        u, z, du, h = state(y)
        return [du, *(np.where(current, coup * (u - nrn.rest), 0.0) - z) / taus, h]

    def cutoff(_, y):
        return y[0] - nrn.boundary
    cutoff.terminal = True

    t_end = float(np.max(isi_t)) - nrn.refractory
    surv = np.ones(isi_t.shape)
    dens = np.zeros(isi_t.shape)
    if t_end > 0.0:
        sol = solve_ivp(rhs, (0.0, t_end), [nrn.reset, *z_ref, 0.0], method="LSODA", rtol=1e-10, atol=1e-12,
                        dense_output=True, events=cutoff if nrn.has_cutoff else None)
        free = isi_t >= nrn.refractory
        a = isi_t[free] - nrn.refractory
        inside = a <= sol.t[-1]
        ys = sol.sol(np.minimum(a, sol.t[-1]))
        h = np.array([state(ys[:, i])[3] for i in range(a.size)])
        s_free = np.where(inside, np.exp(-ys[-1]), 0.0)
        surv[free] = s_free
        dens[free] = np.where(inside, h * s_free, 0.0)
    return surv, dens


def _adapted_stationary(population, mu: float, sg, isi_t, method: str) -> SteadyState:
    import dataclasses

    st = _adapted_state(population, mu, sg, method)
    if sg is not None:
        out = _diffusive_stationary(_renewal_population(population), st.effective_drive, sg, isi_t, method)
        return dataclasses.replace(
            out, population=population, mu=mu, method=f"mean-adaptation ({method})",
            diagnostics={**out.diagnostics, "mean_adaptation_mV": [float(x) for x in st.post_spike],
                         "effective_drive_mV": st.effective_drive,
                         "cv": "of the renewal neuron at the adapted drive (mean-adaptation approximation)"})
    nrn = population.neuron
    if st.rate == 0.0:
        raise ValueError(f"at `mu` = {mu!r} mV the neurons stop firing: the rate is 0 and there is no "
                         "stationary ISI distribution")
    if isi_t is None:
        # Poisson-like tails: the survivor falls below ~1e-6 within 15 mean intervals
        isi_t = _default_isi_grid(15.0 * st.m0)
    else:
        isi_t = v.finite_array("isi_t", isi_t)
        if np.any(isi_t < 0.0):
            raise ValueError("`isi_t` must be >= 0 (ms)")
    surv, dens = _adapted_isi(population, mu, st.post_spike, isi_t)
    var = 2.0 * st.m1 - st.m0 * st.m0
    rate_ms = 1.0 / st.m0
    cv = math.sqrt(max(var, 0.0)) / st.m0
    diagnostics = {"post_spike_adaptation_mV": [float(x) for x in st.post_spike],
                   "cv": "of the closure's renewal process: neglects the spread of the adaptation carried "
                         "into a spike and the serial correlations it causes"}
    chain = None
    if len(nrn.adaptation) == 1 and nrn.adaptation[0].coupling_value == 0.0:
        chain = isi_chain(population, mu, z_start=float(st.post_spike[0]))
        cv = chain.cv
        diagnostics.update({"cv": "exact: from the Markov chain of the post-spike adaptation",
                            "closure_renewal_cv": math.sqrt(max(var, 0.0)) / st.m0,
                            "markov_rate_hz": chain.rate})
    return SteadyState(
        population=population, mu=mu, sigma=None, rate=st.rate, cv=cv,
        mean_isi=st.m0, mean_u=st.mean_u, refractory_fraction=float(rate_ms * nrn.refractory),
        isi_t=isi_t, isi_density=dens, survivor=surv, method="renewal (spike-weighted adaptation)",
        age=isi_t, age_density=rate_ms * surv,
        serial_correlation=None if chain is None else chain.serial_correlation, diagnostics=diagnostics)


def _rate_ceiling_hz(population) -> float:
    tau_ref = population.neuron.refractory
    return math.inf if tau_ref == 0.0 else 1000.0 / tau_ref


def drive_for_rate(population, rate, *, sigma=None, bracket=None) -> float | np.ndarray:
    """Drive (mV) at which the stationary rate equals ``rate`` (Hz).

    The gain function increases with the drive, so the root is bracketed by
    expanding an interval around the drive that puts the drift's fixed point
    at threshold, then refined with Brent's method on ``log(rate)``.

    Parameters
    ----------
    population : Population
        The neurons and their noise model.
    rate : float or array_like
        Target rates (Hz), > 0 and below the ceiling ``1000/refractory``.
    sigma : float, optional
        White-noise amplitude override (mV).
    bracket : (float, float), optional
        Drives (mV) known to bracket the answer.

    Returns
    -------
    float or ndarray
        Drive(s) in mV.

    Raises
    ------
    UnreachableTargetError
        The target rate is not reached by any drive (e.g. above the
        refractory ceiling, or above the saturation of the escape function).
    """
    _check_population(population)
    _constant_sigma(population, sigma)
    targets = np.asarray(rate, dtype=float)
    out = np.array([_one_drive(population, float(t), sigma, bracket) for t in targets.ravel()])
    return float(out[0]) if targets.ndim == 0 else out.reshape(targets.shape)


def _one_drive(population, target, sigma, bracket) -> float:
    if not (math.isfinite(target) and target > 0.0):
        raise UnreachableTargetError(f"`rate` must be a finite rate > 0 Hz, got {target!r}")
    ceiling = _rate_ceiling_hz(population)
    if target >= ceiling:
        raise UnreachableTargetError(
            f"`rate` = {target!r} Hz is not reachable: the refractory period "
            f"{population.neuron.refractory!r} ms caps the rate below {ceiling:g} Hz")
    log_t = math.log(target)

    def f(m):
        r = float(gain(population, m, sigma=sigma))
        return math.log(max(r, 1e-300)) - log_t

    if bracket is not None:
        lo, hi = (v.as_finite_float("bracket", b) for b in bracket)
        if not (f(lo) < 0.0 < f(hi)):
            raise UnreachableTargetError(f"`bracket` = {bracket!r} mV does not bracket the rate {target!r} Hz")
    else:
        nrn = population.neuron
        centre = -float(nrn.drift(nrn.threshold))
        width = max(1.0, abs(nrn.boundary - nrn.reset))
        lo, hi = centre - width, centre + width
        while f(lo) > 0.0:
            lo = centre - 2.0 * (centre - lo)
            if abs(lo) > MAX_DRIVE_MV:
                raise UnreachableTargetError(
                    f"`rate` = {target!r} Hz is below the rate at every drive down to {lo:g} mV")
        while f(hi) < 0.0:
            hi = centre + 2.0 * (hi - centre)
            if abs(hi) > MAX_DRIVE_MV:
                reached = float(gain(population, hi, sigma=sigma))
                raise UnreachableTargetError(
                    f"`rate` = {target!r} Hz is not reachable: the rate is still {reached:.6g} Hz at "
                    f"`mu` = {hi:g} mV (saturation of the escape function or of the drift)")
    return float(brentq(f, lo, hi, xtol=1e-12, rtol=1e-13, maxiter=200))



def drive_and_noise_for(population, rate, cv, *, sigma_range=None, n_scan=24) -> tuple[float, float]:
    """The (mu, sigma) pair (mV, mV) giving stationary ``rate`` (Hz) and ISI ``cv``, white noise.

    Along the curve of constant rate the CV is scanned over ``n_scan``
    log-spaced noise amplitudes in ``sigma_range``; the first crossing of the
    target is refined with Brent's method (the drive solved by
    :func:`drive_for_rate` at every trial amplitude).

    Parameters
    ----------
    population : Population
        White-noise population (its own sigma is ignored).
    rate : float
        Target rate (Hz).
    cv : float
        Target coefficient of variation, > 0.
    sigma_range : (float, float), optional
        Noise amplitudes (mV) searched; default ``(1e-3, 10)`` times
        ``boundary - reset``.
    n_scan : int
        Number of scan points.

    Raises
    ------
    UnreachableTargetError
        No amplitude in the range gives the target CV at this rate (the
        message gives the CV range found).
    """
    _check_population(population)
    if not isinstance(population.noise, (WhiteNoise, ColouredNoise)):
        raise ValueError("`drive_and_noise_for` needs a white- or coloured-noise population")
    cv = v.positive("cv", cv)
    rate = v.positive("rate", rate)
    nrn = population.neuron
    span = float(nrn.boundary - nrn.reset)
    lo, hi = (1e-3 * span, 10.0 * span) if sigma_range is None else (v.positive("sigma_range", s) for s in sigma_range)
    n_scan = v.positive_int("n_scan", n_scan)

    def cv_at(s):
        m = drive_for_rate(population, rate, sigma=s)
        pop = white_equivalent(population, s)  # coloured noise: the shifted white-noise population
        if nrn.adapting:  # mean adaptation: the renewal neuron at the adapted drive
            st = _adapted_state(pop, m, s, _resolve_method(pop, "auto"))
            return cv_diffusive(_renewal_population(pop), st.effective_drive, s), m
        return cv_diffusive(pop, m, s), m

    sigmas = np.geomspace(lo, hi, max(n_scan, 2))
    vals = []
    for s in sigmas:
        vals.append(cv_at(float(s))[0] - cv)
        if len(vals) >= 2 and vals[-2] * vals[-1] <= 0.0:
            s_root = brentq(lambda s: cv_at(s)[0] - cv, float(sigmas[len(vals) - 2]), float(s), xtol=1e-12, rtol=1e-10)
            return cv_at(s_root)[1], float(s_root)
    found = np.asarray(vals) + cv
    raise UnreachableTargetError(
        f"`cv` = {cv!r} is not reachable at `rate` = {rate!r} Hz for sigma in [{lo:g}, {hi:g}] mV: "
        f"the CV ranges over [{found.min():.4g}, {found.max():.4g}] there")
