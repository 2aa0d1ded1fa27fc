"""Stationary escape-noise populations: the renewal integrals along the free trajectory after reset.

Thin wrappers around the compiled integrator of :mod:`._renewal` that pack the
neuron and the escape function for it and turn its status into errors.
Units: mV, ms; rates returned in Hz.
"""

from __future__ import annotations

import numpy as np

from ..exceptions import ConvergenceError
from ._renewal import STATUS_OK as _RENEWAL_OK
from ._renewal import renewal_rates
from ._scales import kernel_neuron, scratch


#: Probe points checking whether a free trajectory reaches the spike cut-off.
CUTOFF_PROBES = 512


# ---------------------------------------------------------------- escape
def renewal_args(population):
    nrn = population.neuron
    hz = population.noise.hazard
    return nrn, hz, kernel_neuron(nrn), (hz.code, np.ascontiguousarray(hz.kernel_params, dtype=float),
                                           hz.program[0], hz.program[1])


def renewal_integrals(population, mus):
    nrn, hz, kn, kh = renewal_args(population)
    flat = np.ascontiguousarray(mus.ravel())
    m0, m1, mi = np.empty(flat.size), np.empty(flat.size), np.empty(flat.size)
    st = np.empty(flat.size, dtype=np.int64)
    stack, xbuf = scratch(nrn.program, hz.program)
    renewal_rates(*kn, float(nrn.tau_m), float(nrn.reset), float(nrn.boundary), bool(nrn.has_cutoff),
                  float(nrn.refractory), flat, *kh, float(nrn.threshold), CUTOFF_PROBES, m0, m1, mi, st,
                  np.zeros((10, 5)), np.zeros((1, 5)), stack, xbuf)
    if np.any(st != _RENEWAL_OK):
        bad = flat[st != _RENEWAL_OK][0]
        raise ConvergenceError(f"the renewal integrals did not converge at `mu` = {bad!r} mV (step limit)")
    return m0, m1, mi


def renewal_rates_hz(population, mus) -> np.ndarray:
    m0, _, _ = renewal_integrals(population, mus)
    with np.errstate(divide="ignore"):
        return (1000.0 / m0).reshape(mus.shape)
