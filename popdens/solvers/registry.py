"""The registry of density solvers: method names, classes and the default per noise model.

``METHODS`` maps method names to solver classes; ``DEFAULT_METHOD`` maps the
noise model to the solver used when no method is given; ``FINITE_SIZE_METHOD``
maps the noise model to the solver of a population of ``n`` neurons
(``simulate(..., n=...)``).
"""

from __future__ import annotations

from ..model.conductance import ConductanceNoise
from ..model.noise import EscapeNoise, WhiteNoise
from ..model.shot import ShotNoise
from ..model.synaptic import ColouredNoise
from ._base import SolverBase
from .fokker_planck import FokkerPlanckSolver
from .jump_density import JumpDensitySolver
from .mesoscopic import MesoscopicSolver
from .refractory import RefractoryDensitySolver

__all__ = ["METHODS", "DEFAULT_METHOD", "FINITE_SIZE_METHOD", "SolverBase", "FokkerPlanckSolver", "JumpDensitySolver",
           "MesoscopicSolver", "RefractoryDensitySolver", "resolve_method", "resolve_finite_method"]

METHODS: dict[str, type[SolverBase]] = {
    "refractory-density": RefractoryDensitySolver,
    "fokker-planck": FokkerPlanckSolver,
    "jump-density": JumpDensitySolver,
}

DEFAULT_METHOD: dict[type, str] = {
    EscapeNoise: "refractory-density",
    WhiteNoise: "fokker-planck",
    ColouredNoise: "fokker-planck",
    ShotNoise: "jump-density",
    ConductanceNoise: "fokker-planck",
}

#: Noise models each method solves (coloured noise through its white-noise equivalent, conductance input
#: with voltage-dependent drift and diffusion).
NOISE_OF_METHOD: dict[str, tuple[type, ...]] = {
    "refractory-density": (EscapeNoise,),
    "fokker-planck": (WhiteNoise, ColouredNoise, ConductanceNoise),
    "jump-density": (ShotNoise,),
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



#: Solver of a finite population (``n`` neurons) per noise model.  White noise has none yet:
#: its finite populations are simulated by the Monte Carlo twin.
FINITE_SIZE_METHOD: dict[type, type[SolverBase]] = {
    EscapeNoise: MesoscopicSolver,
}


def resolve_finite_method(population, method=None) -> type[SolverBase]:
    """Solver class for a finite population of ``population`` (``method``: None or its name)."""
    noise_type = type(population.noise)
    if noise_type not in FINITE_SIZE_METHOD:
        raise ValueError(f"`n`: finite-size integration is available for escape noise only; this population has "
                         f"{noise_type.__name__} (simulate its {noise_type.__name__} neurons with "
                         "popdens.montecarlo, or leave `n` unset for the infinite population)")
    cls = FINITE_SIZE_METHOD[noise_type]
    if method is not None and method != cls.method_name and method is not cls:
        raise ValueError(f"`method` = {method!r} is not a finite-size solver; with `n` given use "
                         f"{cls.method_name!r} or leave `method` unset")
    return cls
