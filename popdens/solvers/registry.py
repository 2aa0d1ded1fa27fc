"""The registry of density solvers: method names, classes and the default per noise model.

``METHODS`` maps method names to solver classes; ``DEFAULT_METHOD`` maps the
noise model to the solver used when no method is given.
"""

from __future__ import annotations

from ..model.noise import EscapeNoise, WhiteNoise
from ..model.synaptic import ColouredNoise
from ._base import SolverBase
from .fokker_planck import FokkerPlanckSolver
from .refractory import RefractoryDensitySolver

__all__ = ["METHODS", "DEFAULT_METHOD", "SolverBase", "FokkerPlanckSolver", "RefractoryDensitySolver", "resolve_method"]

METHODS: dict[str, type[SolverBase]] = {
    "refractory-density": RefractoryDensitySolver,
    "fokker-planck": FokkerPlanckSolver,
}

DEFAULT_METHOD: dict[type, str] = {
    EscapeNoise: "refractory-density",
    WhiteNoise: "fokker-planck",
    ColouredNoise: "fokker-planck",
}

#: Noise models each method solves (coloured noise through its white-noise equivalent).
NOISE_OF_METHOD: dict[str, tuple[type, ...]] = {
    "refractory-density": (EscapeNoise,),
    "fokker-planck": (WhiteNoise, ColouredNoise),
}


def resolve_method(population, method) -> type[SolverBase]:
    """Solver class for ``method`` (a name, a class or None for the default)."""
    noise_type = type(population.noise)
    if method is None:
        if noise_type not in DEFAULT_METHOD:
            raise ValueError(f"no density solver is available for {noise_type.__name__} yet")
        method = DEFAULT_METHOD[noise_type]
    if isinstance(method, type) and issubclass(method, SolverBase):
        return method
    if method not in METHODS:
        raise ValueError(f"`method` must be one of {sorted(METHODS)}, got {method!r}")
    if noise_type not in NOISE_OF_METHOD[method]:
        raise ValueError(
            f"`method` {method!r} solves {' or '.join(t.__name__ for t in NOISE_OF_METHOD[method])} "
            f"populations, but the population has {noise_type.__name__}"
        )
    return METHODS[method]

