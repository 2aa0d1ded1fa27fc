"""Shared machinery of continuation: the fixed-point equations of a circuit as a function of its
parameters, and a pseudo-arclength tracer of solution curves of ``G(u) = 0``.

Pseudo-arclength continuation (Keller 1977, in *Applications of Bifurcation Theory*, Academic
Press; Allgower & Georg 1990, *Numerical Continuation Methods*, Springer): from a point ``u`` with
unit tangent ``t`` (both in scaled coordinates ``u / scale``), predict ``u + ds t`` and correct
by Newton's method on ``G(u) = 0`` together with ``t . (u - u_pred) = 0``; the next tangent is
the null vector of the Jacobian ``G'(u)``, oriented like the previous one.  The step ``ds``
grows after easy corrections and shrinks after hard ones or sharp turns, so folds are passed
without special treatment.
"""

from __future__ import annotations

import math
from typing import Callable

import numpy as np

from .circuit import Circuit
from .states import FixedPoint, _rates_of

#: Relative step of the forward differences of every Jacobian (the residuals are smooth to ~1e-12).
FD_REL = 1e-6
#: Floor (Hz) of the rate scale of the difference steps (rates near 0 use forward steps anyway).
FD_RATE_FLOOR = 1e-2
#: Newton iterations per correction, and the scaled step below which Newton has converged.
NEWTON_ITER = 10
NEWTON_TOL = 1e-11
#: Largest angle (rad) between successive tangents; a sharper turn halves the step.
TURN_LIMIT = 0.25
#: Newton iterations below / above which the step grows (x1.6) / shrinks (x0.5).
EASY, HARD = 3, 6
#: Entries kept in the cache of circuits built at given parameter values.
CIRCUIT_CACHE = 64


class FixedPointEquations:
    """``F(A, p) = A - Phi(A; p)`` (Hz) of a circuit whose parameters ``p`` are set by ``params``.

    Parameters
    ----------
    circuit : Circuit
        The base circuit.
    params : sequence of CircuitParameter
    gain : callable
        ``gain(population, mu) -> rate`` (Hz), as for :func:`fixed_points`.
    """

    def __init__(self, circuit: Circuit, params, gain: Callable):
        self.base = circuit
        self.params = tuple(params)
        self.gain = gain
        self.n = circuit.n
        self._cache: dict = {}

    def circuit_at(self, p) -> Circuit:
        key = tuple(float(x) for x in np.atleast_1d(p))
        c = self._cache.get(key)
        if c is None:
            c = self.base
            for par, x in zip(self.params, key):
                c = par.apply(c, x)
            if len(self._cache) >= CIRCUIT_CACHE:
                self._cache.pop(next(iter(self._cache)))
            self._cache[key] = c
        return c

    def residual(self, a, p) -> np.ndarray:
        """``A - Phi(A)`` (Hz); NaN where the gain cannot be evaluated."""
        a = np.asarray(a, dtype=float)
        try:
            return a - _rates_of(self.circuit_at(p), self.gain, a)
        except (ValueError, ArithmeticError):
            return np.full(self.n, np.nan)

    def steps(self, a) -> np.ndarray:
        """Forward-difference steps for the rates: positive, relative to the rate (Hz)."""
        return FD_REL * np.maximum(np.abs(np.asarray(a, dtype=float)), FD_RATE_FLOOR)

    def jac_rates(self, a, p, f0=None) -> np.ndarray:
        """``dF/dA`` (n x n) by forward differences."""
        a = np.asarray(a, dtype=float)
        f0 = self.residual(a, p) if f0 is None else f0
        h = self.steps(a)
        out = np.empty((self.n, self.n))
        for k in range(self.n):
            e = a.copy()
            e[k] += h[k]
            out[:, k] = (self.residual(e, p) - f0) / h[k]
        return out

    def jac_params(self, a, p, f0=None, scale=None) -> np.ndarray:
        """``dF/dp`` (n x len(p)) by forward differences (steps relative to ``scale``)."""
        p = np.atleast_1d(np.asarray(p, dtype=float))
        f0 = self.residual(a, p) if f0 is None else f0
        scale = np.ones(p.size) if scale is None else np.asarray(scale, dtype=float)
        out = np.empty((self.n, p.size))
        for j in range(p.size):
            h = FD_REL * max(abs(p[j]), scale[j])
            q = p.copy()
            q[j] += h
            out[:, j] = (self.residual(a, q) - f0) / h
        return out

    def solve(self, a0, p, *, fixed: int | None = None, free_param: int | None = None):
        """Newton's method for ``F(A, p) = 0`` at fixed ``p`` from ``a0``.

        With ``fixed = k`` and ``free_param = j`` the rate ``A_k`` is held at ``a0[k]`` and the
        parameter ``p_j`` is solved for instead (used to locate folds).  Returns ``(A, p)`` or
        ``None`` if Newton fails.
        """
        a = np.array(a0, dtype=float)
        p = np.atleast_1d(np.array(p, dtype=float))
        scale_a = np.maximum(np.abs(a), 1.0)
        for _ in range(NEWTON_ITER + 4):
            f = self.residual(a, p)
            if not np.all(np.isfinite(f)):
                return None
            if np.max(np.abs(f) / scale_a) < 1e-13:
                return a, p
            ja = self.jac_rates(a, p, f)
            if fixed is None:
                try:
                    da = np.linalg.solve(ja, -f)
                except np.linalg.LinAlgError:
                    return None
                dp = 0.0
            else:
                jm = ja.copy()
                jm[:, fixed] = self.jac_params(a, p, f, scale=np.maximum(np.abs(p), 1e-3))[:, free_param]
                try:
                    d = np.linalg.solve(jm, -f)
                except np.linalg.LinAlgError:
                    return None
                dp, d[fixed] = d[fixed], 0.0
                da = d
            if not np.all(np.isfinite(da)):
                return None
            a = a + da
            if fixed is not None:
                p[free_param] += dp
            a = np.maximum(a, 0.0)  # rates are non-negative; Phi >= 0 keeps the solution there
            p_done = fixed is None or abs(dp) < 1e-13 * max(1.0, abs(p[free_param]))
            if np.max(np.abs(da) / scale_a) < 1e-12 and p_done:
                f = self.residual(a, p)
                if np.all(np.isfinite(f)) and np.max(np.abs(f) / scale_a) < 1e-9:
                    return a, p
        f = self.residual(a, p)
        if np.all(np.isfinite(f)) and np.max(np.abs(f) / scale_a) < 1e-9:
            return a, p
        return None

    def state(self, a, p) -> FixedPoint:
        """The :class:`FixedPoint` at rates ``a`` (Hz) and parameters ``p``."""
        c = self.circuit_at(p)
        a = np.asarray(a, dtype=float)
        mu, sg = c.stationary_input(a)
        res = float(np.max(np.abs(self.residual(a, p))))
        return FixedPoint(c.names, a.copy(), mu, sg, res, c.noise_time_constant(a))


def null_vector(jac: np.ndarray, t_prev: np.ndarray | None) -> np.ndarray:
    """Unit null vector of an ``m x (m+1)`` matrix, oriented along ``t_prev`` when given."""
    m = jac.shape[0]
    if t_prev is not None:
        a = np.vstack([jac, t_prev])
        rhs = np.zeros(m + 1)
        rhs[-1] = 1.0
        try:
            t = np.linalg.solve(a, rhs)
            if np.all(np.isfinite(t)) and np.linalg.norm(t) > 0:
                return t / np.linalg.norm(t)
        except np.linalg.LinAlgError:
            pass
    _, _, vt = np.linalg.svd(jac)
    t = vt[-1]
    if t_prev is not None and np.dot(t, t_prev) < 0:
        t = -t
    return t / np.linalg.norm(t)


class Tracer:
    """Pseudo-arclength tracer of a curve ``G(u) = 0``, ``G: R^(m+1) -> R^m`` (module docstring).

    Parameters
    ----------
    fun : callable
        ``fun(u) -> G(u)`` (NaN entries: cannot be evaluated there).
    jac : callable
        ``jac(u, g) -> dG/du`` (m x (m+1)) given ``g = G(u)``.
    u, t : ndarray
        A point on the curve and a direction (unscaled; ``t`` is rescaled and normalised).
    scale : ndarray
        Scale of each coordinate; the arclength is measured in ``u / scale``.
    step, max_step, min_step : float
        First, largest and smallest step (scaled arclength).
    tol : callable
        ``tol(u)``: residual accepted for each equation at ``u``.
    """

    def __init__(self, fun, jac, u, t, scale, step, max_step, min_step, tol):
        self.fun, self.jac = fun, jac
        self.scale = np.asarray(scale, dtype=float)
        self.u = np.asarray(u, dtype=float)
        self.last_jac = jac(self.u, fun(self.u))
        self.t = null_vector(self.last_jac * self.scale, np.asarray(t, dtype=float) / self.scale)
        self.ds = float(step)
        self.max_step, self.min_step = float(max_step), float(min_step)
        self.tol = tol
        self.last_step = 0.0

    def correct(self, u_from, t_from, s):
        """The curve point on the plane ``t_from . (u - u_from)/scale = s``, from the predictor
        ``u_from + s t_from``.  Returns ``(u, iterations)`` or None."""
        z0 = u_from / self.scale
        z = z0 + s * t_from
        j = None
        for it in range(1, NEWTON_ITER + 1):
            u = z * self.scale
            g = self.fun(u)
            if not np.all(np.isfinite(g)):
                return None
            if j is None or it > 2:
                j = self.jac(u, g)
                if not np.all(np.isfinite(j)):
                    return None
            a = np.vstack([j * self.scale, t_from])
            rhs = np.concatenate([-g, [s - np.dot(t_from, z - z0)]])
            try:
                dz = np.linalg.solve(a, rhs)
            except np.linalg.LinAlgError:
                return None
            if not np.all(np.isfinite(dz)) or np.linalg.norm(dz) > max(4.0 * abs(s), 1e-6) + 0.1:
                return None
            z = z + dz
            if np.linalg.norm(dz) < NEWTON_TOL:
                u = z * self.scale
                g = self.fun(u)
                if np.all(np.isfinite(g)) and np.all(np.abs(g) <= self.tol(u)):
                    return u, it
        u = z * self.scale
        g = self.fun(u)
        if np.all(np.isfinite(g)) and np.all(np.abs(g) <= self.tol(u)):
            return u, NEWTON_ITER
        return None

    def tangent_at(self, u, t_prev) -> np.ndarray:
        """Unit tangent (scaled) at ``u`` oriented along ``t_prev``; keeps the Jacobian in ``last_jac``."""
        self.last_jac = self.jac(u, self.fun(u))
        return null_vector(self.last_jac * self.scale, t_prev)

    def step(self) -> bool:
        """Advance one accepted step; False when the step fell below ``min_step``."""
        while self.ds >= self.min_step:
            res = self.correct(self.u, self.t, self.ds)
            if res is None:
                self.ds *= 0.5
                continue
            u_new, its = res
            t_new = self.tangent_at(u_new, self.t)
            turn = math.acos(min(1.0, max(-1.0, float(np.dot(t_new, self.t)))))
            if turn > TURN_LIMIT and self.ds > 4 * self.min_step:
                self.ds *= 0.5
                continue
            self.last_step = self.ds
            self.u, self.t = u_new, t_new
            if its <= EASY and turn < 0.5 * TURN_LIMIT:
                self.ds = min(self.ds * 1.6, self.max_step)
            elif its >= HARD:
                self.ds *= 0.5
            return True
        return False
