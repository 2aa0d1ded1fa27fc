"""Networks of coupled populations: the circuit specification, mean-field time integration, the
spiking twin's front end, fixed points, linear stability, stability maps, and continuation (branches of
fixed points with their folds and oscillation onsets; boundary curves in a parameter plane)."""

from .boundaries import BoundaryCurve, BoundaryCurves, boundary_curves
from .circuit import Circuit, Cohort, Pathway, PoissonBackground
from .continuation import BifurcationDiagram, Branch, SpecialPoint, bifurcation_diagram
from .integrate import simulate_network
from .linear_stability import Stability, characteristic_matrix, count_roots, stability
from .maps import StabilityMap, stability_map
from .parameters import CircuitParameter
from .result import CircuitResult
from .states import FixedPoint, fixed_points, solver_gain
from .twin import montecarlo_network

__all__ = [
    "BifurcationDiagram", "BoundaryCurve", "BoundaryCurves", "Branch", "Circuit", "CircuitParameter",
    "CircuitResult", "Cohort", "FixedPoint", "Pathway", "PoissonBackground", "SpecialPoint", "Stability",
    "StabilityMap", "bifurcation_diagram", "boundary_curves", "characteristic_matrix", "count_roots",
    "fixed_points", "montecarlo_network", "simulate_network", "solver_gain", "stability", "stability_map",
]
