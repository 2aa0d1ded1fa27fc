"""popdens: population-density predictions for populations of noisy spiking neurons.

Units at every public boundary: time in ms, potentials (and drives) in mV,
rates and hazards in Hz.

The package is layered, bottom to top (each layer imports only from those
below it; ``tests/test_layering.py`` enforces it): the shared ground floor
(``_version``, ``exceptions``, ``_validation``, ``_files``, ``progress``,
``plotting``, ``result``), then ``model``, ``theory``, ``solvers``,
``twins``, ``fitting``, ``network``, ``sweeps``, ``scenario`` and the command line.
This module only re-exports the public names.
"""

from __future__ import annotations

import sys as _sys

from ._version import __version__
from .exceptions import (AccuracyWarning, ConvergenceError, ExpressionError, PopdensError, ScenarioError,
                         UnreachableTargetError)
from .fitting import (Calibration, FitResult, GainCurve, SpikeTrains, fit_gain, fit_isi, fit_psth, load_gain_curve,
                      calibrate_escape, load_spike_trains, load_stimulus)
from .model import drive, hazard
from .model.adaptation import Adaptation, MovingThreshold
from .model.neurons import EIF, LIF, PIF, QIF, CustomNeuron
from .model.noise import EscapeNoise, Population, WhiteNoise
from .network.circuit import Circuit, Cohort, Pathway, PoissonBackground
from .network.integrate import simulate_network
from .network.linear_stability import Stability, stability
from .network.maps import StabilityMap, stability_map
from .network.result import CircuitResult
from .network.states import FixedPoint, fixed_points
from .network.twin import montecarlo_network
from .result import Result, load_result
from .solvers.frontend import simulate
from .sweeps.engine import Curve, SweepResult, grid_points, load_sweep, point_seed, sweep
from .theory.linear_response import linear_rate_response, response_kernel, transfer
from .theory.spectra import population_rate_spectrum, spike_train_spectrum
from .theory.steady_state import SteadyState, drive_and_noise_for, drive_for_rate, gain, gain_slope, stationary
from .twins.population import montecarlo

# ``import popdens.drive`` and ``import popdens.hazard`` keep working: both are public modules
_sys.modules[__name__ + ".drive"] = drive
_sys.modules[__name__ + ".hazard"] = hazard

__all__ = [
    "AccuracyWarning",
    "Adaptation",
    "Calibration",
    "Circuit",
    "CircuitResult",
    "Cohort",
    "ConvergenceError",
    "Curve",
    "CustomNeuron",
    "EIF",
    "EscapeNoise",
    "ExpressionError",
    "FitResult",
    "FixedPoint",
    "GainCurve",
    "LIF",
    "MovingThreshold",
    "PIF",
    "Pathway",
    "PoissonBackground",
    "PopdensError",
    "Population",
    "QIF",
    "Result",
    "ScenarioError",
    "SpikeTrains",
    "Stability",
    "StabilityMap",
    "SteadyState",
    "SweepResult",
    "UnreachableTargetError",
    "WhiteNoise",
    "__version__",
    "calibrate_escape",
    "drive",
    "drive_and_noise_for",
    "drive_for_rate",
    "fit_gain",
    "fit_isi",
    "fit_psth",
    "fixed_points",
    "gain",
    "gain_slope",
    "grid_points",
    "hazard",
    "linear_rate_response",
    "load_gain_curve",
    "load_result",
    "load_spike_trains",
    "load_stimulus",
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
