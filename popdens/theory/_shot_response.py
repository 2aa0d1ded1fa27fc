"""Linear response of a shot-noise population to a modulation of its mean drive.

The jump-density operator of :mod:`popdens.theory._shot_operator` gives the
cell masses ``m`` of the non-refractory neurons a linear master equation

.. math:: \\dot m = L(\\mu)\\,m + b\\,r(t - \\tau_{\\rm ref}),\\qquad r = o(\\mu)\\cdot m,

(``L`` the generator without reinjection, ``o`` the output rate per unit mass
of each cell, ``b`` the reset weights; ``r`` in 1/ms).  With ``mu = mu0 +
eps exp(lambda t)`` and the stationary masses ``m0``, the first-order terms
``m1``, ``r1`` solve ``lambda m1 = L m1 + eps L' m0 + b r1 exp(-lambda
tau_ref)`` and ``r1 = o . m1 + eps o' . m0`` (primes: d/d mu), so

.. math:: \\chi(\\lambda) = \\frac{r_1}{\\varepsilon}
    = \\frac{o\\cdot A L' m_0 + o'\\cdot m_0}{1 - e^{-\\lambda\\tau_{\\rm ref}}\\, o\\cdot A b},
    \\qquad A = (\\lambda I - L)^{-1}.

This is the linear response of the same discretisation whose stationary
rate :func:`popdens.gain` returns (``method="jump-density"``): exact for
finite PSPs of any size, up to the grid.  The drift is upwind (first order
in the cell width ``h``), so ``chi`` is computed on grids ``h``, ``h/2``,
``h/4`` and extrapolated (Richardson); the difference between the
extrapolated and the finest values is returned as the error estimate.
``L'`` and ``o'`` are exact: ``L`` is piecewise linear in ``mu`` (the upwind
flux switches side where the drift changes sign), and the central
difference used here is exact away from those points.

At high frequencies ``chi`` tends to ``o' . m0``, the drift's flux through
the boundary per unit drive: finite and lag-free when the drift at the
boundary points up (``F(threshold) + mu > 0``), since finite PSPs leave a
non-zero density there; otherwise that term vanishes, the output is carried
by input spikes only, and ``chi`` falls like ``1/f`` with a phase lag that
tends to ``pi/2`` (a change of the drive moves the density, which the jumps
then carry over the boundary).  Compare Richardson & Swarbrick 2010 (PRL
105:178102), whose finite high-frequency response is that to a modulation of
the input *rate*, not of the mean drive modelled here.
"""

from __future__ import annotations

import numpy as np
from scipy import linalg, sparse
from scipy.sparse import linalg as sparse_linalg

from ..progress import Progress
from ._shot_operator import (DENSE_BAND, generator, jump_fractions, lu_ordering, richardson, shot_grid,
                             stationary_masses)

__all__ = ["shot_transfer"]

#: Grids h, h/2, h/4 (as for the stationary rate).
LEVELS = 3
#: Drive step (mV) of the central difference of the generator in ``mu``.
MU_STEP = 1e-4


def _dense(noise, h: float) -> bool:
    amps = [a for a in (noise.exc_psp, noise.inh_psp if noise.inhibited else None) if a]
    return max(jump_fractions(noise.amplitudes, a, h)[1] for a in amps) > DENSE_BAND


def _level(neuron, noise, mu: float, grid, lam: np.ndarray, bar=None, offset: int = 0) -> np.ndarray:
    """``chi`` (Hz/mV) on one grid at Laplace variables ``lam`` (1/ms)."""
    L, out = generator(neuron, noise, mu, grid)
    lp, op = generator(neuron, noise, mu + MU_STEP, grid)
    lm, om = generator(neuron, noise, mu - MU_STEP, grid)
    dL = (lp - lm) / (2.0 * MU_STEP)
    dout = (op - om) / (2.0 * MU_STEP)
    m0, _ = stationary_masses(neuron, noise, mu, grid)
    n = grid.n
    b = grid.reset_vector(float(neuron.reset))
    src = dL @ m0
    direct = float(dout @ m0)
    tau_ref = float(neuron.refractory)
    dense = _dense(noise, grid.h)
    Ld = L.toarray() if dense else L.tocsc()
    eye = np.eye(n) if dense else sparse.identity(n, format="csc")
    chi = np.empty(lam.size, dtype=complex)
    rhs = np.column_stack([src, b]).astype(complex)
    for i, s in enumerate(lam):
        if s == 0.0:  # the static slope: d(rate)/d(mu) of the stationary state (the formula is 0/0 at lambda = 0:
            # mass conservation makes o . (-L)^-1 b = 1)
            r_up = stationary_masses(neuron, noise, mu + MU_STEP, grid)[1]
            r_down = stationary_masses(neuron, noise, mu - MU_STEP, grid)[1]
            chi[i] = (r_up - r_down) / (2.0 * MU_STEP) * 1e-3
            continue
        a = s * eye - Ld
        x = linalg.solve(a, rhs) if dense else sparse_linalg.splu(a.astype(complex), permc_spec=lu_ordering(noise)).solve(rhs)
        num = direct + out @ x[:, 0]
        den = 1.0 - np.exp(-s * tau_ref) * (out @ x[:, 1])
        chi[i] = num / den
        if bar is not None:
            bar.update(offset + i + 1)
    return chi * 1e3  # per ms per mV -> Hz/mV


def shot_transfer(population, mu: float, s: np.ndarray, progress=None) -> tuple[np.ndarray, np.ndarray]:
    """Transfer function (Hz/mV) of the mean-drive modulation at Laplace variables ``s`` (1/ms), and
    its error estimate (module docstring)."""
    neuron, noise = population.neuron, population.noise
    grid = shot_grid(neuron, noise, [mu])
    lam = np.asarray(s, dtype=complex).ravel()
    bar = Progress(LEVELS * lam.size, "transfer", enabled=progress)
    chis = []
    for level in range(LEVELS):
        chis.append(_level(neuron, noise, mu, grid, lam, bar, level * lam.size))
        grid = grid.halved()
    bar.close()
    ext = np.array([richardson([c[i] for c in chis]) for i in range(lam.size)], dtype=complex)
    err = np.abs(ext - chis[-1])
    return ext, err

