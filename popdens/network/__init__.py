"""Networks of coupled populations: the circuit specification, mean-field and finite-size time
integration, the spiking twin's front end, fixed points, linear stability, stability maps and the
predicted spectral matrix of finite cohorts."""

from .circuit import Circuit, Cohort, Pathway, PoissonBackground
from .integrate import simulate_network
from .linear_stability import Stability, characteristic_matrix, count_roots, stability
from .maps import StabilityMap, stability_map
from .result import CircuitResult
from .spectra import spectral_matrix
from .states import FixedPoint, fixed_points, solver_gain
from .twin import montecarlo_network

__all__ = [
    "Circuit", "CircuitResult", "Cohort", "FixedPoint", "Pathway", "PoissonBackground", "Stability",
    "StabilityMap", "characteristic_matrix", "count_roots", "fixed_points", "montecarlo_network",
    "simulate_network", "solver_gain", "spectral_matrix", "stability", "stability_map",
]
