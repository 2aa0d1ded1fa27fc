"""Time-domain density solvers: the solver contract, the refractory-density (escape noise) and
Fokker--Planck (white noise) solvers, their grids, the method registry, and the :func:`simulate`
front end that owns time grids, recording and progress."""

from .registry import DEFAULT_METHOD, METHODS, resolve_method
from ._base import SolverBase
from .fokker_planck import FokkerPlanckSolver
from .refractory import RefractoryDensitySolver
from .frontend import simulate

__all__ = [
    "DEFAULT_METHOD", "FokkerPlanckSolver", "METHODS", "RefractoryDensitySolver", "SolverBase",
    "resolve_method", "simulate",
]
