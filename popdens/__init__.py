"""popdens: population-density predictions for populations of noisy spiking neurons.

Units at every public boundary: time in ms, potentials (and drives) in mV,
rates and hazards in Hz.
"""

from __future__ import annotations

__version__ = "0.1.0"

from . import drive, hazard  # noqa: E402
from .exceptions import (ConvergenceError, ExpressionError, PopdensError, ScenarioError,  # noqa: E402
                         UnreachableTargetError)
from .models import EIF, LIF, PIF, QIF, CustomNeuron  # noqa: E402
from .montecarlo import montecarlo  # noqa: E402
from .noise import EscapeNoise, Population, WhiteNoise  # noqa: E402
from .result import Result, load_result  # noqa: E402
from .simulate import simulate  # noqa: E402
from .linear_response import linear_rate_response, response_kernel, transfer  # noqa: E402
from .spectra import population_rate_spectrum, spike_train_spectrum  # noqa: E402
from .steady_state import (SteadyState, drive_and_noise_for, drive_for_rate, gain, gain_slope,  # noqa: E402
                           stationary)

__all__ = [
    "ConvergenceError",
    "CustomNeuron",
    "EIF",
    "EscapeNoise",
    "ExpressionError",
    "LIF",
    "PIF",
    "PopdensError",
    "Population",
    "QIF",
    "Result",
    "ScenarioError",
    "SteadyState",
    "UnreachableTargetError",
    "WhiteNoise",
    "__version__",
    "drive",
    "drive_and_noise_for",
    "drive_for_rate",
    "gain",
    "gain_slope",
    "hazard",
    "linear_rate_response",
    "load_result",
    "montecarlo",
    "population_rate_spectrum",
    "response_kernel",
    "simulate",
    "spike_train_spectrum",
    "stationary",
    "transfer",
]
