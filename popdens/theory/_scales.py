"""Length scales and compiled-call arguments shared by the white-noise and escape-noise back ends.

The threshold-integration and renewal kernels take a neuron as a tuple
``(code, parameters, program, constants)`` and a little scratch space for
the expression interpreter; the cell width of every white-noise grid is a
fraction of the potential scale on which the drift varies (mV).
"""

from __future__ import annotations

import numpy as np

from ..model.neurons import EIF, QIF

__all__ = ["kernel_neuron", "length_scale", "scratch"]


def length_scale(neuron) -> float:
    """Potential scale (mV) on which the drift varies."""
    if isinstance(neuron, EIF):
        return float(neuron.slope_factor)
    if isinstance(neuron, QIF):
        return float(neuron.critical - neuron.rest)
    return float(neuron.boundary - neuron.reset)


def kernel_neuron(nrn):
    return (nrn.code, np.ascontiguousarray(nrn.kernel_params, dtype=float), nrn.program[0], nrn.program[1])


def scratch(*programs):
    size = max(prog[0].size for prog in programs) + 2
    return np.empty(size), np.zeros(3)
