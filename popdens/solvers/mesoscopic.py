"""Finite-size (mesoscopic) integration of an escape-noise population of ``N`` neurons.

The refractory-density solver (:mod:`.refractory`) follows the expected age
structure of an infinite population.  A population of ``N`` neurons instead
fires a whole number of spikes per step, and its age structure is made of the
spikes it actually fired.  This solver draws that number at random each step
and keeps, on the same Lagrangian age bins and with the same compiled per-bin
step (:func:`.refractory._bin_step`), the realised age structure and its
uncertainty, so that one run costs the same whatever ``N`` (Schwalger, Deger &
Gerstner 2017, PLoS Comput. Biol. 13:e1005507, "mesoscopic population
equations"; renewal case, without adaptation).

State, per age bin ``j`` (the neurons whose last spike fell in one past step)
---------------------------------------------------------------------------
* ``m_j``: the expected fraction of the population still in the bin, i.e. the
  realised fraction that fired in that step times its survival since;
* ``w_j``: ``N`` times the variance of that fraction (the "variance function"
  ``v(t, t^)`` of Schwalger et al., here per neuron so that it does not
  depend on ``N``);
* the membrane potential and cached hazard, exactly as in the infinite solver.

Step (over ``[t, t + dt]``; ``s_j`` = survival of bin ``j`` over the step, ``P_j = 1 - s_j``)
-------------------------------------------------------------------------------------
1. Expected fraction of spikes, with the finite-size correction

   .. math:: \\bar f = \\sum_j P_j m_j + \\Lambda\\,\\Big(1 - \\sum_j m_j\\Big),
             \\qquad \\Lambda = \\frac{\\sum_j P_j w_j}{\\sum_j w_j}

   (Schwalger et al. 2017, the expected activity ``A-bar(t)`` with the rate
   ``Lambda(t)`` of the missing or surplus neurons weighted by the variance
   function).  The ``m_j`` need not sum to one: the deficit ``1 - sum m_j``
   is the finite-size error of the expected age structure, and its best
   linear estimate shares it among the bins in proportion to their variance.
2. Number of spikes ``k ~ Binomial(N, f)`` (default) or ``Poisson(N f)``,
   ``f = min(max(f-bar, 0), 1)``; realised activity ``A_N = k / (N dt)``.
3. Update: ``m_j <- s_j m_j`` and

   .. math:: w_j \\leftarrow s_j^2\\,w_j + P_j\\,s_j\\,m_j,

   the exact one-step recursion of the variance of a binomial number of
   survivors (derived here; it discretises Schwalger et al.'s
   ``dv/dt = -2 lambda v + lambda S A_N``, to which it tends as dt -> 0);
   the newborn bin gets ``m = k/N`` and ``w = 0``.  The last bin (all older
   neurons) is updated alike and merges the oldest explicit bin (masses and
   variances add; potentials are mass-weighted as in the infinite solver).

As ``N -> infinity`` the drawn fraction tends to ``f-bar``, ``sum m_j -> 1``
and the step is the infinite solver's step.  The approximation (the linear
estimate of step 1) is the one of Schwalger et al.; its error against the
Monte Carlo twin is measured in ``tests/solvers/test_mesoscopic_twin.py`` and
tabulated in DEVELOPERS.md.

Observables use the corrected age structure ``m_j + c w_j`` with
``c = (1 - sum m) / sum w`` (which sums to one): :meth:`density`,
:meth:`mean_potential`, the refractory fraction, the initial rate.

Adding adaptation (quasi-renewal, Schwalger et al. 2017) changes only the
per-bin step: each bin's potential or threshold carries its own last-spike
kernel and earlier spikes enter through the *realised* activity history; the
finite-size part (steps 1-3) is unchanged.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from .. import _validation as v
from ..result import STATUS_OK
from ..model._kernels import MS_TO_S, NO_REFCOUNT, drift_value, hazard_value, survival
from ..model.adaptation import refuse
from ._age_step import AGE_TOL, _bin_step, _newborn, _refire_survival
from .refractory import RefractoryDensitySolver, _old_bin_map, _trajectory

__all__ = ["MesoscopicSolver", "COUNT_MODELS", "seed_kernel_rng"]

#: Distributions of the number of spikes per step: the exact binomial of N neurons,
#: or its Poisson limit (small dt), selectable for comparison.
COUNT_MODELS = ("binomial", "poisson")
#: Variances below this (per neuron) count as zero: the age structure is then known exactly
#: and the correction term vanishes.
ZERO_VARIANCE = 1e-300
#: Default burn-in (ms) before t = 0 for ``initial="stationary"``, as the Monte Carlo twin:
#: max(BURN_IN_MIN_MS, refractory + BURN_IN_TAUS tau_m), so that t = 0 finds a sample of the
#: finite population's stationary fluctuations rather than their mean.
BURN_IN_TAUS = 20.0
BURN_IN_MIN_MS = 500.0
#: Steps per compiled call during the burn-in.
BURN_IN_BLOCK = 5000
#: Default span of explicit age bins beyond the refractory period, in membrane time constants
#: (the infinite solver keeps 10).  Merging older neurons into the last bin costs 5e-5 Hz RMS at
#: 6 tau_m, 1e-3 Hz under a strong 40 Hz modulation (measured for the infinite solver, see
#: ``refractory.DEFAULT_MEMORY_TAUS``): far below the finite-size standard deviation of the
#: activity in a 1 ms bin, sqrt(rate / (N 1 ms)) ~ 0.03 Hz even for N = 1e7 neurons at 10 Hz,
#: and 40 % fewer bins to step.
DEFAULT_MEMORY_TAUS = 6.0


@numba.njit(cache=True, nogil=True)
def seed_kernel_rng(seed):  # pragma: no cover - compiled
    """Seed the random generator of compiled code (one state per thread, shared by all kernels)."""
    np.random.seed(seed)


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def _advance_finite(ncode, npar, nops, nargs, tau_m, reset, boundary, has_cutoff,
                    hcode, hpar, hops, hargs, theta, uses_slope, tau_ref, dt,
                    m, w, u, h, head, old, old_w, own, size, poisson, mu,
                    out_rate, out_mean_u, out_refr, stack, xbuf):  # pragma: no cover - compiled
    """Advance ``len(mu) - 1`` steps of the finite population in place (module docstring).

    ``old`` holds the last bin's mass, potential and cached hazard, ``old_w[0]`` its variance;
    ``own[j]`` (mV) is subtracted from the drive of the neurons of age ``(j + 1/2) dt`` (zero for an
    isolated population; see :meth:`MesoscopicSolver.set_own_input`).
    Returns ``(head, steps_done, ok, clipped)``; ``clipped`` counts steps whose
    expected fraction left [0, 1] and was clipped.
    """
    n_bins = m.shape[0]
    e_dt = math.exp(-dt / tau_m)
    n = mu.shape[0] - 1
    clipped = 0
    n_refr = 0  # explicit bins still refractory at the step end: (j + 1.5) dt < tau_ref
    while n_refr < n_bins - 1 and (n_refr + 1.5) * dt < tau_ref - AGE_TOL * dt:
        n_refr += 1
    for k in range(n):
        mu0 = mu[k]
        mu1 = mu[k + 1]
        fired = 0.0    # sum P m: expected fraction firing among the tracked neurons
        fired_w = 0.0  # sum P w
        m_tot = 0.0
        w_tot = 0.0
        m_new = 0.0    # sums after the step (for the corrected observables)
        w_new = 0.0
        um = 0.0       # sum m u, sum w u, refractory m and w (after the step)
        uw = 0.0
        rm = 0.0
        rw = 0.0
        u_last = 0.0
        ms_last = 0.0
        ws_last = 0.0
        for j in range(n_bins):
            p = head + j
            if p >= n_bins:
                p -= n_bins
            mj = m[p]
            wj = w[p]
            un, hn, big_h = _bin_step(ncode, npar, nops, nargs, tau_m, reset, boundary, has_cutoff,
                                      hcode, hpar, hops, hargs, theta, uses_slope,
                                      (j + 0.5) * dt, tau_ref, dt, e_dt, u[p], h[p],
                                      mu0 - own[j], mu1 - own[j + 1], stack, xbuf)
            s = survival(big_h)
            q = 1.0 - s
            fired += mj * q
            fired_w += wj * q
            m_tot += mj
            w_tot += wj
            ms = mj * s
            ws = s * s * wj + q * s * mj
            if j == n_bins - 1:
                u_last = un
                ms_last = ms
                ws_last = ws
            else:
                m[p] = ms
                w[p] = ws
                u[p] = un
                h[p] = hn
                m_new += ms
                w_new += ws
                um += ms * un
                uw += ws * un
                if j < n_refr:
                    rm += ms
                    rw += ws
        # the bin of all older neurons, merged with the oldest explicit bin
        mo = old[0]
        wo = old_w[0]
        un, hn, big_h = _bin_step(ncode, npar, nops, nargs, tau_m, reset, boundary, has_cutoff,
                                  hcode, hpar, hops, hargs, theta, uses_slope,
                                  tau_ref + dt, tau_ref, dt, e_dt, old[1], old[2],
                                  mu0 - own[n_bins], mu1 - own[n_bins], stack, xbuf)
        s = survival(big_h)
        q = 1.0 - s
        fired += mo * q
        fired_w += wo * q
        m_tot += mo
        w_tot += wo
        m_old = mo * s + ms_last
        w_old = s * s * wo + q * s * mo + ws_last
        if m_old > 0.0:
            u_old = (mo * s * un + ms_last * u_last) / m_old
        else:
            u_old = un
        d1 = 0.0
        if uses_slope:
            d1 = (drift_value(ncode, npar, nops, nargs, u_old, stack, xbuf) + mu1 - own[n_bins]) / tau_m
        old[0] = m_old
        old[1] = u_old
        old[2] = hazard_value(hcode, hpar, hops, hargs, u_old, theta, d1, stack, xbuf)
        old_w[0] = w_old
        m_new += m_old
        w_new += w_old
        um += m_old * u_old
        uw += w_old * u_old
        # expected fraction firing, with the finite-size correction for the missing neurons
        if w_tot > ZERO_VARIANCE:
            lam = fired_w / w_tot
        elif m_tot > 0.0:
            lam = fired / m_tot
        else:
            lam = 0.0
        f = fired + lam * (1.0 - m_tot)
        if not (f >= 0.0):  # also NaN -> caught below
            if f < 0.0:
                clipped += 1
                f = 0.0
        elif f > 1.0:
            clipped += 1
            f = 1.0
        if not math.isfinite(f):
            return head, k, False, clipped
        if poisson:
            spikes = np.random.poisson(size * f)
        else:
            spikes = np.random.binomial(size, f)
        a = spikes / size
        head -= 1
        if head < 0:
            head += n_bins
        unb, hnb = _newborn(ncode, npar, nops, nargs, tau_m, reset, hcode, hpar, hops, hargs, theta,
                            uses_slope, tau_ref, dt, mu1 - own[0], stack, xbuf)
        # without refractoriness a neuron reborn within the step may fire again before its end:
        # each of the `spikes` neurons adds a geometric number of spikes (refractory._advance counts
        # fired / s_nb, the mean of this), while the mass reborn stays spikes / N
        s_nb = _refire_survival(ncode, npar, nops, nargs, tau_m, reset, hcode, hpar, hops, hargs, theta,
                                uses_slope, tau_ref, dt, mu1 - own[0], hnb, stack, xbuf)
        extra = 0
        if s_nb < 1.0 and spikes > 0:
            extra = np.random.negative_binomial(spikes, s_nb)
        m[head] = a
        w[head] = 0.0
        u[head] = unb
        h[head] = hnb
        m_new += a
        um += a * unb
        if 0.5 * dt < tau_ref - AGE_TOL * dt:
            rm += a
        # corrected observables: the age structure m + c w sums to one
        if w_new > ZERO_VARIANCE:
            c = (1.0 - m_new) / w_new
            out_mean_u[k] = um + c * uw
            out_refr[k] = rm + c * rw
        else:
            out_mean_u[k] = um / m_new if m_new > 0.0 else unb
            out_refr[k] = rm / m_new if m_new > 0.0 else 0.0
        out_rate[k] = (spikes + extra) / size / (dt * MS_TO_S)
        if not math.isfinite(out_mean_u[k]):
            return head, k + 1, False, clipped
    return head, n, True, clipped


class MesoscopicSolver(RefractoryDensitySolver):
    """Escape-noise population of ``size`` neurons: realised activity, one run per call (module docstring).

    Parameters
    ----------
    population : Population
        Neuron model with :class:`~popdens.EscapeNoise`.
    dt : float
        Time step and age-bin width (ms).
    size : int
        Number of neurons ``N``.
    counts : {"binomial", "poisson"}
        Distribution of the number of spikes per step (default binomial: exact for ``N``
        neurons that fire at most once per step).
    max_age : float, optional
        Age (ms) beyond which neurons share one bin, as for
        :class:`~popdens.solvers.RefractoryDensitySolver`; default ``refractory + 6 tau_m``
        (see ``DEFAULT_MEMORY_TAUS``).
    burn_in : float, optional
        Time (ms) run at the initial drive before t = 0 for ``initial="stationary"``
        (default ``max(500, refractory + 20 tau_m)``, as the Monte Carlo twin).

    Notes
    -----
    Random numbers come from the compiled generator; seed it with
    :func:`seed_kernel_rng` (the front end does so from the caller's ``seed``).
    """

    method_name = "mesoscopic"

    def __init__(self, population, dt: float, size: int, counts: str = "binomial",
                 max_age: float | None = None, burn_in: float | None = None):
        refuse(population, "finite-size integration (`n`)")
        if max_age is None:
            max_age = population.neuron.refractory + DEFAULT_MEMORY_TAUS * population.neuron.tau_m
        super().__init__(population, dt, max_age)
        self.size = v.positive_int("n", size)
        if counts not in COUNT_MODELS:
            raise ValueError(f"`counts` must be one of {list(COUNT_MODELS)}, got {counts!r}")
        self.counts = counts
        nrn = population.neuron
        if burn_in is None:
            burn_in = max(BURN_IN_MIN_MS, nrn.refractory + BURN_IN_TAUS * nrn.tau_m)
        self.burn_in = v.non_negative("burn_in", burn_in)
        self.w = np.zeros(self.n_bins)
        self.old_w = np.zeros(1)  # variance of the last bin (its mass, potential, hazard: ``old``)
        self.own = np.zeros(self.n_bins + 1)  # drive (mV) removed by age: see set_own_input
        self.clipped = 0
        self._start = None  # state set by initialize(), restored by new_trial()
        self._stationary_start = False

    def set_own_input(self, drive_by_age) -> None:
        """Drive (mV) that a neuron of age ``a`` must *not* receive, given at the ages ``axis``.

        In a network the drive of a cohort is computed from its whole activity,
        which includes each neuron's own spikes.  A neuron does not synapse on
        itself, so the network integrator passes here the part of the drive
        that a neuron's own last spike contributes (its delayed, filtered PSP
        drive as a function of its age) and scales the population term to
        match (:mod:`popdens.network.integrate`).  Set before :meth:`initialize`.
        """
        own = np.asarray(drive_by_age, dtype=float)
        if own.shape != self.own.shape or not np.all(np.isfinite(own)):
            raise ValueError(f"`drive_by_age` must be {self.own.size} finite values (mV) on `axis`")
        self.own[:] = own

    # ----------------------------------------------------------------- init
    def initialize(self, mu0: float, sigma0=None, initial="stationary") -> None:
        """Set the state at t = 0.

        ``"stationary"``: the stationary age structure with its stationary
        variances, then ``burn_in`` ms of finite-size dynamics at ``mu0`` (so
        t = 0 finds one sample of the stationary fluctuations);
        ``"synchronous"``: all ``N`` neurons have just fired (known exactly,
        zero variance); an array: an age density on :attr:`axis`, taken as
        known exactly.
        """
        super().initialize(mu0, sigma0, initial)
        self.w[:] = 0.0
        self.old_w[0] = 0.0
        self.clipped = 0
        self._stationary_start = isinstance(initial, str) and initial == "stationary"
        if not self._stationary_start:
            self._start = (self.m.copy(), self.w.copy(), self.u.copy(), self.h.copy(), self.head,
                           self.old.copy(), self.old_w.copy(), float(mu0))
            return
        # stationary variances along the bins: w_{j+1} = s_j^2 w_j + (1 - s_j) s_j m_j, w_0 = 0
        _, _, ss = _trajectory(*self._nargs, self.n_bins, float(mu0), self._stack, self._xbuf)
        wj = 0.0
        for j in range(self.n_bins):
            self.w[j] = wj
            s = ss[j]
            wj = s * s * wj + (1.0 - s) * s * self.m[j]
        _, _, s_old = _old_bin_map(*self._nargs, self.old[1], self.old[2], float(mu0), self._stack, self._xbuf)
        if s_old < 1.0:
            self.old_w[0] = (wj + (1.0 - s_old) * s_old * self.old[0]) / (1.0 - s_old * s_old)
        self._start = (self.m.copy(), self.w.copy(), self.u.copy(), self.h.copy(), self.head,
                       self.old.copy(), self.old_w.copy(), float(mu0))
        self._burn_in()

    def _burn_in(self) -> None:
        mu0 = self._start[-1]
        n_burn = int(round(self.burn_in / self.dt))
        for k0 in range(0, n_burn, BURN_IN_BLOCK):
            k1 = min(n_burn, k0 + BURN_IN_BLOCK)
            self._run(np.full(k1 - k0 + 1, mu0))
        self.clipped = 0

    def new_trial(self) -> None:
        """Start an independent realisation: back to the state :meth:`initialize` set at t = 0.

        A stationary start repeats the burn-in (with new random numbers), so trials are
        independent; the other starts are deterministic and are restored exactly.
        """
        if self._start is None:
            raise RuntimeError("call initialize() before new_trial()")
        m, w, u, h, head, old, old_w, _ = self._start
        self.m[:], self.w[:], self.u[:], self.h[:], self.old[:], self.old_w[:] = m, w, u, h, old, old_w
        self.head = head
        self.t, self.n_steps, self.status, self.message = 0.0, 0, STATUS_OK, "running"
        self.clipped = 0
        if self._stationary_start:
            self._burn_in()

    # ----------------------------------------------------------------- step
    def _run(self, mu):
        n = mu.size - 1
        rate = np.empty(n)
        mean_u = np.empty(n)
        refr = np.empty(n)
        head, done, ok, clipped = _advance_finite(
            *self._nargs, self.m, self.w, self.u, self.h, self.head, self.old, self.old_w, self.own, self.size,
            self.counts == "poisson", mu, rate, mean_u, refr, self._stack, self._xbuf)
        self.head = int(head)
        self.clipped += int(clipped)
        self._mu_now = float(mu[done])
        return rate[:done], mean_u[:done], refr[:done], bool(ok), done

    def _advance_impl(self, mu, sigma):
        rate, mean_u, refr, ok, done = self._run(mu)
        msg = "" if ok else f"non-finite rate or potential at t = {self.t + done * self.dt:g} ms"
        return rate, mean_u, refr, (ok, msg)

    # ------------------------------------------------------------ observers
    def _corrected(self) -> np.ndarray:
        """Masses ``m + c w`` (ordered by age, last bin last) that sum to one."""
        idx = (self.head + np.arange(self.n_bins)) % self.n_bins
        m = np.append(self.m[idx], self.old[0])
        w = np.append(self.w[idx], self.old_w[0])
        wt = float(w.sum())
        if wt > ZERO_VARIANCE:
            return m + (1.0 - float(m.sum())) / wt * w
        total = float(m.sum())
        return m / total if total > 0 else m

    def _ordered(self) -> tuple[np.ndarray, np.ndarray]:
        idx = (self.head + np.arange(self.n_bins)) % self.n_bins
        return self._corrected(), np.append(self.u[idx], self.old[1])

    def mass(self) -> float:
        """Total of the corrected age structure (1 up to round-off)."""
        return float(self._corrected().sum())

    def tracked_mass(self) -> float:
        """Sum of the expected fractions ``m_j`` before the correction (its distance from 1 is
        the finite-size error of the age structure, of order ``1/sqrt(N)``)."""
        return float(self.m.sum() + self.old[0])

    def diagnostics(self) -> dict:
        return {**super().diagnostics(), "n_neurons": self.size, "counts": self.counts,
                "burn_in_ms": self.burn_in, "clipped_steps": self.clipped}

