"""popdens: population-density predictions for populations of noisy spiking neurons.

Units at every public boundary: time in ms, potentials (and drives) in mV,
rates and hazards in Hz.

The package is layered, bottom to top (each layer imports only from those
below it; ``tests/test_layering.py`` enforces it): the shared ground floor
(``_version``, ``exceptions``, ``_validation``, ``_files``, ``progress``,
``plotting``, ``result``), then ``model``, ``theory``, ``solvers``,
``twins``, ``fitting``, ``network``, ``sweeps``, ``scenario`` and the command line.
This module only re-exports the public names, importing each on first use.
"""

from __future__ import annotations

import sys as _sys

from ._lazy import lazy_names as _lazy_names
from ._version import __version__
from .exceptions import (AccuracyWarning, ConvergenceError, ExpressionError, PopdensError, ScenarioError,
                         UnreachableTargetError)
from .model import drive, hazard

# ``import popdens.drive`` and ``import popdens.hazard`` keep working: both are public modules
_sys.modules[__name__ + ".drive"] = drive
_sys.modules[__name__ + ".hazard"] = hazard

#: Where each public name lives.  They are imported on first use (module ``__getattr__``, PEP 562)
#: so that ``import popdens`` and ``popdens --help`` stay fast: the numerical modules pull in scipy,
#: numba and sympy, about 1.5 s together.  ``from popdens import X`` works as usual.
_LAZY = {
    "Adaptation": "model.adaptation", "MovingThreshold": "model.adaptation",
    "CustomNeuron": "model.neurons", "EIF": "model.neurons", "LIF": "model.neurons", "PIF": "model.neurons",
    "QIF": "model.neurons",
    "EscapeNoise": "model.noise", "Population": "model.noise", "WhiteNoise": "model.noise",
    "ColouredNoise": "model.synaptic", "ShotNoise": "model.shot", "ConductanceNoise": "model.conductance",
    "Circuit": "network.circuit", "Cohort": "network.circuit", "Pathway": "network.circuit",
    "PoissonBackground": "network.circuit",
    "BoundaryCurves": "network.boundaries", "boundary_curves": "network.boundaries",
    "BifurcationDiagram": "network.continuation", "bifurcation_diagram": "network.continuation",
    "simulate_network": "network.integrate",
    "Stability": "network.linear_stability", "stability": "network.linear_stability",
    "StabilityMap": "network.maps", "stability_map": "network.maps",
    "CircuitResult": "network.result", "spectral_matrix": "network.spectra",
    "FixedPoint": "network.states", "fixed_points": "network.states",
    "montecarlo_network": "network.twin",
    "Result": "result", "load_result": "result",
    "simulate": "solvers.frontend",
    "Curve": "sweeps.engine", "SweepResult": "sweeps.engine", "grid_points": "sweeps.engine",
    "load_sweep": "sweeps.engine", "point_seed": "sweeps.engine", "sweep": "sweeps.engine",
    "linear_rate_response": "theory.linear_response", "response_kernel": "theory.linear_response",
    "transfer": "theory.linear_response", "high_frequency_limit": "theory.linear_response",
    "population_rate_spectrum": "theory.spectra", "spike_train_spectrum": "theory.spectra",
    "SteadyState": "theory.steady_state", "drive_and_noise_for": "theory.steady_state",
    "drive_for_rate": "theory.steady_state", "gain": "theory.steady_state", "gain_slope": "theory.steady_state",
    "stationary": "theory.steady_state",
    "montecarlo": "twins.population",
    "Agreement": "twins.agreement", "agreement": "twins.agreement",
    "Calibration": "fitting.bridge", "calibrate_escape": "fitting.bridge",
    "GainCurve": "fitting.data", "SpikeTrains": "fitting.data", "load_gain_curve": "fitting.data",
    "load_spike_trains": "fitting.data", "load_stimulus": "fitting.data",
    "FitResult": "fitting.estimate", "fit_gain": "fitting.gain_curve", "fit_isi": "fitting.isi",
    "fit_psth": "fitting.psth",
}


__getattr__, __dir__ = _lazy_names(__name__, _LAZY, globals())

__all__ = [
    "AccuracyWarning",
    "Adaptation",
    "Agreement",
    "BifurcationDiagram",
    "BoundaryCurves",
    "Calibration",
    "Circuit",
    "CircuitResult",
    "Cohort",
    "ColouredNoise",
    "ConductanceNoise",
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
    "ShotNoise",
    "SpikeTrains",
    "Stability",
    "StabilityMap",
    "SteadyState",
    "SweepResult",
    "UnreachableTargetError",
    "WhiteNoise",
    "__version__",
    "agreement",
    "bifurcation_diagram",
    "boundary_curves",
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
    "high_frequency_limit",
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
    "spectral_matrix",
    "spike_train_spectrum",
    "stability",
    "stability_map",
    "stationary",
    "sweep",
    "transfer",
]
