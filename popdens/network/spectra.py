"""Finite-size fluctuations of a circuit in its asynchronous state, predicted without sampling.

Around a stable fixed point, each cohort's activity is its own intrinsic
fluctuation (the spikes of ``N_k`` neurons that would fire as independent
renewal processes at the stationary input) plus the linear response to the
fluctuations of the activities it receives.  In the frequency domain
(Lindner, Doiron & Longtin 2005, Phys. Rev. E 72:061919; Trousdale, Hu,
Shea-Brown & Josic 2012, PLoS Comput. Biol. 8:e1002408)

.. math:: \\tilde A(f) = M(f)\\,\\tilde A(f) + \\tilde\\xi(f)
          \\quad\\Rightarrow\\quad
          C(f) = \\big(I - M(f)\\big)^{-1} D(f)\\,\\big(I - M(f)\\big)^{-H},

with ``M`` the coupling through transfer functions, synaptic kernels and
delays (the matrix of the characteristic equation,
:func:`~popdens.network.linear_stability.characteristic_matrix`, at
``lam = 2 pi i f``) and ``D = diag(S_k(f) / N_k)`` the spike-train spectra of
single neurons at the fixed point over the cohort sizes
(:func:`popdens.spike_train_spectrum`, renewal formula).  ``C_kl(f)`` is the
two-sided cross-spectrum of the activities ``A_k`` and ``A_l`` (Hz), the
convention of :meth:`popdens.network.CircuitResult.spectra`.

Where it holds: linear response around a stable asynchronous state, each
neuron seeing the population activity of its sources (exact in the mean for
all-to-all coupling; for sparse random coupling the neuron-specific part of
the input is treated as the white noise of the diffusion approximation and
correlations it induces are neglected).  It fails near an instability (a
root of ``det(I - M)`` close to the imaginary axis) and for large
fluctuations (small ``N``, nonlinear gain).  Measured against the spiking
twin in ``tests/network/test_network_finite.py`` (table in DEVELOPERS.md).
"""

from __future__ import annotations

import math
from typing import Callable

import numpy as np

from .circuit import Circuit
from .linear_stability import characteristic_matrix
from .states import FixedPoint

__all__ = ["spectral_matrix"]


def spectral_matrix(circuit: Circuit, state: FixedPoint, freqs, *, transfer: Callable | None = None,
                    sizes=None) -> np.ndarray:
    """Cross-spectral matrix (Hz) of the cohorts' activities at a stable fixed point.

    Linear response of finite cohorts (Lindner, Doiron & Longtin 2005; Trousdale et al. 2012):
    ``C(f) = (I - M(f))^-1 D(f) (I - M(f))^-H``, with ``M`` the coupling through transfer
    functions, synaptic kernels and delays and ``D = diag(S_k(f) / N_k)`` the single-neuron
    spike-train spectra (renewal formula) over the cohort sizes.  An approximation: it holds
    around a stable asynchronous state and fails near an instability and for large fluctuations
    (small cohorts, strongly nonlinear gain); both noise models; adapting cohorts are refused
    (the renewal spectra do not cover them).

    Parameters
    ----------
    circuit : Circuit
        The network; its cohorts' ``size`` are the numbers of neurons unless ``sizes`` is given.
    state : FixedPoint
        From :func:`~popdens.fixed_points`; should be stable (:func:`~popdens.stability`).
    freqs : array_like of float
        Frequencies (Hz), > 0.
    transfer : callable, optional
        As for :func:`~popdens.network.linear_stability.characteristic_matrix`.
    sizes : sequence of int, optional
        Neurons per cohort; default the cohorts' ``size``.

    Returns
    -------
    ndarray of complex, shape ``freqs.shape + (n, n)``
        ``C[..., k, l]``: cross-spectrum of ``A_k`` and ``A_l`` (Hz), Hermitian in ``(k, l)``;
        the diagonal is the power spectrum of each cohort's activity.
    """
    from ..theory.spectra import spike_train_spectrum  # noqa: PLC0415 - theory is below network

    f = np.asarray(freqs, dtype=float)
    if not np.all(np.isfinite(f)) or np.any(f <= 0):
        raise ValueError("`freqs` must be finite frequencies > 0 (Hz)")
    n = circuit.n
    sz = [a.size for a in circuit.cohorts] if sizes is None else list(sizes)
    if len(sz) != n or any(not (int(x) == x and x > 0) for x in sz):
        raise ValueError(f"`sizes` must be {n} positive integers, got {sizes!r}")
    flat = f.ravel()
    lam = 2j * math.pi * flat * 1e-3  # 1/ms
    if any(circuit.synapse_kind(k) == "conductance" for k in range(n)):
        raise NotImplementedError("spectral_matrix: not offered for conductance synapses: the conductance "
                                  "theory's response to fast input is too weak (measured: predicted spectra 2-7x "
                                  "below the spiking twin's at 150-500 Hz; contributor guide)")
    if any(circuit.synapse_kind(k) == "shot" for k in range(n)):
        raise NotImplementedError("spectral_matrix: not offered for shot-noise synapses: with the renewal spectra "
                                  "of shot input the prediction falls short of the spiking twin above 120 Hz (measured "
                                  "1.8x less power at 120-500 Hz in a sparse E-I network; contributor guide)")
    m = characteristic_matrix(circuit, state, lam, transfer)
    d = np.zeros((flat.size, n, n), dtype=complex)
    for k in range(n):
        tau_k = float(state.tau_syn[k]) if state.tau_syn is not None else 0.0  # filtered input: coloured noise
        pop = circuit.population_at(k, state.sigma[k], tau_k)
        d[:, k, k] = spike_train_spectrum(pop, float(state.mu[k]), flat) / float(sz[k])
    g = np.linalg.inv(np.eye(n) - m)
    c = g @ d @ np.conj(np.swapaxes(g, -1, -2))
    return c.reshape(f.shape + (n, n))
