"""Linear response of a population in its stationary state.

A weak modulation ``eps * exp(2 pi i f t)`` of the input around the
stationary drive ``mu`` modulates the population rate by ``eps * chi(f) *
exp(2 pi i f t)``; ``chi`` is the transfer function (susceptibility).  This
module computes it and what follows from it:

* :func:`transfer` -- ``chi(f)`` in Hz/mV (mean drive) or Hz/mV^2 (noise
  intensity ``sigma**2``), at real or complex frequencies;
* :func:`response_kernel` -- the impulse response ``kappa(t)`` (Hz per mV ms),
  the inverse Fourier transform of ``chi``;
* :func:`linear_rate_response` -- the rate predicted for any weak drive,
  ``r(t) = r0 + int kappa(t') [mu(t - t') - mu] dt'``, to compare with
  :func:`popdens.simulate`.

Methods
-------
* escape noise: the linearised renewal equation (Gerstner 2000, Neural
  Comput. 12:43), compiled over frequencies, with closed-form tails
  (:mod:`popdens.theory._renewal_response`);
* white noise, any drift: threshold integration at complex frequency
  (Richardson 2007, Phys. Rev. E 76:021919) with Richardson extrapolation in
  the grid step (:mod:`popdens.theory._modulated_threshold`);
* white-noise LIF, optionally: the closed form with parabolic-cylinder
  functions (Brunel & Hakim 1999; Lindner & Schimansky-Geier 2001), needs
  mpmath (:mod:`popdens.theory._lif_exact`).
* coloured noise (:class:`~popdens.ColouredNoise`): the white-noise methods
  applied with threshold and reset moved by ``sigma alpha/2 sqrt(tau_syn/tau_m)``
  (the effective-boundary transfer function, Schuecker, Diesmann & Helias
  2015, Phys. Rev. E 92:052119), first order in ``sqrt(tau_syn/tau_m)`` and
  valid while ``2 pi f tau_syn`` is small; for noise modulation the boundary
  moves with ``sigma``, which for a linear drift is a mean modulation
  ``(F'(theta) - i omega tau_m) d(shift)`` (change of variable ``u -> u - shift(t)``;
  for nonlinear drifts ``F'`` is taken at the threshold, an approximation).
  At high frequencies the true response tends to a finite, lag-free limit
  (Fourcaud & Brunel 2002): :func:`high_frequency_limit`.  Models with a
  spike cut-off (EIF, QIF) are not shifted (white-noise response);
  ``method="plane"`` linearises the stationary (potential, current) density
  instead (mean modulation, :mod:`popdens.theory._filtered_plane`), the
  default for the mean drive of hard thresholds (LIF, PIF) beyond
  ``tau_syn = 0.1 tau_m`` (blended with the shift up to ``0.15 tau_m``, as
  :func:`popdens.gain` is).  Noise modulation, the time-domain kernels
  (:func:`response_kernel`, :func:`linear_rate_response`: thousands of
  frequencies) and network stability keep the effective boundary shift.

Complex frequencies
-------------------
``freqs`` may be complex.  The modulation ``exp(2 pi i f t)`` is then
``exp(lambda t)`` with the Laplace variable ``lambda = 2 pi i f`` (1/s, t in
s): ``f = lambda / (2 pi i)``, the growth rate is ``Re lambda = -2 pi Im f``
(1/s) and the angular frequency ``Im lambda = 2 pi Re f``.  :func:`laplace_to_freq`
converts.  Results for ``Re lambda < 0`` are analytic continuations and are
valid while the stationary ISI density decays faster than ``exp(Re lambda t)``.
"""

from __future__ import annotations

import math

import numpy as np

from .. import _validation as v
from ._adapted import escape_adapted
from ._modulated_threshold import NODES_PER_SIGMA, Sweep
from ._scales import length_scale
from ._renewal_response import _laplace_uniform, _renewal_sweep, adapted_trajectory, free_trajectory
from ..model.neurons import CODE_LIF
from ..model.drive import as_drive
from ..model.effective import white_equivalent
from ..model.hazard import CODE_LINEAR
from ..model.noise import EscapeNoise, Population, WhiteNoise
from ..model.synaptic import ColouredNoise
from ..model.shot import ShotNoise
from ..model.conductance import ConductanceNoise
from ..progress import Progress

__all__ = ["transfer", "response_kernel", "linear_rate_response", "laplace_to_freq", "stationary_rate",
           "high_frequency_limit"]

#: Age step (ms) of the renewal quadrature grid, at most (measured: second order, 6e-6 relative
#: at 1 kHz for tau_m = 10 ms); refined for fast membranes.
AGE_STEP_MS = 0.02
#: Ages per membrane time constant, at least.
AGES_PER_TAU = 250
#: The age grid ends where the survivor function falls below this ...
SURVIVOR_FLOOR = 1e-13
#: ... or where the free trajectory has converged to within this (mV); beyond, closed-form tails.
CONVERGED_MV = 1e-10
#: Longest age grid considered (ms) before giving up on a vanishing rate.
MAX_AGE_MS = 1e5
#: Default relative tolerance of `transfer` (estimated error per frequency).
TRANSFER_RTOL = 1e-4
#: Errors are relative to |chi|, but at least to this fraction of the largest |chi| (near zeros).
ERROR_FLOOR = 1e-3
#: Most halvings of the age step (escape noise) or of the grid step (white noise).
MAX_AGE_REFINEMENTS = 5
MAX_GRID_REFINEMENTS = 3
#: White-noise EIF/QIF: the first grid resolves min(sigma, EIF_SCALES x their length scale) like sigma
#: (measured for slope factor 0.5 mV, sigma 10 mV: 4.3e-4 at 1 kHz on the sigma grid, 1.3e-6 four times finer).
EIF_SCALES = 5.0
#: One-sided offset (mV, relative to max(1, |u|)) for the slope of the escape function at a node.
KINK_EPS_MV = 1e-9
#: Frequencies per compiled call (progress is reported between blocks).
FREQ_BLOCK = 256
#: Methods accepted by :func:`transfer`.
METHODS = ("renewal", "threshold-integration", "closed-form")
#: Age step (ms) and ages per tau_m, at most, of the grid of adapting neurons (second order: the
#: renewal grid's 6e-6 at 1 kHz becomes ~4e-5), and the survivor level where it ends.
ADAPTED_AGE_STEP_MS = 0.05
ADAPTED_AGES_PER_TAU = 100
ADAPTED_SURVIVOR_FLOOR = 1e-10
#: Step (mV, relative to 1 + |z|) of the central differences in the post-spike adaptation.
STATE_STEP_MV = 1e-3
#: Modulated inputs accepted by :func:`transfer` and their units.
MODULATIONS = {"mean": "Hz/mV", "noise": "Hz/mV^2", "sigma": "Hz/mV"}


def laplace_to_freq(lam):
    """Frequency (Hz, complex) of the Laplace variable ``lam`` (1/s): ``f = lam / (2 pi i)``."""
    return np.asarray(lam, dtype=complex) / (2j * math.pi)


# ---------------------------------------------------------------------------- escape noise
def _kink_age(population, mu: float) -> float | None:
    """Age (ms) at which the free trajectory crosses the threshold, for escape functions with a
    kink there (``Linear``: its slope jumps), else None."""
    nrn, hz = population.neuron, population.noise.hazard
    if hz.code != CODE_LINEAR:
        return None
    theta, tref = float(nrn.threshold), float(nrn.refractory)
    if not nrn.reset < theta:
        return None
    if nrn.code == 0:  # LIF: closed form
        target = nrn.rest + mu
        return tref + nrn.tau_m * math.log((target - nrn.reset) / (target - theta)) if target > theta else None
    ages = tref + np.linspace(0.0, 20.0 * nrn.tau_m, 2001)
    above = np.nonzero(free_trajectory(nrn, mu, ages) >= theta)[0]
    if not above.size or above[0] == 0:
        return None
    lo, hi = float(ages[above[0] - 1]), float(ages[above[0]])
    for _ in range(60):  # bisection on the free trajectory
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if free_trajectory(nrn, mu, np.array([mid]))[0] < theta else (lo, mid)
    return 0.5 * (lo + hi)


def _aligned_step(da: float, tref: float, kink: float | None) -> float:
    """The largest age step <= ``da`` that puts a grid node on ``kink`` (the grid starts at ``tref``)."""
    if kink is None or kink <= tref:
        return da
    return (kink - tref) / math.ceil((kink - tref) / da - 1e-9)


class _AgeGrid:
    """Stationary renewal quantities of an escape-noise population on a uniform age grid of step ``da``."""

    def __init__(self, population, mu: float, prefer_tail: bool = False, da: float | None = None, z0=None):
        """``z0``: adaptation (mV, one per component) with which neurons leave a spike, for adapting neurons."""
        nrn, hz = population.neuron, population.noise.hazard
        self.floor = SURVIVOR_FLOOR
        if z0 is not None:  # adaptation stretches the trajectory's convergence over tau_adapt: a coarser grid
            self.floor = ADAPTED_SURVIVOR_FLOOR
            if da is None:
                da = min(ADAPTED_AGE_STEP_MS, nrn.tau_m / ADAPTED_AGES_PER_TAU)
        if da is None:
            da = _aligned_step(min(AGE_STEP_MS, nrn.tau_m / AGES_PER_TAU), nrn.refractory, _kink_age(population, mu))
        a_max = nrn.refractory + 20.0 * nrn.tau_m
        tref = float(nrn.refractory)
        while True:
            # ages start at the end of the refractory period: before it the hazard and the
            # membrane response vanish and S0 = 1, so the integrals there are exact
            ages = tref + np.arange(0.0, a_max - tref + 0.5 * da, da)
            if z0 is None:
                u0, shift = free_trajectory(nrn, mu, ages), np.zeros(ages.shape)
            else:
                u0, shift, _ = adapted_trajectory(nrn, mu, ages, z0)
            if nrn.has_cutoff and np.any(u0 >= nrn.boundary):
                raise ValueError(
                    f"at `mu` = {mu!r} mV the free trajectory reaches the cut-off; the linear response of "
                    "deterministic crossings is not supported by the escape-noise transfer function")
            h0 = np.asarray(hz.rate(u0, nrn.threshold + shift), dtype=float) * 1e-3  # 1/ms
            cum = np.concatenate([[0.0], np.cumsum(0.5 * (h0[1:] + h0[:-1]) * da)])
            surv = np.exp(-cum)
            below = np.nonzero(surv < self.floor)[0]
            end = int(below[0]) if below.size else None
            tail = False
            slope_inf = float(nrn.drift_slope(float(u0[-1]))) / nrn.tau_m
            if prefer_tail and slope_inf < 0 and a_max <= MAX_AGE_MS:
                end = None  # decaying modes: carry the grid on to the closed-form tail
            off = np.abs(u0 - u0[-1]) + np.abs(shift - shift[-1])
            if z0 is not None:
                # adaptation converges over its own (long) time constant: what is left of it matters only
                # in proportion to the neurons still there to feel it
                off = off * surv
            off = off >= CONVERGED_MV
            n_tau = int(math.ceil(nrn.tau_m / da))
            if slope_inf < 0 and ages.size > n_tau and not np.any(off[-n_tau:]) and h0[-1] > 0:
                conv = max(int(np.nonzero(off)[0][-1]) + 1 if np.any(off) else 0, 2)
                if end is None or conv < end:
                    end, tail = conv, True
            if end is not None:
                break
            if a_max > MAX_AGE_MS:
                raise ValueError(f"the stationary rate at `mu` = {mu!r} mV is too low for a transfer function")
            a_max *= 2.0
        n = end + 1
        self.da, self.ages, self.u0, self.h0, self.surv = da, ages[:n], u0[:n], h0[:n], surv[:n]
        self.tail = tail
        self.tail_slope = slope_inf
        # the slope as the mean of its one-sided values, so that a jump of it on a node (Linear escape at
        # threshold) enters the trapezoidal rule with its midpoint value
        eps = KINK_EPS_MV * np.maximum(1.0, np.abs(self.u0))
        thr = nrn.threshold + shift[:n]
        self.hu = 0.5 * (np.asarray(hz.slope(self.u0 + eps, thr), dtype=float)
                         + np.asarray(hz.slope(self.u0 - eps, thr), dtype=float)) * 1e-3  # 1/(ms mV)
        self.gslope = np.asarray(nrn.drift_slope(0.5 * (self.u0[1:] + self.u0[:-1])), dtype=float) / nrn.tau_m
        self.e_slope = np.exp(self.gslope * da)
        w = np.full(n, da)
        w[0] = w[-1] = 0.5 * da
        self.weights = w
        sc, hc = self.surv[-1], self.h0[-1]
        # moments of the discrete ISI density P0 = h0 S0 (tails in closed form)
        p0 = self.h0 * self.surv
        self.mean_isi = float(np.sum(w * self.ages * p0)) + (sc * (self.ages[-1] + 1.0 / hc) if tail else 0.0)
        a_c = self.ages[-1]
        self.isi_second = float(np.sum(w * self.ages ** 2 * p0)) + (
            sc * (a_c ** 2 + 2.0 * a_c / hc + 2.0 / hc ** 2) if tail else 0.0)
        self.survivor_integral = tref + float(np.sum(w * self.surv)) + (sc / hc if tail else 0.0)
        self.tref = tref

    def sweep(self, s, tau_m, weight=None):
        """``(Q, P_hat)`` at the Laplace variables ``s`` (1/ms); with ``weight`` (an array on the ages)
        both integrands are multiplied by it (the tails by its last value)."""
        s = np.ascontiguousarray(np.asarray(s, dtype=complex).ravel())
        if s.size and self.tail:
            hc = self.h0[-1]
            if np.any(s.real <= -hc) or np.any(s.real <= self.tail_slope - hc):
                raise ValueError("complex `freqs` decay faster than the stationary ISI density: "
                                 f"need growth rate Re(lambda) > {-1000.0 * hc:.6g} 1/s")
        elif s.size and np.any(self.floor * np.exp(-s.real * self.ages[-1]) > 1e-10 * (self.floor / SURVIVOR_FLOOR)):
            raise ValueError("complex `freqs` decay faster than the stationary ISI density: need growth rate "
                             f"Re(lambda) > {1000.0 * math.log(SURVIVOR_FLOOR / 1e-10) / self.ages[-1]:.6g} 1/s")
        out = np.empty((s.size, 2), dtype=complex)
        surv = self.surv if weight is None else np.ascontiguousarray(self.surv * weight)
        _renewal_sweep(s, self.tref, self.da, float(tau_m), self.hu, self.h0, surv, self.gslope,
                       self.e_slope, self.tail, self.tail_slope, out)
        return out[:, 0], out[:, 1]

    def laplace(self, f, f_tail, s):
        """``int f(a) exp(-s a) da`` on the ages (trapezoid) plus ``f_tail exp(-h_c (a - a_c))`` beyond them."""
        fs = np.ascontiguousarray(np.atleast_2d(self.weights * f))
        out = np.empty((s.size, fs.shape[0]), dtype=complex)
        _laplace_uniform(np.ascontiguousarray(s, dtype=complex), self.ages[0], self.da, fs, out)
        if self.tail:
            hc = self.h0[-1]
            out += np.atleast_1d(f_tail)[None, :] * (np.exp(-s * self.ages[-1]) / (hc + s))[:, None]
        return out[:, 0] if np.ndim(f) == 1 else out

    def density(self, population, mu, z0):
        """ISI density ``h S`` (1/ms) on the ages for the adaptation ``z0`` (mV) left by a spike, and the
        adaptation components along the way (shape ``(K, n)``)."""
        nrn, hz = population.neuron, population.noise.hazard
        u, shift, z = adapted_trajectory(nrn, mu, self.ages, z0)
        h = np.asarray(hz.rate(u, nrn.threshold + shift), dtype=float) * 1e-3
        surv = np.exp(-np.concatenate([[0.0], np.cumsum(0.5 * (h[1:] + h[:-1]) * self.da)]))
        return h * surv, z


def _escape_transfer(population, mu, s, progress, rtol):
    """Renewal transfer function on age steps da and da/2, Richardson-extrapolated, the step halved
    until the estimated error (extrapolated minus fine) is below ``rtol`` at every frequency.

    Returns ``(chi, error)`` (Hz/mV): the extrapolated values and the estimated error bound.
    """
    nrn = population.neuron
    kink = _kink_age(population, mu)
    da = _aligned_step(min(AGE_STEP_MS, nrn.tau_m / AGES_PER_TAU), nrn.refractory, kink)
    coarse = _escape_transfer_on(population, mu, s, progress, da)
    for _ in range(MAX_AGE_REFINEMENTS):
        da *= 0.5
        fine = _escape_transfer_on(population, mu, s, progress, da)
        ext = (4.0 * fine - coarse) / 3.0  # trapezoidal rule: second order in the age step
        err = np.abs(ext - fine)
        scale = np.maximum(np.abs(ext), ERROR_FLOOR * np.max(np.abs(ext), initial=0.0))
        if np.all(err <= rtol * scale):
            break
        coarse = fine
    return ext, err


def _escape_transfer_on(population, mu, s, progress, da):
    grid = _AgeGrid(population, mu, prefer_tail=bool(np.any(s.real < 0)), da=da)
    tau_m = population.neuron.tau_m
    a0 = 1.0 / grid.mean_isi  # 1/ms
    # Exactly, Q(0) = 0 and P_hat(0) = 1; subtracting the discrete values at zero frequency keeps
    # quadrature errors from being amplified by 1/(1 - P_hat) at low frequencies.
    q0, p0 = grid.sweep(np.zeros(1), tau_m)
    out = np.empty(s.shape, dtype=complex)
    bar = Progress(s.size, "transfer", enabled=progress)
    for i0 in range(0, s.size, FREQ_BLOCK):
        q, p_hat = grid.sweep(s[i0:i0 + FREQ_BLOCK], tau_m)
        with np.errstate(divide="ignore", invalid="ignore"):
            out[i0:i0 + FREQ_BLOCK] = a0 * (q - q0[0]) / (p0[0] - p_hat) * 1000.0  # Hz/mV
        bar.update(min(i0 + FREQ_BLOCK, s.size))
    bar.close()
    zero = s == 0
    if np.any(zero):
        out[zero] = _escape_static_slope(population, mu, da)
    return out


class _AdaptedResponse:
    """Everything the adapted escape-noise transfer function needs at one drive, for any ``s``.

    Escape noise with adaptation: the linearised renewal equation of the spike-weighted closure.
    A neuron leaves a spike with the adaptation ``z = jump + x`` (:mod:`popdens.theory._adapted`), where
    ``x(t)`` is the mean adaptation of the neurons firing at ``t``: ``A x = int P(t|t') w(t|t') A(t') dt'``.
    Linearising both equations around the stationary state (input ``eps exp(s t)``, no subthreshold coupling,
    so the adaptation along a trajectory depends on ``z`` only):

    .. math:: \\delta A (1 - \\hat P) = A_0 Q\\,\\delta\\mu + A_0 Q_z \\delta x,\\qquad
              A_0 (I - R_z)\\,\\delta x = (\\hat P_w - x_0)\\,\\delta A + A_0 Q_w \\delta\\mu,

    with ``Q``, ``P_hat`` of the renewal equation along the adapted trajectory (Gerstner 2000), ``Q_w``,
    ``P_hat_w`` the same weighted with the adaptation reaching the spike, and ``Q_z``, ``R_z`` the Laplace
    transforms of the derivatives of ``P`` and ``P w`` with respect to ``z`` (central differences).  Hence
    ``chi = A_0 [Q + Q_z M Q_w] / [1 - P_hat - Q_z M (P_hat_w - x_0)]``, ``M = (I - R_z)^-1``.  The
    zero-frequency values are subtracted where they vanish exactly, as in the renewal case.
    """

    def __init__(self, population, mu: float, prefer_tail: bool):
        nrn = population.neuron
        self.population, self.mu = population, mu
        z0 = np.asarray(escape_adapted(population, mu).post_spike, dtype=float)
        self.k = z0.size
        self.grid = grid = _AgeGrid(population, mu, prefer_tail=prefer_tail, z0=z0)
        self.tau_m = nrn.tau_m
        self.a0 = 1.0 / grid.mean_isi
        _, _, self.zpath = adapted_trajectory(nrn, mu, grid.ages, z0)
        zero = np.zeros(1, dtype=complex)
        self.q0 = grid.sweep(zero, self.tau_m)[0][0]
        self.p0 = grid.sweep(zero, self.tau_m)[1][0]
        self.pw0 = np.array([grid.sweep(zero, self.tau_m, self.zpath[d])[1][0] for d in range(self.k)])
        # derivatives of P and P w with respect to the post-spike state (central differences)
        self.dp, self.dpw = [], []
        for c in range(self.k):
            eps = STATE_STEP_MV * (1.0 + abs(z0[c]))
            (pp, zp), (pm, zm) = (grid.density(population, mu, z0 + sign * eps * np.eye(self.k)[c])
                                  for sign in (1.0, -1.0))
            self.dp.append((pp - pm) / (2 * eps))
            self.dpw.append([(pp * zp[d] - pm * zm[d]) / (2 * eps) for d in range(self.k)])
        self.dq0 = np.array([grid.laplace(f, f[-1], zero)[0] for f in self.dp])

    def __call__(self, s):
        grid, k = self.grid, self.k
        q, p_hat = grid.sweep(s, self.tau_m)
        qw = [grid.sweep(s, self.tau_m, self.zpath[d]) for d in range(k)]
        funcs = np.array(self.dp + [self.dpw[c][d] for d in range(k) for c in range(k)])
        tr = grid.laplace(funcs, funcs[:, -1], s)  # (n_s, k + k*k)
        dq = tr[:, :k].T
        dr = tr[:, k:].T.reshape(k, k, s.size)
        out = np.empty(s.shape, dtype=complex)
        for i in range(s.size):
            m = np.linalg.inv(np.eye(k) - dr[:, :, i])
            qz = dq[:, i] - self.dq0
            q_w = np.array([qw[d][0][i] for d in range(k)])
            p_w = np.array([qw[d][1][i] for d in range(k)]) - self.pw0
            with np.errstate(divide="ignore", invalid="ignore"):
                out[i] = self.a0 * ((q[i] - self.q0) + qz @ m @ q_w) / ((self.p0 - p_hat[i]) - qz @ m @ p_w) * 1000.0
        at_zero = s == 0
        if np.any(at_zero):
            eps = 1e-4 * max(1.0, abs(self.mu))
            out[at_zero] = (escape_adapted(self.population, self.mu + eps).rate
                            - escape_adapted(self.population, self.mu - eps).rate) / (2.0 * eps)
        return out


#: Adapted escape-noise response contexts kept for repeated calls (stability analyses evaluate the
#: same drive at many complex frequencies).
_ADAPTED_CACHE: dict = {}
ADAPTED_CACHE_SIZE = 8


def _escape_transfer_adapting(population, mu, s, progress):
    """Escape noise with adaptation (see :class:`_AdaptedResponse`)."""
    key = (repr(population), float(mu), bool(np.any(s.real < 0)))
    ctx = _ADAPTED_CACHE.get(key)
    if ctx is None:
        ctx = _AdaptedResponse(population, mu, key[2])
        if len(_ADAPTED_CACHE) >= ADAPTED_CACHE_SIZE:
            _ADAPTED_CACHE.pop(next(iter(_ADAPTED_CACHE)))
        _ADAPTED_CACHE[key] = ctx
    out = np.empty(s.shape, dtype=complex)
    bar = Progress(s.size, "transfer", enabled=progress)
    for i0 in range(0, s.size, FREQ_BLOCK):
        out[i0:i0 + FREQ_BLOCK] = ctx(s[i0:i0 + FREQ_BLOCK])
        bar.update(min(i0 + FREQ_BLOCK, s.size))
    bar.close()
    return out


def _white_transfer_adapting(population, mu, s, modulate, method, progress):
    """White noise with mean adaptation (see :func:`transfer`, Notes).

    The means obey ``E = d(in) - A d<u> - B dr`` (the drive the renewal neuron sees), ``dr = chi0 E + chi0_x dx``
    and, for the LIF, ``(1 + s tau_m) d<u> = (1 - r0 tau_ref) E + K dr``, ``K = (reset - rest - mu_eff)
    (1 - exp(-s tau_ref))/s - tau_m (threshold - reset)`` (the mean-potential balance with the reset flux),
    where ``A = sum a_k/(1 + s tau_k)``, ``B = sum b_k tau_k/(1 + s tau_k)``.  So ``chi = chi0 / (alpha + beta chi0)``
    for the mean and ``alpha chi0_x / (alpha + beta chi0)`` for the noise, ``alpha = 1 + A (1 - r0 tau_ref)/(1 + s
    tau_m)``, ``beta = A K/(1 + s tau_m) + B`` (rates per ms).
    """
    from .steady_state import _adapted_state, _renewal_population, _resolve_method

    nrn = population.neuron
    sigma = _sigma_of(population)
    renewal = _renewal_population(population)
    st = _adapted_state(population, mu, sigma, _resolve_method(renewal, "auto"))
    mu_eff = st.effective_drive
    freqs = s / (2j * math.pi * 1e-3)
    chi0 = transfer(renewal, mu_eff, freqs, "mean", method=method, progress=progress) * 1e-3  # 1/(ms mV)
    chi_x = chi0 if modulate == "mean" else \
        transfer(renewal, mu_eff, freqs, modulate, method=method, progress=progress) * 1e-3
    taus = np.array([a.tau for a in nrn.adaptation])
    jumps = np.array([a.jump for a in nrn.adaptation])
    coup = np.array([a.coupling for a in nrn.adaptation])
    big_a = np.zeros(s.shape, dtype=complex)
    big_b = np.zeros(s.shape, dtype=complex)
    for a_k, b_k, t_k in zip(coup, jumps, taus):
        big_a += a_k / (1.0 + s * t_k)
        big_b += b_k * t_k / (1.0 + s * t_k)
    alpha, beta = np.ones(s.shape, dtype=complex), big_b
    if np.any(coup != 0.0):
        if nrn.code != CODE_LIF:
            raise ValueError("the white-noise linear response with a subthreshold `coupling` is available for "
                             "the LIF only (its mean potential obeys a closed equation)")
        with np.errstate(divide="ignore", invalid="ignore"):
            held = np.where(s == 0, nrn.refractory, -np.expm1(-s * nrn.refractory) / s)
        k_flux = (nrn.reset - nrn.rest - mu_eff) * held - nrn.tau_m * (nrn.threshold - nrn.reset)
        v_m = 1.0 / (1.0 + s * nrn.tau_m)
        alpha = 1.0 + big_a * v_m * (1.0 - st.rate * 1e-3 * nrn.refractory)
        beta = big_a * v_m * k_flux + big_b
    if modulate == "mean":
        return chi0 / (alpha + beta * chi0) * 1e3
    return alpha * chi_x / (alpha + beta * chi0) * 1e3


def _escape_rate(population, mu, da=None):
    return 1000.0 / _AgeGrid(population, mu, da=da).survivor_integral


def _escape_static_slope(population, mu: float, da=None) -> float:
    """d(rate)/d(mu) (Hz/mV) by a central difference of the renewal rate (on age step ``da``)."""
    eps = 1e-4 * max(1.0, abs(mu))
    return (_escape_rate(population, mu + eps, da) - _escape_rate(population, mu - eps, da)) / (2.0 * eps)


# ---------------------------------------------------------------------------- white noise
def _sigma_of(population) -> float:
    s = population.noise.sigma
    if isinstance(s, (int, float)):
        return float(s)
    if s.is_constant:
        return float(s(0.0))
    raise ValueError("the linear response needs a constant noise amplitude `sigma` (mV)")


def _white_transfer(population, mu, s, modulate, progress, rtol):
    """Threshold integration on grids of step h and h/2, combined (4 X_{h/2} - X_h)/3 (second order);
    h is halved until the estimated error (extrapolated minus fine) is below ``rtol`` everywhere.

    The first grid has NODES_PER_SIGMA nodes per mV of ``min(sigma, EIF_SCALES * slope_factor)``
    (or of the QIF's scale), so steep spike onsets are resolved from the start.  Returns
    ``(chi, error)``.
    """
    sigma = _sigma_of(population)
    kind = "mean" if modulate == "mean" else "sigma2"
    nrn = population.neuron
    scale = sigma
    if nrn.code in (1, 2):  # EIF, QIF: the drift steepens on its own length scale
        scale = min(sigma, EIF_SCALES * length_scale(nrn))
    nodes = NODES_PER_SIGMA * sigma / scale

    def solve(n_per_sigma):
        sweep = Sweep(nrn, mu, sigma, n_per_sigma)
        out = np.empty(s.shape, dtype=complex)
        for i0 in range(0, s.size, FREQ_BLOCK):
            out[i0:i0 + FREQ_BLOCK] = sweep.solve(s[i0:i0 + FREQ_BLOCK], kind)[0]
            bar.update(min(i0 + FREQ_BLOCK, s.size))
        return out

    bar = Progress(s.size, "transfer", enabled=progress)
    coarse = solve(nodes)
    for _ in range(MAX_GRID_REFINEMENTS):
        nodes *= 2.0
        fine = solve(nodes)
        ext = (4.0 * fine - coarse) / 3.0
        err = np.abs(ext - fine)
        if np.all(err <= rtol * np.maximum(np.abs(ext), ERROR_FLOOR * np.max(np.abs(ext), initial=0.0))):
            break
        coarse = fine
    bar.close()
    if modulate == "sigma":
        ext, err = ext * (2.0 * sigma), err * (2.0 * sigma)  # d(sigma^2) = 2 sigma d(sigma)
    return ext, err


def stationary_rate(population, mu) -> float:
    """Stationary rate (Hz) at drive ``mu`` (mV), on the grids of the linear-response methods.

    Escape noise: ``1 / int S0(a) da`` (renewal theory); white noise: threshold
    integration, extrapolated in the grid step.
    """
    population = _check_population(population)
    mu = v.as_finite_float("mu", mu)
    if population.neuron.adapting:
        from .steady_state import gain

        return float(gain(population, mu))
    if isinstance(population.noise, EscapeNoise):
        return _escape_rate(population, mu)
    population = white_equivalent(population)
    sigma = _sigma_of(population)
    r1 = Sweep(population.neuron, mu, sigma).rate
    r2 = Sweep(population.neuron, mu, sigma, 2 * NODES_PER_SIGMA).rate
    return (4.0 * r2 - r1) / 3.0


# ---------------------------------------------------------------------------- front end
def _check_population(population):
    if not isinstance(population, Population):
        raise ValueError(f"`population` must be a popdens.Population, got {population!r}")
    if isinstance(population.noise, ShotNoise):
        raise ValueError("this analysis is not available for ShotNoise populations yet (`transfer` is); "
                         "popdens.montecarlo measures it")
    if isinstance(population.noise, ConductanceNoise):
        raise ValueError("the linear response and spectra of ConductanceNoise populations are not available yet; "
                         "popdens.montecarlo with a small sinusoidal drive measures them")
    if isinstance(population.noise, EscapeNoise) and population.noise.hazard.uses_slope:
        raise ValueError("the linear response does not support escape functions that depend on du/dt")
    return population


def _check_freqs(freqs):
    f = np.asarray(freqs)
    if f.dtype.kind not in "biufc":
        raise ValueError("`freqs` must be numbers (Hz)")
    f = f.astype(complex)
    if not np.all(np.isfinite(f)):
        raise ValueError("`freqs` must be finite (Hz)")
    return f


def transfer(population, mu, freqs, modulate: str = "mean", *, method: str | None = None,
             progress: bool | None = None, rtol: float = TRANSFER_RTOL, return_error: bool = False):
    """Transfer function of the population rate around the stationary state at drive ``mu``.

    Parameters
    ----------
    population : Population
        Escape noise (hazard depending on ``u`` only), white or coloured noise
        with a constant ``sigma``, or shot noise (finite PSPs; ``modulate =
        "mean"``: the linear response of the jump-density operator, exact in
        the PSP size up to its grid, extrapolated over three grids), or
        conductance input (``modulate = "mean"``: threshold integration of the
        voltage-dependent equation with moved boundaries, valid for
        ``2 pi f tau_syn`` well below 1).
    mu : float
        Stationary drive (mV).
    freqs : array_like of float or complex
        Frequencies (Hz).  Complex values mean the modulation
        ``exp(lambda t)`` with ``lambda = 2 pi i f`` (1/s); see the module
        notes and :func:`laplace_to_freq`.
    modulate : {"mean", "noise", "sigma"}
        The modulated input: the mean drive ``mu`` (result in Hz/mV); the
        noise intensity ``sigma**2`` (``"noise"``, Hz/mV^2, white noise
        only); or the amplitude ``sigma`` (Hz/mV, white noise only).
    method : {"renewal", "threshold-integration", "closed-form", "jump-density", "plane"}, optional
        Default: ``"renewal"`` for escape noise, ``"threshold-integration"``
        for white noise, ``"jump-density"`` for shot noise.  ``"closed-form"``:
        white-noise LIF only, needs mpmath, ~10 ms per frequency.  Coloured
        noise, mean modulation, renewal neurons: ``"plane"`` linearises the
        stationary (potential, current) density, exact up to its grid and
        consistent with :func:`popdens.gain` (its zero-frequency value is the
        plane's gain slope); 0.07 s (cut-off models, two grids) to 0.2 s
        (hard thresholds, three grids) CPU per frequency.  It is the default
        for the mean drive of hard thresholds (LIF, PIF) beyond ``tau_syn =
        0.1 tau_m``, blended with the boundary shift up to ``0.15 tau_m`` as
        the rate is; models with a spike cut-off keep the white-noise
        response by default (network stability analyses, which call the
        transfer function thousands of times, use the boundary shift for
        every coloured-noise cohort).
    progress : bool, optional
        Progress line on stderr (default: on a terminal, for long runs).
    rtol : float, optional
        Relative tolerance (default 1e-4): the age step (renewal) or grid step
        (threshold integration) is halved until the estimated error of every
        value is below ``rtol * max(|chi|, 1e-3 max |chi|)``.  Not used by
        ``"closed-form"``.
    return_error : bool, optional
        Also return the error estimate.

    Returns
    -------
    ndarray of complex, shape of ``freqs``
        Rate modulation per unit input modulation; its phase is the lead of
        the rate over the input.  ``chi(-f) = conj(chi(f))`` for real ``f``.
    ndarray of float, shape of ``freqs``
        With ``return_error``: the estimated error (same unit), the difference
        between the Richardson-extrapolated values returned and those of the
        finest grid (a bound on the error of the latter; 0 for the closed form).

    Notes
    -----
    Accuracy (measured, see ``tests/theory/test_linear_response.py``): threshold
    integration (from 200 and 400 nodes per mV of sigma, extrapolated) agrees with
    the closed form for the LIF from 1 Hz to 1 kHz to 5e-11 ... 8e-6 relative
    across sub- and suprathreshold regimes; before extrapolation its error is
    second order in the step.  The renewal path (age step from
    ``min(0.02 ms, tau_m/250)``, a node on a kink of the escape function,
    trapezoidal, second order, extrapolated) meets ``rtol`` by halving the step.

    Examples
    --------
    >>> import popdens
    >>> pop = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0),
    ...                          popdens.EscapeNoise(popdens.hazard.Exponential(20.0, 2.0)))
    >>> chi = transfer(pop, 18.0, [0.0, 10.0])
    >>> chi.dtype.kind
    'c'
    """
    if isinstance(population, Population) and isinstance(population.noise, ShotNoise):
        out, err = _shot_transfer(population, mu, freqs, modulate, method, progress)
        return (out, err) if return_error else out
    if isinstance(population, Population) and isinstance(population.noise, ConductanceNoise):
        out, err = _conductance_transfer(population, mu, freqs, modulate, method)
        return (out, err) if return_error else out
    population = _check_population(population)
    mu = v.as_finite_float("mu", mu)
    f = _check_freqs(freqs)
    if modulate not in MODULATIONS:
        raise ValueError(f"`modulate` must be one of {sorted(MODULATIONS)}, got {modulate!r}")
    if isinstance(population.noise, ColouredNoise):
        out, err = _coloured_transfer(population, mu, f, modulate, method, progress, rtol)
        return (out, err) if return_error else out
    escape = isinstance(population.noise, EscapeNoise)
    if method is None:
        method = "renewal" if escape else "threshold-integration"
    if method not in METHODS:
        raise ValueError(f"`method` must be one of {list(METHODS)}, got {method!r}")
    if escape and method != "renewal":
        raise ValueError(f"`method` = {method!r} needs white noise; escape noise uses 'renewal'")
    if not escape and method == "renewal":
        raise ValueError("`method` = 'renewal' needs escape noise")
    if escape and modulate != "mean":
        raise ValueError(f"`modulate` must be 'mean' for escape noise, got {modulate!r}")
    rtol = v.positive("rtol", rtol)
    s = (2j * math.pi * 1e-3) * f.ravel()  # Laplace variable, 1/ms
    err = np.zeros(s.shape)
    if population.neuron.adapting:
        # no error estimate for adapting neurons (fixed age grid and threshold-integration step): NaN
        err = np.full(s.shape, np.nan)
        out = (_escape_transfer_adapting(population, mu, s, progress) if escape
               else _white_transfer_adapting(population, mu, s, modulate, method, progress))
    elif escape:
        out, err = _escape_transfer(population, mu, s, progress, rtol)
    elif method == "closed-form":
        if population.neuron.code != 0:
            raise ValueError("`method` = 'closed-form' is available for the LIF only")
        from ._lif_exact import lif_response, siegert_slope

        sigma = _sigma_of(population)
        kind = "mean" if modulate == "mean" else "sigma2"
        out = np.empty(s.shape, dtype=complex)
        nz = s != 0
        out[nz] = lif_response(population.neuron, mu, sigma, s[nz], kind)
        if np.any(~nz):
            out[~nz] = siegert_slope(population.neuron, mu, sigma, kind)
        if modulate == "sigma":
            out *= 2.0 * sigma
    else:
        out, err = _white_transfer(population, mu, s, modulate, progress, rtol)
    if return_error:
        return out.reshape(f.shape), err.reshape(f.shape)
    return out.reshape(f.shape)


def _shot_transfer(population, mu, freqs, modulate, method, progress):
    """Shot noise: the linear response of the jump-density operator (:mod:`._shot_response`)."""
    from ._shot_response import shot_transfer

    mu = v.as_finite_float("mu", mu)
    f = _check_freqs(freqs)
    if modulate != "mean":
        raise ValueError(f"`modulate` must be 'mean' for shot noise (its fluctuations follow from the input "
                         f"rates), got {modulate!r}")
    if method not in (None, "jump-density"):
        raise ValueError(f"`method` must be 'jump-density' for shot noise, got {method!r}")
    if population.neuron.adapting:
        raise ValueError("the linear response of shot noise does not support `adaptation` yet; remove it from "
                         "the neuron")
    out, err = shot_transfer(population, mu, (2j * math.pi * 1e-3) * f.ravel(), progress)
    return out.reshape(f.shape), err.reshape(f.shape)


def _conductance_transfer(population, mu, freqs, modulate, method):
    """Conductance input: threshold integration at complex frequency (:mod:`._conductance`)."""
    from ._conductance import conductance_transfer

    mu = v.as_finite_float("mu", mu)
    f = _check_freqs(freqs)
    if modulate != "mean":
        raise ValueError(f"`modulate` must be 'mean' for conductance input (its fluctuations follow from the "
                         f"input rates), got {modulate!r}")
    if method not in (None, "threshold-integration"):
        raise ValueError(f"`method` must be 'threshold-integration' for conductance input, got {method!r}")
    out, err = conductance_transfer(population, mu, (2j * math.pi * 1e-3) * f.ravel())
    return out.reshape(f.shape), err.reshape(f.shape)


def _coloured_transfer(population, mu, f, modulate, method, progress, rtol):
    """Transfer function of a coloured-noise population and its numerical error estimate (not the error
    of an approximation): the effective boundary shift (module notes); by default for the mean drive of
    hard thresholds (LIF, PIF) beyond ``tau_syn = SHIFT_UNTIL_RATIO tau_m`` the (potential, current)
    plane, blended with the shift up to ``PLANE_FROM_RATIO tau_m`` as the rate is
    (:func:`._filtered_plane.plane_weight`); the plane on request (``method="plane"``)."""
    if method == "renewal":
        raise ValueError("`method` = 'renewal' needs escape noise")
    if method == "plane":
        return _plane_transfer(population, mu, f, modulate)
    from ._filtered_plane import plane_weight

    nrn = population.neuron
    share = (plane_weight(nrn, float(population.noise.tau_syn))
             if method is None and modulate == "mean" and not nrn.has_cutoff and not nrn.adapting else 0.0)
    if share == 1.0:
        return _plane_transfer(population, mu, f, modulate)
    out, err = _shift_transfer(population, mu, f, modulate, method, progress, rtol)
    if share > 0.0:  # between SHIFT_UNTIL_RATIO and PLANE_FROM_RATIO: blended as the rate is
        chi, chi_err = _plane_transfer(population, mu, f, modulate)
        out, err = out + share * (chi - out), (1.0 - share) * err + share * chi_err
    return out, err


def _shift_transfer(population, mu, f, modulate, method, progress, rtol):
    """The effective-boundary transfer function (module notes) and the numerical error estimate of the
    white-noise problem."""
    white = white_equivalent(population)
    out, err = transfer(white, mu, f, modulate, method=method, progress=progress, rtol=rtol, return_error=True)
    nrn = population.neuron
    shift = white.neuron.reset - nrn.reset
    if modulate == "mean" or shift == 0.0:
        return out, err
    sigma = _sigma_of(white)
    # d(shift)/d(sigma) = shift / sigma; per unit sigma^2: shift / (2 sigma^2)
    per = shift / sigma if modulate == "sigma" else shift / (2.0 * sigma * sigma)
    lam_tau = 2j * math.pi * 1e-3 * f * nrn.tau_m
    leak = -float(nrn.drift_slope(nrn.threshold))  # exact for linear drifts (LIF, PIF)
    chi_mu, err_mu = transfer(white, mu, f, "mean", method=method, progress=progress, rtol=rtol, return_error=True)
    return out - chi_mu * (leak + lam_tau) * per, err + np.abs(err_mu * (leak + lam_tau) * per)


def _plane_transfer(population, mu, f, modulate):
    """Mean-drive transfer function on the (potential, current) plane (:mod:`._filtered_plane`); below
    ``tau_syn = PLANE_FLOOR_RATIO tau_m`` the plane's correction to the effective-boundary response at
    the floor, scaled by ``tau_syn`` over the floor (as for the rate)."""
    from ._filtered_plane import PLANE_FLOOR_RATIO, PLANE_MIN_RATE_HZ, below_floor, plane_transfer

    nrn = population.neuron
    if modulate != "mean":
        raise ValueError(f"`method` 'plane' computes the response to the mean drive: `modulate` must be 'mean', "
                         f"got {modulate!r}")
    if nrn.adapting:
        raise ValueError("`method` 'plane' does not support `adaptation` yet; use the default method")
    sigma = _sigma_of(population)
    tau_syn = float(population.noise.tau_syn)
    floor = PLANE_FLOOR_RATIO * nrn.tau_m
    lam = (2j * math.pi * 1e-3) * f.ravel()

    def effective(tau):
        white = white_equivalent(Population(nrn, ColouredNoise(sigma, tau)))
        return transfer(white, mu, f.ravel(), "mean")

    if stationary_rate(white_equivalent(population), mu) < PLANE_MIN_RATE_HZ:  # too rare to solve on the plane
        return transfer(white_equivalent(population), mu, f, "mean", return_error=True)
    chi, err = plane_transfer(nrn, mu, sigma, max(tau_syn, floor), lam)

    out = below_floor(nrn, tau_syn, chi, effective)
    return out.reshape(f.shape), err.reshape(f.shape)


#: Density at the wall of the half-space (Milne) problem of the kinetic boundary layer,
#: ``z dP/ds + d/dz (z P + dP/dz) = 0`` on ``s > 0`` with ``P(0, z < 0) = 0``, per unit flux into
#: the wall (velocities and lengths in thermal units).  Computed here by a second-order upwind
#: finite-difference solution (``tests/references.py::milne_layer``): 0.917, 0.921, 0.925 at
#: steps (0.01, 0.05), (0.005, 0.025), (0.0025, 0.025) in (s, z), converging slowly (square-root
#: singularity at the wall); the same solution gives the extrapolation length 1.449-1.456
#: against the exact |zeta(1/2)| = 1.4604 (Hagan, Doering & Levermore 1989).
MILNE_WALL_DENSITY = 0.93


def high_frequency_limit(population, mu) -> float:
    r"""Finite high-frequency limit (Hz/mV) of the mean-input transfer function with coloured noise.

    With a synaptically filtered current the potential is differentiable and
    crosses the threshold only with positive velocity ``v = (F(theta) + mu +
    I_s)/tau_m``; the rate is the flux ``int_{v>0} v P(theta, I_s) dI_s``.  A
    fast modulation ``eps e^{i omega t}`` of the drive cannot move the density
    (its response falls as ``1/omega``) but moves every velocity at once, so the
    rate follows without lag (Fourcaud & Brunel 2002, Neural Comput. 14:2057):

    .. math:: \chi(\omega\to\infty) = p(\theta)/\tau_m,

    with ``p(theta)`` the stationary potential density at threshold.  To first
    order in ``k = sqrt(tau_syn/tau_m)`` the density there is that of the
    kinetic boundary layer, ``p(theta) = c sqrt(2) tau_m nu0 k / sigma`` with
    ``c = MILNE_WALL_DENSITY`` (the outer, effective white-noise density would
    extrapolate to ``alpha/sqrt(2) = 1.46`` instead of ``c``), so

    .. math:: \chi_\infty = c\,\sqrt{2}\,\nu_0\,k/\sigma,

    ``nu0`` the effective-boundary rate.  An approximation: measured against the
    Monte Carlo twin (LIF, contributor guide) it is 15 % low at
    ``tau_syn/tau_m = 0.1``, where ``k = 0.32`` is not small.

    Parameters
    ----------
    population : Population
        Hard-threshold neuron (LIF, PIF, custom without cut-off) with
        :class:`~popdens.ColouredNoise` of constant ``sigma``.
    mu : float
        Stationary drive (mV).

    Returns
    -------
    float
        The limit in Hz/mV, real and positive (no phase lag).
    """
    population = _check_population(population)
    mu = v.as_finite_float("mu", mu)
    if not isinstance(population.noise, ColouredNoise):
        raise ValueError("the finite high-frequency limit needs coloured noise (white noise: the response "
                         "falls as f^-1/2 for the LIF, escape noise: see `transfer`)")
    nrn = population.neuron
    if nrn.has_cutoff:
        raise ValueError("the high-frequency limit p(theta)/tau_m applies to hard thresholds; with a spike "
                         f"cut-off the potential crosses by its own drift ({nrn!r})")
    white = white_equivalent(population)
    sigma = _sigma_of(white)
    nu0 = stationary_rate(population, mu)
    k = math.sqrt(population.noise.tau_syn / nrn.tau_m)
    return MILNE_WALL_DENSITY * math.sqrt(2.0) * nu0 * k / sigma


# ---------------------------------------------------------------------------- time domain
def _periodic_kernel(population, mu, dt, n, modulate, method, progress):
    """Kernel samples kappa(m dt), m = 0..n-1, of period n dt (negative lags at the end), Hz/(mV ms)."""
    freqs = np.arange(n // 2 + 1) * (1000.0 / (n * dt))  # Hz
    if method is None and isinstance(population, Population) and isinstance(population.noise, ColouredNoise):
        method = "threshold-integration"  # thousands of frequencies: the boundary shift (see response_kernel)
    chi = transfer(population, mu, freqs, modulate, method=method, progress=progress)
    return chi, np.fft.irfft(chi, n) / dt


def response_kernel(population, mu, dt: float, duration: float, modulate: str = "mean", *,
                    method: str | None = None, progress: bool | None = None):
    """Linear response kernel (impulse response) of the rate, from the transfer function.

    ``kappa(t) = (1/2 pi) int chi(omega) exp(i omega t) d omega``, band-limited to
    the Nyquist frequency ``1/(2 dt)``: the rate response to a weak input
    pulse of area ``a`` (mV ms) is ``a * kappa(t)``.

    Parameters
    ----------
    population : Population
        The neurons and their noise model.
    mu : float
        Stationary drive (mV).
    dt : float
        Time step (ms), > 0.
    duration : float
        Length of the kernel (ms); should exceed its decay time.  Computed on
        a period of twice this, so that slow tails do not alias.
    modulate : str, optional
        As in :func:`transfer`.
    method : str, optional
        As in :func:`transfer`.
    progress : bool, optional
        As in :func:`transfer`.

    Returns
    -------
    t : ndarray
        Times (ms), ``0, dt, 2 dt, ...`` below ``duration``.
    kernel : ndarray
        ``kappa(t)`` in Hz/(mV ms) (Hz/(mV^2 ms) for ``modulate="noise"``).

    Notes
    -----
    The band limit spreads a kernel that is singular at ``t = 0+`` (white-noise
    LIF: ``kappa ~ t^(-1/2)``, from ``chi ~ f^(-1/2)``) over a few ``dt``, partly
    onto negative times, which are not returned: ``sum(kernel) * dt`` falls
    short of ``chi(0)`` by that part (measured 0.6 % for a white-noise LIF with
    ``dt = 0.1`` ms, shrinking like ``sqrt(dt)``).  :func:`linear_rate_response`
    keeps it.

    Coloured noise: computed from the effective-boundary transfer function
    (the default for ``method=None``, whatever ``tau_syn``): the plane costs
    ~0.2 s per frequency.
    """
    dt = v.positive("dt", dt)
    duration = v.positive("duration", duration)
    n_half = max(2, int(math.ceil(duration / dt)))
    _, kernel = _periodic_kernel(population, mu, dt, 2 * n_half, modulate, method, progress)
    return np.arange(n_half) * dt, kernel[:n_half]


def linear_rate_response(population, drive, t_end: float, dt: float, *, mu=None, kernel_duration=None,
                         method: str | None = None, progress: bool | None = None):
    """Rate predicted by linear response theory for a weak drive.

    The population sits in its stationary state at drive ``mu`` (default:
    ``drive(0)``) before t = 0; afterwards ``r(t) = r0 + int kappa(t')
    [drive(t - t') - mu] dt'`` with the kernel of :func:`response_kernel`,
    evaluated as a product in the frequency domain (exact for the
    band-limited kernel, including its ringing around ``t' = 0``).  Valid
    while the deviation stays weak; compare with :func:`popdens.simulate`.

    Parameters
    ----------
    population : Population
        The neurons and their noise model.
    drive : Drive or float
        Input drive (mV) over time (ms).
    t_end : float
        Duration (ms).
    dt : float
        Time step (ms); must divide ``t_end``.
    mu : float, optional
        Stationary drive (mV) before t = 0.
    kernel_duration : float, optional
        Memory of the kernel (ms); default and minimum ``t_end``.  Raise it
        when the kernel rings longer than the run (weak noise).
    method : str, optional
        As in :func:`transfer`.
    progress : bool, optional
        As in :func:`transfer`.

    Returns
    -------
    t : ndarray
        Times (ms) ``0, dt, ..., t_end``.
    rate : ndarray
        Predicted rate (Hz) at those times.
    """
    drive = as_drive(drive)
    dt = v.positive("dt", dt)
    t_end = v.positive("t_end", t_end)
    n_steps = v.n_steps_for(t_end, dt)
    t = np.arange(n_steps + 1) * dt
    mu0 = float(drive(0.0)) if mu is None else v.as_finite_float("mu", mu)
    dmu = np.asarray(drive(t), dtype=float) - mu0
    if not np.all(np.isfinite(dmu)):
        raise ValueError("the drive is not finite on [0, t_end]")
    memory = t_end if kernel_duration is None else max(t_end, v.positive("kernel_duration", kernel_duration))
    n = 2 * max(t.size, int(math.ceil(memory / dt)) + 1)
    chi, _ = _periodic_kernel(population, mu0, dt, n, "mean", method, progress)
    conv = np.fft.irfft(chi * np.fft.rfft(dmu, n), n)[:t.size]
    return t, stationary_rate(population, mu0) + conv
