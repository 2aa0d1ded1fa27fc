"""White-noise equivalents of synaptic noise models, used by every analysis of them.

The theories of filtered (coloured) noise used here reduce the problem to a
white-noise population with moved boundaries, which every white-noise method
(Siegert formula, threshold integration, the Fokker--Planck solver) then
solves unchanged:

* :func:`white_equivalent` -- for :class:`~popdens.ColouredNoise`, the
  threshold (the absorbing boundary) and the reset move up by
  ``sigma alpha/2 sqrt(tau_syn/tau_m)`` (Brunel & Sergi 1998; Fourcaud &
  Brunel 2002) for hard thresholds (LIF, PIF, custom drifts without
  cut-off).

For models whose absorbing boundary is a spike cut-off (EIF, QIF, custom
drifts with ``cutoff``) the potential crosses the cut-off with a velocity
set by the drift, not by the noise: there is no boundary layer, and the
upstroke lasts long against ``tau_syn``, so the current a neuron carries
into its reset is no longer biased.  Nothing moves; the first correction is
of order ``tau_syn/tau_m``, not its square root (Fourcaud-Trocme, Hansel,
van Vreeswijk & Brunel 2003, J. Neurosci. 23:11628), and no boundary shift
captures it.  Measured against the Monte Carlo twin (EIF, contributor
guide): the white-noise rate is 0.7 % too high at ``tau_syn/tau_m = 0.01``
and 3.5 % at 0.05, while moving the reset would make it 3 % and 9 % too
high.  The steady-state front ends therefore solve these models on the
(potential, current) plane (:mod:`popdens.theory._filtered_plane`); the
white-noise equivalent returned here stays what the linear response and
the Fokker--Planck solver use for them.
"""

from __future__ import annotations

import math

from .conductance import ConductanceNoise
from .neurons import NeuronBase
from .noise import Population, WhiteNoise
from .synaptic import ColouredNoise

__all__ = ["shifted_neuron", "moved_neuron", "white_equivalent", "is_white_like", "conductance_carrier"]


def is_white_like(noise) -> bool:
    """True for the Gaussian noise models (white or coloured), analysed by the white-noise methods."""
    return isinstance(noise, (WhiteNoise, ColouredNoise))


def shifted_neuron(neuron: NeuronBase, shift: float) -> NeuronBase:
    """The same hard-threshold neuron with threshold and reset raised by ``shift`` (mV)."""
    return moved_neuron(neuron, shift, shift)


def moved_neuron(neuron: NeuronBase, d_threshold: float, d_reset: float) -> NeuronBase:
    """The same hard-threshold neuron with threshold raised by ``d_threshold`` and reset by ``d_reset`` (mV)."""
    if d_threshold == 0.0 and d_reset == 0.0:
        return neuron
    if neuron.has_cutoff:
        raise ValueError(f"{type(neuron).__name__} has a spike cut-off, not a threshold to shift")
    params = dict(neuron.parameters())
    if "adaptation" in params:  # the components themselves (parameters() lists them as records)
        params["adaptation"] = list(neuron.adaptation)
    params["reset"] = float(params["reset"]) + d_reset
    params["threshold"] = float(params["threshold"]) + d_threshold
    return type(neuron)(**params)


def conductance_carrier(population: Population) -> tuple[Population, float]:
    """The white-noise population that carries a conductance population through the Fokker--Planck solver.

    Its neuron has threshold and reset moved for the synaptic filtering
    (:meth:`~popdens.ConductanceNoise.boundary_shifts`; not for models with a spike cut-off) and its
    amplitude ``sigma_ref = sqrt(2 tau_m D(threshold))`` (mV) is the conductance noise's at threshold;
    the solver scales the diffusion coefficient by ``D(u)/D(threshold)`` per face and adds the
    conductances' drift (:meth:`~popdens.ConductanceNoise.density_terms`).  Returns the population and
    ``sigma_ref``.
    """
    nrn, noise = population.neuron, population.noise
    if not isinstance(noise, ConductanceNoise):
        raise ValueError(f"no conductance carrier for {noise!r}")
    d_th, d_re = (0.0, 0.0) if nrn.has_cutoff else noise.boundary_shifts(nrn.tau_m, nrn.boundary, nrn.reset)
    moved = moved_neuron(nrn, d_th, d_re)
    d_ref = float(noise.white_diffusion(nrn.tau_m, moved.boundary))
    if not d_ref > 0.0:
        raise ValueError("conductance input without fluctuations at threshold: `exc_rate` must be > 0 Hz and the "
                         "reversal potentials away from the threshold")
    sigma_ref = math.sqrt(2.0 * nrn.tau_m * d_ref)
    return Population(moved, WhiteNoise(sigma_ref)), sigma_ref


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
        shift = 0.0 if nrn.has_cutoff else noise.boundary_shift(nrn.tau_m, sigma)
        return Population(shifted_neuron(nrn, shift), WhiteNoise(float(sigma)))
    raise ValueError(f"no white-noise equivalent of {noise!r}")
