"""Refractory-density (age-structured) solver for escape-noise populations.

State
-----
The population is described by the probability mass :math:`m_j` of
neurons whose age (time since their last spike) is :math:`a_j = (j + 1/2)\\,\\Delta t`
(spikes are spread over the step in which they occur, so on average a
neuron that fired in the last step has age dt/2),
on Lagrangian age bins that move with time: one step later, every bin is
one bin older, so there is no numerical diffusion in age.  Each bin carries
its own membrane potential :math:`u_j`, integrated from ``reset`` under the
actual input history (held at reset during the absolute refractory period).
The last bin collects all neurons older than ``max_age``; neurons entering
it are merged with mass-weighted potential, so total mass is conserved to
round-off.

Step
----
Over one step each bin survives with probability

.. math:: s_j = \\exp\\Big(-\\int h(u_j(t))\\,dt\\Big)

(not :math:`1 - h\\,\\Delta t`), the integral evaluated by the trapezoidal rule
over the part of the step that lies after the refractory period.  The mass
that fires, :math:`\\sum_j m_j (1 - s_j)`, is the population activity of the
step and re-enters at age 0.  The potential uses the exact exponential step
for the LIF (exact for a drive linear within the step), the exact step for
the PIF and Heun's method for other drifts.  With a spike cut-off (EIF,
QIF, custom with ``cutoff``) a bin whose potential reaches the cut-off fires
entirely.

References
----------
Gerstner, W. (2000). Population dynamics of spiking neurons: fast
transients, asynchronous states, and locking. Neural Comput. 12:43.
Chizhov, A. V. & Graham, L. J. (2007). Population model of hippocampal
pyramidal neurons, linking a refractory density approach to conductance-based
neurons. Phys. Rev. E 75:011924.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from .. import _validation as v
from ..exceptions import ConvergenceError
from ..model._kernels import MS_TO_S, NO_REFCOUNT, drift_value, hazard_value, survival
from ..model.adaptation import KIND_CURRENT, step_args
from ..model.neurons import CODE_LIF, CODE_PIF
from ._age_step import AGE_TOL, _bin_step, _newborn, _refire_survival
from ._base import SolverBase
from ._refractory_adapting import CLOSURES, advance_adapting, stationary_profile

__all__ = ["RefractoryDensitySolver"]

#: Default span of explicit age bins beyond the refractory period, in
#: membrane time constants.  For the LIF the potentials of neurons of
#: different ages converge as exp(-age/tau_m) and the error of merging them
#: into the last bin (nonlinearity of the hazard) falls as its square:
#: measured in the benchmark, 5e-5 Hz RMS at 6 tau_m and 7e-9 Hz at 10 tau_m,
#: but 1e-3 Hz at 6 tau_m under a strong 40 Hz modulation, comparable to the
#: dt = 0.1 ms error.  10 tau_m keeps the merge error far below the
#: time-step error in every case we measured.
DEFAULT_MEMORY_TAUS = 10.0
#: Iterations and tolerance for the stationary potential of the last bin.
OLD_BIN_MAX_ITER = 10_000
OLD_BIN_TOL = 1e-13
#: Accuracy guard: largest hazard x dt (dimensionless) among bins holding at
#: least GUARD_MASS of the population.  Measured (LIF, exponential escape,
#: stationary rate against a scipy solution of renewal theory, 10 cases):
#: relative rate error 3.1e-4 at h dt = 0.48, 8.5e-4 at 0.69, 1.2e-3 at 0.97,
#: 1.9e-3 at 1.27, 4.9e-3 at 2.28, so the limit keeps it near 1e-3.
MAX_HAZARD_DT = 0.8
#: Hazard x dt aimed at by the suggested time step (error about 3e-4, measured as above).
TARGET_HAZARD_DT = 0.4
#: Accuracy guard: largest dt / tau_m for models whose potential is integrated by
#: Heun's method (all but LIF and PIF, which use an exact step).  Measured (EIF,
#: 20 Hz sinusoidal drive, RMS rate error against dt = 0.0125 ms): 6e-3 at
#: dt / tau_m = 0.05, 1.5e-2 at 0.1, 0.15 at 0.25.
MAX_DT_OVER_TAU = 0.1
#: Bins holding less probability than this are ignored by the hazard guard.
GUARD_MASS = 1e-6


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def _advance(ncode, npar, nops, nargs, tau_m, reset, boundary, has_cutoff,
             hcode, hpar, hops, hargs, theta, uses_slope, tau_ref, dt,
             m, u, h, head, old, mu, out_rate, out_mean_u, out_refr, stack, xbuf):  # pragma: no cover
    """Advance ``len(mu) - 1`` steps in place; returns (head, steps_done, ok)."""
    n_bins = m.shape[0]
    e_dt = math.exp(-dt / tau_m)
    n = mu.shape[0] - 1
    for k in range(n):
        mu0 = mu[k]
        mu1 = mu[k + 1]
        fired = 0.0
        mean_u = 0.0
        refr = 0.0
        # oldest explicit bin (age index n_bins-1), merged into `old` below
        u_last = 0.0
        ms_last = 0.0
        for j in range(n_bins):
            p = head + j
            if p >= n_bins:
                p -= n_bins
            mj = m[p]
            un, hn, big_h = _bin_step(ncode, npar, nops, nargs, tau_m, reset, boundary, has_cutoff,
                                      hcode, hpar, hops, hargs, theta, uses_slope,
                                      (j + 0.5) * dt, tau_ref, dt, e_dt, u[p], h[p], mu0, mu1, stack, xbuf)
            s = survival(big_h)
            fired += mj * (1.0 - s)
            ms = mj * s
            if j == n_bins - 1:
                u_last = un
                ms_last = ms
            else:
                m[p] = ms
                u[p] = un
                h[p] = hn
                mean_u += ms * un
                if (j + 1.5) * dt < tau_ref - AGE_TOL * dt:
                    refr += ms
        # the bin of all older neurons (always past refractoriness)
        un, hn, big_h = _bin_step(ncode, npar, nops, nargs, tau_m, reset, boundary, has_cutoff,
                                  hcode, hpar, hops, hargs, theta, uses_slope,
                                  tau_ref + dt, tau_ref, dt, e_dt, old[1], old[2], mu0, mu1, stack, xbuf)
        s = survival(big_h)
        fired += old[0] * (1.0 - s)
        m_old = old[0] * s + ms_last
        if m_old > 0.0:
            u_old = (old[0] * s * un + ms_last * u_last) / m_old
        else:
            u_old = un
        d1 = 0.0
        if uses_slope:
            d1 = (drift_value(ncode, npar, nops, nargs, u_old, stack, xbuf) + mu1) / tau_m
        old[0] = m_old
        old[1] = u_old
        old[2] = hazard_value(hcode, hpar, hops, hargs, u_old, theta, d1, stack, xbuf)
        mean_u += m_old * u_old
        # newborn bin at age 0 takes the slot of the merged one
        head -= 1
        if head < 0:
            head += n_bins
        unb, hnb = _newborn(ncode, npar, nops, nargs, tau_m, reset, hcode, hpar, hops, hargs, theta,
                            uses_slope, tau_ref, dt, mu1, stack, xbuf)
        m[head] = fired
        u[head] = unb
        h[head] = hnb
        if 0.5 * dt < tau_ref - AGE_TOL * dt:
            refr += fired
        mean_u += fired * unb
        s_nb = _refire_survival(ncode, npar, nops, nargs, tau_m, reset, hcode, hpar, hops, hargs, theta,
                                uses_slope, tau_ref, dt, mu1, hnb, stack, xbuf)
        out_rate[k] = fired / s_nb / (dt * MS_TO_S)
        out_mean_u[k] = mean_u
        out_refr[k] = refr
        if not (math.isfinite(fired) and math.isfinite(mean_u)):
            return head, k + 1, False
    return head, n, True


@numba.njit(cache=True, nogil=True)
def _trajectory(ncode, npar, nops, nargs, tau_m, reset, boundary, has_cutoff,
                hcode, hpar, hops, hargs, theta, uses_slope, tau_ref, dt, n_bins, mu,
                stack, xbuf):  # pragma: no cover
    """Free trajectory from reset at constant ``mu``: potentials, cached hazards and survivals per bin."""
    us = np.empty(n_bins + 1)
    hs = np.empty(n_bins + 1)
    ss = np.empty(n_bins)
    e_dt = math.exp(-dt / tau_m)
    us[0], hs[0] = _newborn(ncode, npar, nops, nargs, tau_m, reset, hcode, hpar, hops, hargs, theta,
                            uses_slope, tau_ref, dt, mu, stack, xbuf)
    for j in range(n_bins):
        un, hn, big_h = _bin_step(ncode, npar, nops, nargs, tau_m, reset, boundary, has_cutoff,
                                  hcode, hpar, hops, hargs, theta, uses_slope,
                                  (j + 0.5) * dt, tau_ref, dt, e_dt, us[j], hs[j], mu, mu, stack, xbuf)
        us[j + 1] = un
        hs[j + 1] = hn
        ss[j] = math.exp(-big_h)
    return us, hs, ss


@numba.njit(cache=True, nogil=True)
def _old_bin_map(ncode, npar, nops, nargs, tau_m, reset, boundary, has_cutoff,
                 hcode, hpar, hops, hargs, theta, uses_slope, tau_ref, dt, U, H, mu, stack, xbuf):  # pragma: no cover
    e_dt = math.exp(-dt / tau_m)
    un, hn, big_h = _bin_step(ncode, npar, nops, nargs, tau_m, reset, boundary, has_cutoff,
                              hcode, hpar, hops, hargs, theta, uses_slope,
                              tau_ref + dt, tau_ref, dt, e_dt, U, H, mu, mu, stack, xbuf)
    return un, hn, math.exp(-big_h)


class RefractoryDensitySolver(SolverBase):
    """Age-structured population density for escape noise (see module docstring).

    Parameters
    ----------
    population : Population
        Neuron model with :class:`~popdens.EscapeNoise`.
    dt : float
        Time step and age-bin width (ms).
    max_age : float, optional
        Age (ms) beyond which neurons share one bin; default
        ``refractory + 10 tau_m``.  Lower it for speed when the input is
        weak (cost is proportional to it); raise it when neurons of different ages keep different
        potentials for long (e.g. a PIF with weak drive).
    adaptation_closure : {"spike-weighted", "quasi-renewal"}
        Adapting neurons only: how the adaptation left by spikes before the
        last one enters (see :mod:`popdens.solvers._refractory_adapting`):
        the mean adaptation of the neurons that fire (default) or the
        population mean (first-order quasi-renewal, Naud & Gerstner 2012).
    """

    method_name = "refractory-density"
    axis_name = "age (ms)"

    def __init__(self, population, dt: float, max_age: float | None = None,
                 adaptation_closure: str = "spike-weighted"):
        super().__init__(population, dt)
        nrn = population.neuron
        hz = population.noise.hazard
        if max_age is None:
            max_age = nrn.refractory + DEFAULT_MEMORY_TAUS * nrn.tau_m
        max_age = v.positive("max_age", max_age)
        n_bins = int(math.ceil(max_age / self.dt))
        n_bins = max(n_bins, int(math.floor(nrn.refractory / self.dt)) + 2)
        self.n_bins = n_bins
        self.max_age = n_bins * self.dt
        self._nargs = (
            nrn.code, np.ascontiguousarray(nrn.kernel_params, dtype=float), nrn.program[0], nrn.program[1],
            float(nrn.tau_m), float(nrn.reset), float(nrn.boundary), bool(nrn.has_cutoff),
            hz.code, np.ascontiguousarray(hz.kernel_params, dtype=float), hz.program[0], hz.program[1],
            float(nrn.threshold), bool(hz.uses_slope), float(nrn.refractory), self.dt,
        )
        size = max(nrn.program[0].size, hz.program[0].size) + 2
        self._stack = np.empty(size)
        self._xbuf = np.zeros(3)
        self.m = np.zeros(n_bins)
        self.u = np.full(n_bins, float(nrn.reset))
        self.h = np.zeros(n_bins)
        self.head = 0
        self.old = np.zeros(3)  # mass, potential, cached hazard of the last bin
        self._mu_now = 0.0
        if adaptation_closure not in CLOSURES:
            raise ValueError(f"`adaptation_closure` must be one of {sorted(CLOSURES)}, got {adaptation_closure!r}")
        self.adaptation_closure = adaptation_closure
        self._adapt = None
        if nrn.adapting:
            self._init_adaptation(nrn)

    # ----------------------------------------------------------------- adaptation
    def resolution_options(self) -> dict:
        return {"max_age": self.max_age}

    @property
    def order(self) -> int:
        """Order in dt: 2, or 1 with a subthreshold coupling of an adaptation current (its potential
        average ignores the reset within a spike's step; measured, DEVELOPERS.md)."""
        nrn = self.population.neuron
        return 1 if any(a.coupling_value != 0.0 for a in nrn.adaptation) else 2

    def _init_adaptation(self, nrn) -> None:
        """Quasi-renewal state (see :mod:`popdens.solvers._refractory_adapting`)."""
        self._adapt = step_args(nrn, self.dt)
        k = len(nrn.adaptation)
        self.st = np.zeros((k, self.n_bins + 1))
        self.mean_ad = np.zeros(k)
        self._fw = np.zeros(k)
        self.aux = np.zeros(1)

    def _profile(self, newborn_state, mu0):
        """Stationary age profile for a newborn adaptation state (bin 0 first); (fired, mean_u)."""
        m, u, h = np.empty(self.n_bins), np.empty(self.n_bins), np.empty(self.n_bins)
        st, old, fw = np.empty_like(self.st), np.empty(3), np.empty(self.st.shape[0])
        fired, mean_u, _ = stationary_profile(*self._nargs, *self._adapt, np.asarray(newborn_state, dtype=float),
                                              float(mu0), m, u, h, st, old, fw, self._stack, self._xbuf)
        return (m, u, h, st, old, fw), float(fired), float(mean_u)

    def _mean_residual(self, x, mu0):
        """Stationarity of the earlier-spike part ``x`` of the newborn adaptation state (mV).

        Returns the residual, the profile, the population means and the mean potential.
        """
        kinds, decay, coup, kick, rest = self._adapt
        prof, fired, ubar = self._profile(kick + x, mu0)
        u_end = ubar - fired * (prof[1][0] - self.population.neuron.reset)  # as in the step kernel
        # population mean at a step end, less this step's kicks
        excl = prof[3][:, :-1] @ prof[0] + prof[4][0] * prof[3][:, -1] - kick * fired
        if CLOSURES[self.adaptation_closure] == CLOSURES["spike-weighted"]:
            target = prof[5] / fired if fired > 0.0 else x
            mean = excl + kick * fired
        else:
            mean = x + kick * fired
            target = mean * decay + np.where(kinds == KIND_CURRENT,
                                             coup * (1.0 - decay) * (0.5 * (ubar + u_end) - rest), 0.0)
        return x - target, prof, mean, ubar

    def _initialize_adapting(self, mu0, initial) -> None:
        kinds, decay, coup, kick, rest = self._adapt
        self.head = 0
        self._mu_now = float(mu0)
        if isinstance(initial, str) and initial == "synchronous":
            (m, u, h, st, old, _), _, _ = self._profile(kick, mu0)
            self.m[:] = 0.0
            self.m[0] = 1.0
            self.old[:] = (0.0, old[1], old[2])
            self.mean_ad[:] = kick
            self.aux[0] = u[0]
        elif isinstance(initial, str) and initial not in ("stationary",):
            raise ValueError(f"`initial` must be 'stationary', 'synchronous' or an array, got {initial!r}")
        else:
            x = self._stationary_means(mu0)
            _, (m, u, h, st, old, _), mean, ubar = self._mean_residual(x, mu0)
            self.mean_ad[:] = mean
            self.aux[0] = ubar
            if isinstance(initial, str):
                self.m[:] = m
                self.old[:] = old
            else:
                mass = self._check_initial_density(initial)
                self.m[:] = mass[: self.n_bins]
                self.old[:] = (mass[self.n_bins], old[1], old[2])
                self.aux[0] = float(np.dot(mass[: self.n_bins], u) + mass[self.n_bins] * old[1])
        self.u[:] = u
        self.h[:] = h
        self.st[:] = st

    def _stationary_means(self, mu0) -> np.ndarray:
        """Earlier-spike part of the newborn adaptation state in the stationary state (root of the mean equations)."""
        from scipy.optimize import root

        x0 = np.zeros(self._adapt[0].size)
        sol = root(lambda x: self._mean_residual(x, mu0)[0], x0, method="hybr", options={"xtol": 1e-13})
        res = self._mean_residual(sol.x, mu0)[0]
        if not (sol.success or np.all(np.abs(res) <= 1e-9 * (1.0 + np.abs(sol.x)))):
            raise ConvergenceError(f"no stationary adaptation state found at `mu` = {mu0!r} mV: {sol.message}")
        return sol.x

    def _check_initial_density(self, initial) -> np.ndarray:
        dens = np.asarray(initial, dtype=float)
        if dens.shape != (self.n_bins + 1,):
            raise ValueError(f"`initial` age density must have shape ({self.n_bins + 1},) "
                             f"matching `axis`, got {dens.shape}")
        if not np.all(np.isfinite(dens)) or np.any(dens < 0) or dens.sum() <= 0:
            raise ValueError("`initial` age density must be finite, non-negative and not all zero")
        return dens / dens.sum()

    # ----------------------------------------------------------------- init
    def initialize(self, mu0: float, sigma0=None, initial="stationary") -> None:
        """Set the state at t = 0.

        ``initial`` is ``"stationary"`` (the exact stationary state of the
        discrete scheme at constant drive ``mu0``), ``"synchronous"`` (all
        neurons have just fired) or an array of age densities (1/ms) on the
        age bins ``axis`` (normalised here).  For adapting neurons the
        stationary state solves the quasi-renewal mean equations; an array
        keeps the stationary adaptation profile of each age and
        ``"synchronous"`` starts without earlier spikes.
        """
        if self._adapt is not None:
            self._initialize_adapting(mu0, initial)
            return
        us, hs, ss = _trajectory(*self._nargs, self.n_bins, float(mu0), self._stack, self._xbuf)
        self.head = 0
        self._mu_now = float(mu0)
        self.u[:] = us[: self.n_bins]
        self.h[:] = hs[: self.n_bins]
        if isinstance(initial, str) and initial == "stationary":
            surv = np.concatenate([[1.0], np.cumprod(ss)])  # survival to each bin start
            inflow = surv[self.n_bins]  # mass per unit m_0 entering the last bin each step
            U, H, s_old = self._old_bin_fixed_point(us[self.n_bins], hs[self.n_bins], float(mu0))
            explicit = surv[: self.n_bins]
            if 1.0 - s_old > 0.0:
                tail = inflow / (1.0 - s_old)
                m0 = 1.0 / (explicit.sum() + tail)
                self.m[:] = m0 * explicit
                self.old[:] = (m0 * tail, U, H)
            else:  # nobody ever fires: all mass has aged into the last bin
                self.m[:] = 0.0
                self.old[:] = (1.0, U, H)
        elif isinstance(initial, str) and initial == "synchronous":
            self.m[:] = 0.0
            self.m[0] = 1.0
            self.old[:] = (0.0, us[self.n_bins], hs[self.n_bins])
        elif isinstance(initial, str):
            raise ValueError(f"`initial` must be 'stationary', 'synchronous' or an array, got {initial!r}")
        else:
            mass = self._check_initial_density(initial)
            self.m[:] = mass[: self.n_bins]
            self.old[:] = (mass[self.n_bins], us[self.n_bins], hs[self.n_bins])

    def _old_bin_fixed_point(self, u_in: float, h_in: float, mu: float):
        """Stationary potential of the last bin: U = s(U) Phi(U) + (1 - s(U)) u_in."""
        U, H = u_in, h_in
        for _ in range(OLD_BIN_MAX_ITER):
            un, hn, s = _old_bin_map(*self._nargs, U, H, mu, self._stack, self._xbuf)
            # u_in is already the advanced potential of the bin that merges in
            U_new = s * un + (1.0 - s) * u_in
            # hazard cached at the merged potential, as in the step kernel
            H_new = float(self.population.noise.hazard.rate(
                U_new, self.population.neuron.threshold,
                self.population.neuron.velocity(U_new, mu)))
            if abs(U_new - U) <= OLD_BIN_TOL * max(1.0, abs(U)):
                U, H = U_new, H_new
                break
            U, H = U_new, H_new
        _, _, s = _old_bin_map(*self._nargs, U, H, mu, self._stack, self._xbuf)
        return U, H, s

    # ----------------------------------------------------------------- step
    def _advance_impl(self, mu, sigma):
        n = mu.size - 1
        rate = np.empty(n)
        mean_u = np.empty(n)
        refr = np.empty(n)
        if self._adapt is None:
            head, done, ok = _advance(*self._nargs, self.m, self.u, self.h, self.head, self.old, mu,
                                      rate, mean_u, refr, self._stack, self._xbuf)
        else:
            head, done, ok = advance_adapting(*self._nargs, *self._adapt, CLOSURES[self.adaptation_closure], self.m,
                                              self.u, self.h, self.st, self.head, self.old, self.mean_ad, self._fw,
                                              self.aux, mu, rate, mean_u, refr, self._stack, self._xbuf)
        self.head = int(head)
        self._mu_now = float(mu[done])
        msg = "" if ok else f"non-finite rate or potential at t = {self.t + done * self.dt:g} ms"
        return rate[:done], mean_u[:done], refr[:done], (bool(ok), msg)

    # ------------------------------------------------------------ observers
    def _ordered(self) -> tuple[np.ndarray, np.ndarray]:
        idx = (self.head + np.arange(self.n_bins)) % self.n_bins
        return np.append(self.m[idx], self.old[0]), np.append(self.u[idx], self.old[1])

    @property
    def axis(self) -> np.ndarray:
        """Age (ms) of each bin, ``(j + 1/2) dt``; the last bin holds every neuron older than ``max_age``."""
        return (np.arange(self.n_bins + 1) + 0.5) * self.dt

    def density(self) -> np.ndarray:
        """Age density (1/ms) on :attr:`axis` (the last entry: mass of the last bin / dt)."""
        m, _ = self._ordered()
        return m / self.dt

    def potentials(self) -> np.ndarray:
        """Membrane potential (mV) of each age bin."""
        return self._ordered()[1]

    def mass(self) -> float:
        return float(self.m.sum() + self.old[0])

    def mean_potential(self) -> float:
        m, u = self._ordered()
        return float(np.dot(m, u))

    def refractory_fraction(self) -> float:
        m, _ = self._ordered()
        ages = self.axis
        tau_ref = self.population.neuron.refractory
        return float(m[:-1][ages[:-1] < tau_ref - AGE_TOL * self.dt].sum())

    def adaptation_state(self) -> tuple[np.ndarray, np.ndarray]:
        """Adaptation of each age bin on :attr:`axis` (shape ``(K, n_bins + 1)``, mV) and the population means (K,)."""
        if self._adapt is None:
            return np.zeros((0, self.n_bins + 1)), np.zeros(0)
        idx = np.append((self.head + np.arange(self.n_bins)) % self.n_bins, self.n_bins)
        return self.st[:, idx].copy(), self.mean_ad.copy()

    def instantaneous_rate(self, mu: float, sigma=None) -> float:
        nrn = self.population.neuron
        hz = self.population.noise.hazard
        m, u = self._ordered()
        ages = self.axis
        free = ages >= nrn.refractory - AGE_TOL * self.dt
        free[-1] = True
        st, _ = self.adaptation_state()
        kinds = self._adapt[0] if self._adapt is not None else np.zeros(0, dtype=int)
        w = st[kinds == KIND_CURRENT].sum(axis=0)
        theta = nrn.threshold + st[kinds != KIND_CURRENT].sum(axis=0)
        hval = hz.rate(u, theta, nrn.velocity(u, mu - w)) * free
        if nrn.has_cutoff:
            hval = np.where(u >= nrn.boundary, np.inf, hval)
        with np.errstate(invalid="ignore"):
            r = float(np.sum(np.where(m > 0, m * hval, 0.0)))
        return r

    def diagnostics(self) -> dict:
        out = {"n_bins": self.n_bins + 1, "max_age_ms": self.max_age}
        if self._adapt is not None:
            out["adaptation_closure"] = self.adaptation_closure
        return out

    def accuracy_issues(self, mu, sigma=None) -> list[tuple[str, str]]:
        """``dt`` against the largest hazard of bins holding mass, and against ``tau_m``."""
        issues = []
        hz = np.append(self.h, self.old[2])
        held = np.append(self.m, self.old[0]) > GUARD_MASS
        if np.any(held):
            hmax = float(np.max(hz[held]))
            x = hmax * self.dt * MS_TO_S
            if not math.isfinite(x):
                issues.append(("dt", f"the hazard of neurons holding probability is not finite ({hmax!r} Hz)"))
            elif x > MAX_HAZARD_DT:
                k = math.ceil(x / TARGET_HAZARD_DT)
                issues.append(("dt", f"`dt` = {self.dt:g} ms is too coarse for the hazard: the largest hazard "
                                     f"{hmax:.4g} Hz times dt is {x:.3g} (limit {MAX_HAZARD_DT:g}); "
                                     f"use dt = {self.dt / k:.4g} ms or smaller"))
        nrn = self.population.neuron
        if nrn.code not in (CODE_LIF, CODE_PIF) and self.dt > MAX_DT_OVER_TAU * nrn.tau_m:
            k = math.ceil(self.dt / (MAX_DT_OVER_TAU * nrn.tau_m))
            issues.append(("dt_tau_m", f"`dt` = {self.dt:g} ms is more than {MAX_DT_OVER_TAU:g} `tau_m` "
                                       f"({nrn.tau_m:g} ms) for a potential integrated by Heun's method; "
                                       f"use dt = {self.dt / k:.4g} ms or smaller"))
        return issues
