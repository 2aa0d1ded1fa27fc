"""Stationary state, first-passage densities, linear response and spectra, computed without simulating.

Front ends: :mod:`.steady_state`, :mod:`.linear_response`, :mod:`.spectra`; the method back ends
(Siegert formula, threshold integration, renewal integrals, closed-form LIF response) are private
modules beside them."""

from .linear_response import linear_rate_response, response_kernel, transfer
from .spectra import population_rate_spectrum, spike_train_spectrum
from .steady_state import SteadyState, drive_and_noise_for, drive_for_rate, gain, gain_slope, stationary

__all__ = [
    "SteadyState", "drive_and_noise_for", "drive_for_rate", "gain", "gain_slope", "linear_rate_response",
    "population_rate_spectrum", "response_kernel", "spike_train_spectrum", "stationary", "transfer",
]
