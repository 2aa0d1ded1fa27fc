"""popdens: population-density predictions for populations of noisy spiking neurons.

Units at every public boundary: time in ms, potentials (and drives) in mV,
rates and hazards in Hz.
"""

from __future__ import annotations

__version__ = "0.1.0"

from . import drive, hazard  # noqa: E402
from .exceptions import (AccuracyWarning, ConvergenceError, ExpressionError, PopdensError, ScenarioError,  # noqa: E402
                         UnreachableTargetError)
from .models import EIF, LIF, PIF, QIF, CustomNeuron  # noqa: E402
from .montecarlo import montecarlo  # noqa: E402
from .network import (Circuit, CircuitResult, Cohort, Pathway, PoissonBackground,  # noqa: E402
                      montecarlo_network, simulate_network)
from .network_analysis import FixedPoint, Stability, StabilityMap, fixed_points, stability, stability_map  # noqa: E402
from .noise import EscapeNoise, Population, WhiteNoise  # noqa: E402
from .result import Result, load_result  # noqa: E402
from .simulate import simulate  # noqa: E402
from .sweep import Curve, SweepResult, grid_points, load_sweep, point_seed, sweep  # noqa: E402
from .linear_response import linear_rate_response, response_kernel, transfer  # noqa: E402
from .spectra import population_rate_spectrum, spike_train_spectrum  # noqa: E402
from .steady_state import (SteadyState, drive_and_noise_for, drive_for_rate, gain, gain_slope,  # noqa: E402
                           stationary)

__all__ = [
    "AccuracyWarning",
    "Circuit",
    "CircuitResult",
    "Cohort",
    "ConvergenceError",
    "Curve",
    "CustomNeuron",
    "EIF",
    "EscapeNoise",
    "ExpressionError",
    "FixedPoint",
    "LIF",
    "PIF",
    "Pathway",
    "PoissonBackground",
    "PopdensError",
    "Population",
    "QIF",
    "Result",
    "ScenarioError",
    "Stability",
    "StabilityMap",
    "SteadyState",
    "SweepResult",
    "UnreachableTargetError",
    "WhiteNoise",
    "__version__",
    "drive",
    "drive_and_noise_for",
    "drive_for_rate",
    "fixed_points",
    "gain",
    "gain_slope",
    "grid_points",
    "hazard",
    "linear_rate_response",
    "load_result",
    "load_sweep",
    "montecarlo",
    "montecarlo_network",
    "point_seed",
    "population_rate_spectrum",
    "response_kernel",
    "simulate",
    "simulate_network",
    "spike_train_spectrum",
    "stability",
    "stability_map",
    "stationary",
    "sweep",
    "transfer",
]
