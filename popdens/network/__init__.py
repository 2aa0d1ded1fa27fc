"""Networks of coupled populations: the circuit specification, mean-field time integration, the
spiking twin's front end, fixed points, linear stability, stability maps, and continuation (branches of
fixed points with their folds and oscillation onsets; boundary curves in a parameter plane).

Names are imported on first use (PEP 562), so that reading a network scenario file
(:mod:`.circuit` only) does not load the compiled solvers, scipy or numba.
"""

from __future__ import annotations

from .._lazy import lazy_names

_LAZY = {
    "Circuit": "circuit", "Cohort": "circuit", "Pathway": "circuit", "PoissonBackground": "circuit",
    "BoundaryCurve": "boundaries", "BoundaryCurves": "boundaries", "boundary_curves": "boundaries",
    "BifurcationDiagram": "continuation", "Branch": "continuation", "SpecialPoint": "continuation",
    "bifurcation_diagram": "continuation",
    "CircuitParameter": "parameters",
    "simulate_network": "integrate",
    "Stability": "linear_stability", "characteristic_matrix": "linear_stability", "count_roots": "linear_stability",
    "stability": "linear_stability",
    "StabilityMap": "maps", "stability_map": "maps",
    "CircuitResult": "result",
    "FixedPoint": "states", "fixed_points": "states", "solver_gain": "states",
    "montecarlo_network": "twin",
}

__all__ = [
    "BifurcationDiagram", "BoundaryCurve", "BoundaryCurves", "Branch", "Circuit", "CircuitParameter",
    "CircuitResult", "Cohort", "FixedPoint", "Pathway", "PoissonBackground", "SpecialPoint", "Stability",
    "StabilityMap", "bifurcation_diagram", "boundary_curves", "characteristic_matrix", "count_roots",
    "fixed_points", "montecarlo_network", "simulate_network", "solver_gain", "stability", "stability_map",
]


__getattr__, __dir__ = lazy_names(__name__, _LAZY, globals())
