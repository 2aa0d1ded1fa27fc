"""Networks of coupled populations: the circuit specification, mean-field time integration, the
spiking twin's front end, fixed points, linear stability and stability maps."""

from .circuit import Circuit, Cohort, Pathway, PoissonBackground
from .integrate import simulate_network
from .linear_stability import Stability, characteristic_matrix, count_roots, stability
from .maps import StabilityMap, stability_map
from .result import CircuitResult
from .states import FixedPoint, fixed_points, solver_gain
from .twin import montecarlo_network

__all__ = [
    "Circuit", "CircuitResult", "Cohort", "FixedPoint", "Pathway", "PoissonBackground", "Stability",
    "StabilityMap", "characteristic_matrix", "count_roots", "fixed_points", "montecarlo_network",
    "simulate_network", "solver_gain", "stability", "stability_map",
]
