"""The solver contract shared by the density solvers.

Rules for implementers
----------------------
1. A solver is constructed from a population, the internal step ``dt``
   (ms) and method options; it owns its state and never prints, plots,
   writes files or chooses output times.
2. ``initialize(mu0, sigma0, initial)`` sets the state at t = 0 for the
   initial drive ``mu0`` (mV) (and noise ``sigma0`` for diffusive noise).
3. ``advance(mu, sigma)`` takes the drive at the step boundaries of a block
   of steps, ``mu`` of shape ``(n + 1,)`` (mV, from the current time), and
   advances ``n`` steps; the drive is linear within each step.  A jump at a
   step boundary is passed by ending one call with the value before it and
   starting the next with the value after it (the front ends split their
   blocks at the jumps the drive lists, ``Drive.jump_times``).  It calls
   the private ``_advance_impl`` which returns per-step arrays ``rate`` (Hz, mean over each step), ``mean_u``
   (mV, at the step end), ``refractory`` (fraction at the step end) and a
   ``(success, message)`` pair.  ``advance`` does the bookkeeping (time,
   counters, status).
4. Numerical failure (non-finite values, loss of mass) is reported through
   ``status``/``message``; misuse raises ``ValueError``.
5. ``density()`` returns the current density on ``axis`` (for snapshots),
   ``mass()`` the total probability (1 up to round-off).
6. ``accuracy_issues(mu, sigma)`` names settings that are too coarse for the
   current state (checked after initialisation and after every block).
"""

from __future__ import annotations

import numpy as np

from ..result import STATUS_FAILED, STATUS_OK

__all__ = ["SolverBase"]


class SolverBase:
    """Base class of density solvers (see the module docstring for the contract)."""

    #: Name used in results and in the method registry.
    method_name = "base"
    #: Label of the density axis.
    axis_name = ""
    #: Order of convergence in dt (the error control of ``simulate`` uses it).
    order = 2

    def __init__(self, population, dt: float):
        self.population = population
        self.dt = float(dt)
        self.t = 0.0
        self.n_steps = 0
        self.status = STATUS_OK
        self.message = "running"

    # -- to implement ----------------------------------------------------
    def initialize(self, mu0: float, sigma0: float | None, initial) -> None:  # pragma: no cover
        raise NotImplementedError

    def _advance_impl(self, mu: np.ndarray, sigma: np.ndarray | None):  # pragma: no cover
        raise NotImplementedError

    def instantaneous_rate(self, mu: float, sigma: float | None) -> float:  # pragma: no cover
        raise NotImplementedError

    def mean_potential(self) -> float:  # pragma: no cover
        raise NotImplementedError

    def refractory_fraction(self) -> float:  # pragma: no cover
        raise NotImplementedError

    def density(self) -> np.ndarray:  # pragma: no cover
        raise NotImplementedError

    @property
    def axis(self) -> np.ndarray:  # pragma: no cover
        raise NotImplementedError

    def mass(self) -> float:  # pragma: no cover
        raise NotImplementedError

    def diagnostics(self) -> dict:
        return {}

    def resolution_options(self) -> dict:
        """Options that reproduce this solver's resolution other than ``dt`` (a companion run at
        another step then differs in ``dt`` only)."""
        return {}

    def plan(self, mu: np.ndarray, sigma: np.ndarray | None) -> None:
        """Samples of the drive ``mu`` (and noise ``sigma``, mV) over the coming run, before
        :meth:`initialize`, for solvers that choose their resolution from them (default: ignored)."""

    def accuracy_issues(self, mu: np.ndarray, sigma: np.ndarray | None) -> list[tuple[str, str]]:
        """Settings too coarse for the current state and the drive ``mu`` (mV) just used.

        Returns ``(setting, message)`` pairs; the front end turns each into one
        :class:`~popdens.exceptions.AccuracyWarning` and records it.  Called
        between compiled blocks, never inside them, so it costs nothing per step.
        """
        return []

    # -- bookkeeping -------------------------------------------------------
    def advance(self, mu: np.ndarray, sigma: np.ndarray | None = None):
        """Advance ``len(mu) - 1`` steps; see the module docstring."""
        if self.status != STATUS_OK:
            raise RuntimeError(f"solver has failed before: {self.message}")
        mu = np.ascontiguousarray(mu, dtype=float)
        n = mu.size - 1
        if sigma is not None:
            sigma = np.ascontiguousarray(sigma, dtype=float)
        rate, mean_u, refr, (ok, msg) = self._advance_impl(mu, sigma)
        done = rate.size
        self.n_steps += done
        self.t += done * self.dt
        if not ok:
            self.status = STATUS_FAILED
            self.message = msg
        elif done != n:  # pragma: no cover - defensive
            self.status = STATUS_FAILED
            self.message = f"solver advanced {done} of {n} steps"
        return rate, mean_u, refr
