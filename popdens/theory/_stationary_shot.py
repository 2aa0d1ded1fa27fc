"""Shot-noise back end of the steady state: stationary rates of populations with :class:`~popdens.ShotNoise`.

Methods (``method`` of :func:`popdens.gain`):

* ``"exponential-psp"`` -- the exact rate of the LIF with exponentially
  distributed amplitudes (Richardson & Swarbrick 2010;
  :mod:`popdens.theory._shot_exact`), for drives with ``rest + mu`` below
  threshold;
* ``"jump-density"`` -- the stationary state of the finite-volume
  jump-density operator (:mod:`popdens.theory._shot_operator`), any neuron
  model and either amplitude law, Richardson-extrapolated from three grids;
* ``"diffusion"`` -- the diffusion approximation: the white-noise rate at
  drive ``mu + tau_m (nu_e <a_e> - nu_i <a_i>)`` and amplitude
  ``sqrt(tau_m (nu_e <a_e^2> + nu_i <a_i^2>))`` (an approximation, reported
  for comparison; its error is tabulated in the contributor guide);
* ``"auto"`` -- ``"exponential-psp"`` where it applies, else ``"jump-density"``.
"""

from __future__ import annotations

import numpy as np

from ..model.neurons import CODE_LIF
from ..model.noise import Population, WhiteNoise
from ._shot_exact import exact_rate_applies, exact_shot_rate
from ._shot_operator import jump_density_rates

__all__ = ["SHOT_METHODS", "shot_rates", "diffusion_equivalent"]

SHOT_METHODS = ("auto", "exponential-psp", "jump-density", "diffusion")


def diffusion_equivalent(population) -> tuple[Population, float]:
    """The white-noise population of the diffusion approximation and the drive (mV) it adds."""
    nrn, noise = population.neuron, population.noise
    sigma = noise.diffusion_sigma(nrn.tau_m)
    if not sigma > 0.0:
        raise ValueError("the diffusion approximation needs input: `exc_rate` or `inh_rate` > 0 Hz")
    return Population(nrn, WhiteNoise(sigma)), noise.mean_input(nrn.tau_m)


def _exact(population, mu: float) -> float:
    nrn, noise = population.neuron, population.noise
    return exact_shot_rate(nrn.tau_m, nrn.threshold, nrn.reset, nrn.refractory, nrn.rest, mu, noise.exc_rate,
                           noise.exc_psp, noise.inh_rate, noise.inh_psp)


def shot_rates(population, mus: np.ndarray, method: str, white_gain) -> np.ndarray:
    """Stationary rates (Hz) at drives ``mus`` (mV) by ``method`` (module docstring).

    ``white_gain(population, mu)`` computes white-noise rates (the diffusion approximation's).
    """
    if method not in SHOT_METHODS:
        raise ValueError(f"`method` must be one of {list(SHOT_METHODS)} for shot noise, got {method!r}")
    nrn, noise = population.neuron, population.noise
    flat = np.asarray(mus, dtype=float).ravel()
    if method == "diffusion":
        white, shift = diffusion_equivalent(population)
        return np.asarray(white_gain(white, flat + shift), dtype=float).reshape(np.shape(mus))
    lif = nrn.code == CODE_LIF
    exact_ok = np.array([lif and exact_rate_applies(nrn, noise, m) for m in flat], dtype=bool)
    if method == "exponential-psp":
        if not lif or not noise.exponential:
            raise ValueError("`method` 'exponential-psp' needs a LIF with ShotNoise(amplitudes='exponential'); "
                             "use 'jump-density'")
        if not np.all(exact_ok):
            bad = flat[~exact_ok][0]
            raise ValueError(f"`method` 'exponential-psp' needs excitatory input and rest + `mu` below threshold "
                             f"({nrn.threshold - nrn.rest:g} mV - rest); got mu = {bad:g} mV: use 'jump-density'")
    out = np.empty(flat.size)
    use_exact = exact_ok if method in ("auto", "exponential-psp") else np.zeros(flat.size, dtype=bool)
    for i in np.flatnonzero(use_exact):
        out[i] = _exact(population, float(flat[i]))
    rest = ~use_exact
    if np.any(rest):
        if noise.exc_rate == 0.0 and noise.inh_rate == 0.0:
            raise ValueError("shot noise without input: `exc_rate` or `inh_rate` must be > 0 Hz")
        out[rest] = jump_density_rates(population, flat[rest])
    return out.reshape(np.shape(mus))
