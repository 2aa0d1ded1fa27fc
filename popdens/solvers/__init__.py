"""Time-domain density solvers: the solver contract, the refractory-density (escape noise) and
Fokker--Planck (white noise) solvers, their grids, the method registry, and the :func:`simulate`
front end that owns time grids, recording and progress.

Names are imported on first use (PEP 562): the solvers load numba, which a module needing only
:mod:`._recording` (the scenario schema) should not pay for."""

from __future__ import annotations

from .._lazy import lazy_names

_LAZY = {
    "DEFAULT_METHOD": "registry", "METHODS": "registry", "resolve_method": "registry",
    "SolverBase": "_base",
    "FokkerPlanckSolver": "fokker_planck",
    "RefractoryDensitySolver": "refractory",
    "simulate": "frontend",
}

__all__ = [
    "DEFAULT_METHOD", "FokkerPlanckSolver", "METHODS", "RefractoryDensitySolver", "SolverBase",
    "resolve_method", "simulate",
]

__getattr__, __dir__ = lazy_names(__name__, _LAZY, globals())
