"""White-noise equivalents of synaptic noise models, used by every analysis of them.

The theories of filtered (coloured) noise used here reduce the problem to a
white-noise population with moved boundaries, which every white-noise method
(Siegert formula, threshold integration, the Fokker--Planck solver) then
solves unchanged:

* :func:`white_equivalent` -- for :class:`~popdens.ColouredNoise`, the
  threshold (the absorbing boundary) and the reset move up by
  ``sigma alpha/2 sqrt(tau_syn/tau_m)`` (Brunel & Sergi 1998; Fourcaud &
  Brunel 2002).

For models whose absorbing boundary is a spike cut-off (EIF, QIF, custom
drifts with ``cutoff``) the potential crosses the cut-off with a velocity
set by the drift, not by the noise, so there is no boundary layer there:
only the reset moves (the neurons leave the cut-off with the synaptic
current they had while crossing the soft threshold; its decay after reset
moves them by the same amount, to first order).  This choice is measured
against the Monte Carlo twin in the contributor guide.
"""

from __future__ import annotations

from .neurons import NeuronBase
from .noise import Population, WhiteNoise
from .synaptic import ColouredNoise

__all__ = ["shifted_neuron", "white_equivalent", "is_white_like"]


def is_white_like(noise) -> bool:
    """True for the Gaussian noise models (white or coloured), analysed by the white-noise methods."""
    return isinstance(noise, (WhiteNoise, ColouredNoise))


def shifted_neuron(neuron: NeuronBase, shift: float) -> NeuronBase:
    """The same neuron with reset, and a threshold that is an absorbing boundary, raised by ``shift`` (mV).

    A spike cut-off (``has_cutoff``) is left where it is.
    """
    if shift == 0.0:
        return neuron
    params = dict(neuron.parameters())
    if "reset" not in params:  # pragma: no cover - every model has one
        raise ValueError(f"cannot shift the boundaries of {neuron!r}")
    params["reset"] = float(params["reset"]) + shift
    if not neuron.has_cutoff:
        params["threshold"] = float(params["threshold"]) + shift
    out = type(neuron)(**params)
    if neuron.has_cutoff and not out.reset < out.boundary:
        raise ValueError(f"the coloured-noise reset shift {shift:.4g} mV moves `reset` above the cut-off "
                         f"{out.boundary!r} mV")
    return out


def white_equivalent(population: Population, sigma: float | None = None) -> Population:
    """The white-noise population whose analyses stand for ``population``.

    White-noise populations are returned as they are (with ``sigma`` set if
    given); coloured noise becomes white noise of the same ``sigma`` (mV) on
    the neuron with shifted boundaries (:func:`shifted_neuron`).
    """
    noise = population.noise
    if isinstance(noise, WhiteNoise):
        return population if sigma is None else Population(population.neuron, WhiteNoise(float(sigma)))
    if isinstance(noise, ColouredNoise):
        if sigma is None:
            sigma = noise.constant_sigma()
            if sigma is None:
                raise ValueError("coloured noise needs a constant `sigma` (mV) here: the boundary shift "
                                 "is proportional to it; use a number or popdens.drive.Constant")
        nrn = population.neuron
        shift = noise.boundary_shift(nrn.tau_m, sigma)
        return Population(shifted_neuron(nrn, shift), WhiteNoise(float(sigma)))
    raise ValueError(f"no white-noise equivalent of {noise!r}")
