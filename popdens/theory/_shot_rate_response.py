"""Linear response of a shot-noise population to a modulation of its input spike *rates*.

In a network, the input of a neuron with finite PSPs changes through the rate
of its Poisson input trains, not through a mean drive.  The jump-density
generator of :mod:`popdens.theory._shot_operator` is linear in the input
rates,

.. math:: L = L_{\\rm drift}(\\mu) + \\nu_e G_e + \\nu_i G_i,\\qquad
          o = o_{\\rm drift} + \\nu_e g_e + \\nu_i g_i

(``G`` the jump operator per unit rate, ``g`` the part of it that crosses the
boundary, i.e. the output per unit mass and rate).  With ``nu_e = nu_e0 + eps
exp(lambda t)`` the first-order terms solve ``lambda m1 = L m1 + eps G_e m0 +
b r1 exp(-lambda tau_ref)``, ``r1 = o . m1 + eps g_e . m0``, so

.. math:: \\chi_e(\\lambda) = \\frac{r_1}{\\varepsilon}
    = \\frac{o\\cdot A\\,G_e m_0 + g_e\\cdot m_0}{1 - e^{-\\lambda\\tau_{\\rm ref}}\\, o\\cdot A b},
    \\qquad A = (\\lambda I - L)^{-1},

dimensionless (Hz of output per Hz of input rate), and likewise ``chi_i``.
This is the same derivation as the response to the mean drive
(:mod:`popdens.theory._shot_response`) with ``d L / d nu_e = G_e`` in place of
``d L / d mu``; the finite high-frequency limit ``g_e . m0`` (the mass within
one PSP of the boundary, per unit time) is the one Richardson & Swarbrick
(2010, PRL 105:178102) found for modulated input rates with exponential
amplitudes.  ``G_e`` and ``g_e`` are exact differences of the generator (it
is linear in the rates).  At ``lambda = 0`` the formula is 0/0 (mass
conservation); the static slope is the central difference of the stationary
rate in ``nu``.

Grid: the stability analysis of a network evaluates ``chi`` at thousands of
complex ``lambda``, so :class:`RateResponse` factorises on a coarser grid
than the stationary rate (cells of about :data:`RESPONSE_CELL_MV`, aligned
with the PSP amplitudes) and extrapolates from ``h`` and ``h/2``
(Richardson, first order: upwind drift).  Measured against the three-grid
result of the default stationary grid: contributor guide, "Shot-noise
synapses in networks".
"""

from __future__ import annotations

import numpy as np
from scipy import linalg, sparse
from scipy.sparse import linalg as sparse_linalg

from ..model.shot import ShotNoise
from ._shot_operator import ShotGrid, dense_jumps, generator, lu_ordering, shot_grid, stationary_masses

__all__ = ["RateResponse", "RESPONSE_CELL_MV"]

#: Target cell width (mV) of the coarse grid of :class:`RateResponse` (before alignment).
RESPONSE_CELL_MV = 0.1
#: Relative step of the central difference of the stationary rate in the input rate (lambda = 0).
RATE_STEP = 1e-4


class _Level:
    """The linear-response pieces on one grid."""

    def __init__(self, neuron, noise, mu: float, grid: ShotGrid):
        self.grid = grid
        L, out = generator(neuron, noise, mu, grid)
        self.m0, self.rate = stationary_masses(neuron, noise, mu, grid)
        n = grid.n
        b = grid.reset_vector(float(neuron.reset))
        quiet = ShotNoise(0.0, noise.exc_psp, 0.0, noise.inh_psp, noise.amplitudes)
        l0, o0 = generator(neuron, quiet, mu, grid)
        cols, direct = [], []
        for kind in ("exc", "inh"):
            if kind == "inh" and not noise.inh_psp > 0.0:  # no inhibitory synapses: no response to their rate
                cols.append(np.zeros(n))
                direct.append(0.0)
                continue
            one = ShotNoise(1.0 if kind == "exc" else 0.0, noise.exc_psp, 1.0 if kind == "inh" else 0.0,
                            noise.inh_psp, noise.amplitudes)
            l1, o1 = generator(neuron, one, mu, grid)
            cols.append((l1 - l0) @ self.m0)  # G m0 per Hz of input (1/ms per Hz)
            direct.append(float((o1 - o0) @ self.m0))
        self.rhs = np.column_stack(cols + [b]).astype(complex)
        self.direct = np.array(direct)
        self.out = out
        self.tau_ref = float(neuron.refractory)
        self.dense = dense_jumps(noise, grid.h)
        self.ordering = lu_ordering(noise)
        self.L = L.toarray() if self.dense else L.tocsc()
        self.eye = np.eye(n) if self.dense else sparse.identity(n, format="csc")

    def at(self, s: complex) -> np.ndarray:
        """``(chi_e, chi_i)`` (per ms per Hz) at one nonzero ``s`` (1/ms)."""
        a = s * self.eye - self.L
        if self.dense:
            x = linalg.solve(a, self.rhs)
        else:
            x = sparse_linalg.splu(a.astype(complex), permc_spec=self.ordering).solve(self.rhs)
        num = self.direct + self.out @ x[:, :2]
        den = 1.0 - np.exp(-s * self.tau_ref) * (self.out @ x[:, 2])
        return num / den


class RateResponse:
    """Response of a shot-noise population's rate to modulations of its excitatory and inhibitory input
    rates (module docstring), for many Laplace variables.

    Parameters
    ----------
    population : Population
        Neuron model with :class:`~popdens.ShotNoise` (its rates are the stationary input).
    mu : float
        Constant drive (mV).
    cell : float
        Target cell width (mV) of the coarser of the two grids.

    Attributes
    ----------
    static : ndarray, shape (2,)
        ``d rate / d nu_e`` and ``d rate / d nu_i`` of the stationary state (dimensionless, Hz per Hz).
    """

    def __init__(self, population, mu: float, cell: float = RESPONSE_CELL_MV):
        self.population, self.mu = population, float(mu)
        nrn, noise = population.neuron, population.noise
        grid = shot_grid(nrn, noise, [self.mu], cell=cell)
        self.levels = [_Level(nrn, noise, self.mu, grid), _Level(nrn, noise, self.mu, grid.halved())]
        static = []
        for kind in ("exc", "inh"):
            base = noise.exc_rate if kind == "exc" else noise.inh_rate
            if kind == "inh" and not noise.inh_psp > 0.0:
                static.append(0.0)
                continue
            step = RATE_STEP * max(base, 1.0)
            vals = []
            for lev in self.levels:
                rs = []
                for sign in (1.0, -1.0):
                    nu = max(base + sign * step, 0.0)
                    pert = ShotNoise(nu if kind == "exc" else noise.exc_rate, noise.exc_psp,
                                     nu if kind == "inh" else noise.inh_rate, noise.inh_psp, noise.amplitudes)
                    rs.append((stationary_masses(nrn, pert, self.mu, lev.grid)[1], nu))
                vals.append((rs[0][0] - rs[1][0]) / (rs[0][1] - rs[1][1]))
            static.append(2.0 * vals[1] - vals[0])
        self.static = np.array(static)

    def __call__(self, lam) -> tuple[np.ndarray, np.ndarray]:
        """``(chi_e, chi_i)`` at Laplace variables ``lam`` (1/ms), each of ``lam``'s shape (Hz per Hz)."""
        lam = np.asarray(lam, dtype=complex)
        flat = lam.ravel()
        out = np.empty((flat.size, 2), dtype=complex)
        for i, s in enumerate(flat):
            if s == 0.0:
                out[i] = self.static
                continue
            # per ms per Hz (the input rate in Hz) -> Hz per Hz
            coarse, fine = (lev.at(complex(s)) * 1e3 for lev in self.levels)
            out[i] = 2.0 * fine - coarse  # Richardson, first order (upwind drift)
        return out[:, 0].reshape(lam.shape), out[:, 1].reshape(lam.shape)
