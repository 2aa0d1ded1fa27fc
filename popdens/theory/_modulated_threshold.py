"""Threshold integration of the white-noise Fokker--Planck equation at (complex) frequency.

The method of Richardson (2007, Phys. Rev. E 76:021919; 2008, Biol. Cybern.
99:381): the stationary density and its linear modulation are found by
integrating the Fokker--Planck equation *backwards* in the potential, from
the absorbing boundary ``u_th`` down to a low bound where density and flux
have vanished.  With the convention ``tau du = (F(u) + mu) dt + sigma
sqrt(tau) dW`` the flux is ``J = [(F + mu) P - (sigma^2/2) dP/du] / tau``, so

.. math::
    \\frac{dP}{du} = G(u) P - H J + S(u), \\qquad
    \\frac{dJ}{du} = -s P + \\text{injection at reset},

with ``G = 2 (F + mu) / sigma^2`` (1/mV), ``H = 2 tau / sigma^2`` (ms/mV^2; per step, so that
voltage-dependent noise, :class:`ConductanceSweep`, uses the same sweeps with ``H = 1/D(u)``),
``s = 2 pi i f`` the Laplace variable (1/ms) and a source ``S`` that carries
the modulation.  Three problems are swept together, all with ``P(u_th) = 0``:

* **A**: unit flux at the boundary, nothing injected;
* **B**: zero flux at the boundary, unit flux injected at reset;
* **E**: zero flux at the boundary, driven by the modulation of the input
  (mean: ``S = 2 P0 / sigma^2``; noise intensity sigma^2:
  ``S = -(dP0/du) / sigma^2``).

The rate modulation ``r1`` follows from zero flux at the low bound,
``r1 (J_A + exp(-s tau_ref) J_B) + J_E = 0``, and the Fourier transform of
the inter-spike-interval density from the first-passage problem,
``P_hat = -exp(-s tau_ref) J_B / J_A``.

Discretisation (second order in the step ``du``): on each step the drift
factor ``G`` is frozen at the midpoint and integrated exactly (exponential
integrator, stable for any sign and size of ``G``); ``J`` and ``S`` are
linear across the step inside the variation-of-constants integral, and
``dJ/du`` is integrated by the trapezoidal rule; the two resulting linear
equations for the lower node are solved in closed form.  Reset and
boundary sit on nodes.  The sweep over nodes is compiled and loops over
all frequencies inside, without allocation.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from ..model._kernels import NO_REFCOUNT

#: Grid nodes per sigma (mV) of noise: alone accurate to ~1e-5 relative (second order, measured);
#: the front end extrapolates from this and twice this.
NODES_PER_SIGMA = 200
#: Fewest nodes between reset and boundary.
MIN_NODES_RESET_TO_BOUNDARY = 400
#: Initial depth of the grid below min(reset, rest + mu), in sigmas (extended when needed).
DEPTH_SIGMAS = 12.0
#: The sweep stops once the stationary density has fallen below this fraction of its peak.
DENSITY_FLOOR = 1e-15
#: Most nodes considered before declaring that no stationary state exists.
MAX_NODES = 4_000_000
#: Stop sweeping once the solutions are this large: the zero-flux ratio has converged
#: (the dominant growing mode is common to all three problems) and overflow is near.
GROWTH_LIMIT = 1e250
#: Below |G du| < this the step weights use their Taylor series (cancellation otherwise).
SERIES_BELOW = 1e-3


@numba.njit(cache=True, nogil=True)
def _stationary_sweep(g_mid, g_node, du, h_step, k_reset, floor, e_out, wup_out, wlo_out, p0_out):  # pragma: no cover
    """Backward sweep of the stationary problem per unit flux; fills step weights (``h_step``: H per step).

    Returns the index of the last node used, or -1 if the density did not decay.
    """
    n = g_mid.shape[0]
    p = 0.0
    j = 1.0
    pmax = 0.0
    p0_out[0] = 0.0
    for k in range(n):
        g = g_mid[k]
        x = g * du
        e = math.exp(-x)
        if abs(x) < SERIES_BELOW:
            phi0 = du * (1.0 - x * (0.5 - x * (1.0 / 6.0 - x / 24.0)))
            wup = du * (0.5 - x * (1.0 / 3.0 - x * (0.125 - x / 30.0)))
        else:
            phi0 = -math.expm1(-x) / g
            wup = (1.0 - e * (1.0 + x)) / (g * g * du)
        e_out[k] = e
        wup_out[k] = wup
        wlo_out[k] = phi0 - wup
        p = e * p + h_step[k] * phi0 * j
        p0_out[k + 1] = p
        if p > pmax:
            pmax = p
        if k + 1 == k_reset:
            j = 0.0
        if k + 1 > k_reset and p < floor * pmax and g_node[k + 1] > 0.0:
            return k + 1
    return -1


#: Nodes between two checks of GROWTH_LIMIT in the frequency-vectorised sweep (a solution grows by
#: far less than the 1e58 between GROWTH_LIMIT and overflow over so few steps of a resolving grid).
GROWTH_CHECK_EVERY = 8


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _modulated_sweep(s_arr, tau_ref, e_w, wup, wlo, src, du, h_step, k_reset, n_nodes, out):  # pragma: no cover
    """Sweep problems A, B, E for every Laplace variable in ``s_arr`` (1/ms); ``h_step``: H per step.

    ``src[k, 0]`` / ``src[k, 1]``: source of problem E at the upper / lower end of
    step ``k``.  ``out[i]`` = (J_A, J_B, J_E, trapz P_E) at the lowest node reached.

    The node loop is outside, the frequency loop inside, on real and imaginary parts kept in
    separate arrays, so that the independent frequencies are advanced together in SIMD lanes
    (``error_model="numpy"``: no division check to stop the vectoriser); measured 8-9x faster
    than one frequency at a time, results equal to 1e-14 relative.  A frequency stops at the first
    check after its solutions pass GROWTH_LIMIT (the zero-flux ratio has converged by then).
    """
    m = s_arr.shape[0]
    cr, ci = np.empty(m), np.empty(m)
    par, pai, jar, jai = np.zeros(m), np.zeros(m), np.ones(m), np.zeros(m)
    pbr, pbi, jbr, jbi = np.zeros(m), np.zeros(m), np.zeros(m), np.zeros(m)
    per, pei, jer, jei = np.zeros(m), np.zeros(m), np.zeros(m), np.zeros(m)
    ipr, ipi = np.zeros(m), np.zeros(m)
    done = np.zeros(m, dtype=np.bool_)
    for i in range(m):
        cr[i] = 0.5 * s_arr[i].real * du
        ci[i] = 0.5 * s_arr[i].imag * du
    left = m
    half_du = 0.5 * du
    for k in range(n_nodes - 1):
        h = h_step[k]
        hl = h * wlo[k]
        ew = e_w[k]
        hsum = h * (wup[k] + wlo[k])
        se = wup[k] * src[k, 0] + wlo[k] * src[k, 1]
        for i in range(m):
            c_r, c_i = cr[i], ci[i]
            # den = 1 / (1 - hl c), fac = e_w + hl c (complex)
            dr, di = 1.0 - hl * c_r, -hl * c_i
            inv = 1.0 / (dr * dr + di * di)
            den_r, den_i = dr * inv, -di * inv
            f_r, f_i = ew + hl * c_r, hl * c_i
            # problem A: p_new = (fac p + hsum j) den, j += c (p + p_new)
            x_r = f_r * par[i] - f_i * pai[i] + hsum * jar[i]
            x_i = f_r * pai[i] + f_i * par[i] + hsum * jai[i]
            n_r, n_i = x_r * den_r - x_i * den_i, x_r * den_i + x_i * den_r
            s_r, s_i = par[i] + n_r, pai[i] + n_i
            jar[i] += c_r * s_r - c_i * s_i
            jai[i] += c_r * s_i + c_i * s_r
            par[i], pai[i] = n_r, n_i
            # problem B
            x_r = f_r * pbr[i] - f_i * pbi[i] + hsum * jbr[i]
            x_i = f_r * pbi[i] + f_i * pbr[i] + hsum * jbi[i]
            n_r, n_i = x_r * den_r - x_i * den_i, x_r * den_i + x_i * den_r
            s_r, s_i = pbr[i] + n_r, pbi[i] + n_i
            jbr[i] += c_r * s_r - c_i * s_i
            jbi[i] += c_r * s_i + c_i * s_r
            pbr[i], pbi[i] = n_r, n_i
            # problem E, with its source and the integral of its density
            x_r = f_r * per[i] - f_i * pei[i] + hsum * jer[i] - se
            x_i = f_r * pei[i] + f_i * per[i] + hsum * jei[i]
            n_r, n_i = x_r * den_r - x_i * den_i, x_r * den_i + x_i * den_r
            s_r, s_i = per[i] + n_r, pei[i] + n_i
            jer[i] += c_r * s_r - c_i * s_i
            jei[i] += c_r * s_i + c_i * s_r
            ipr[i] += half_du * s_r
            ipi[i] += half_du * s_i
            per[i], pei[i] = n_r, n_i
        if k + 1 == k_reset:
            for i in range(m):
                jbr[i] -= 1.0
        last = k == n_nodes - 2
        if last or k % GROWTH_CHECK_EVERY == GROWTH_CHECK_EVERY - 1:
            for i in range(m):
                if done[i]:
                    continue
                big = max(abs(jar[i]), abs(jai[i]), abs(jbr[i]), abs(jbi[i]), abs(jer[i]), abs(jei[i]))
                if last or big > GROWTH_LIMIT:
                    out[i, 0] = complex(jar[i], jai[i])
                    out[i, 1] = complex(jbr[i], jbi[i])
                    out[i, 2] = complex(jer[i], jei[i])
                    out[i, 3] = complex(ipr[i], ipi[i])
                    done[i] = True
                    left -= 1
            if left == 0:
                break
    if n_nodes < 2:
        for i in range(m):
            out[i, 0], out[i, 1], out[i, 2], out[i, 3] = 1.0, 0.0, 0.0, 0.0


class Sweep:
    """Stationary state of a white-noise population on a threshold-integration grid.

    Parameters
    ----------
    neuron : NeuronBase
        Neuron model; its ``boundary`` is the absorbing boundary.
    mu : float
        Stationary drive (mV).
    sigma : float
        Noise amplitude (mV), > 0.
    nodes_per_sigma : float, optional
        Grid resolution (nodes per mV of sigma).

    Attributes
    ----------
    rate : float
        Stationary rate (Hz).
    u : ndarray
        Nodes (mV), from the boundary downwards.
    density : ndarray
        Stationary density (1/mV) at the nodes; integrates to
        ``1 - rate * refractory`` (the rest is refractory).
    """

    def __init__(self, neuron, mu: float, sigma: float, nodes_per_sigma: float = NODES_PER_SIGMA):
        self.neuron = neuron
        self.mu = float(mu)
        self.sigma = float(sigma)
        depth = DEPTH_SIGMAS * self.sigma
        if neuron.code == 3 and self.mu > 0:  # PIF: density decays on sigma^2 / (2 mu) below reset
            depth = max(depth, 40.0 * self.sigma ** 2 / (2.0 * self.mu))
        self.h = 2.0 * neuron.tau_m / self.sigma ** 2
        self._label = f"`mu` = {self.mu!r} mV, `sigma` = {self.sigma!r} mV"

        def coefficients(mid, nodes):
            g_mid = 2.0 * (np.asarray(neuron.drift(mid), dtype=float) + self.mu) / self.sigma ** 2
            g_node = 2.0 * (np.asarray(neuron.drift(nodes), dtype=float) + self.mu) / self.sigma ** 2
            return g_mid, g_node, np.full(mid.size, self.h)

        self._build(min(float(neuron.reset), float(neuron.rest) + self.mu), depth, nodes_per_sigma / self.sigma,
                    coefficients)

    def _build(self, anchor: float, depth: float, nodes_per_mv: float, coefficients) -> None:
        """The grid (boundary and reset on nodes, ``nodes_per_mv`` resolution, down to ``depth`` mV
        below ``anchor`` or further until the density has decayed) and the stationary sweep on it;
        ``coefficients(mid, nodes)`` gives G at the step midpoints and nodes and H per step."""
        neuron = self.neuron
        uth, ur = float(neuron.boundary), float(neuron.reset)
        n_rt = max(MIN_NODES_RESET_TO_BOUNDARY, int(math.ceil((uth - ur) * nodes_per_mv)))
        du = (uth - ur) / n_rt
        while True:
            n_nodes = n_rt + int(math.ceil((ur - (anchor - depth)) / du)) + 1
            if n_nodes > MAX_NODES:
                raise ValueError(
                    f"no stationary state at {self._label}: the density "
                    f"does not decay below the reset within {MAX_NODES} grid nodes")
            u = uth - du * np.arange(n_nodes)
            mid = u[:-1] - 0.5 * du
            g_mid, g_node, h_step = coefficients(mid, u)
            if not (np.all(np.isfinite(g_mid)) and np.all(np.isfinite(g_node)) and np.all(np.isfinite(h_step))):
                raise ValueError("the drift is not finite on the threshold-integration grid")
            e_w, wup, wlo = np.empty(n_nodes - 1), np.empty(n_nodes - 1), np.empty(n_nodes - 1)
            p0 = np.empty(n_nodes)
            last = _stationary_sweep(g_mid, g_node, du, np.ascontiguousarray(h_step), n_rt, DENSITY_FLOOR, e_w, wup,
                                     wlo, p0)
            if last > 0:
                break
            depth *= 2.0
        n = last + 1
        self.du = du
        self.k_reset = n_rt
        self.u = u[:n]
        self.g_node = g_node[:n]
        self.h_step = np.ascontiguousarray(h_step[:n - 1])
        self.e_w, self.wup, self.wlo = e_w[:n - 1], wup[:n - 1], wlo[:n - 1]
        p0 = p0[:n]
        if not np.all(np.isfinite(p0)) or np.any(p0 < 0):
            raise ValueError(f"threshold integration failed at `mu` = {self.mu!r} mV (density not finite)")
        self.p0_unit = p0  # per unit flux (ms/mV)
        mass = du * (p0.sum() - 0.5 * (p0[0] + p0[-1]))  # ms (per unit flux)
        self.rate_per_ms = 1.0 / (mass + float(neuron.refractory))
        self.rate = 1000.0 * self.rate_per_ms
        self.density = self.rate_per_ms * p0

    def sources(self, modulate: str) -> np.ndarray:
        """Source of problem E at the two ends of every step (per unit flux)."""
        p0 = self.p0_unit
        s2 = self.sigma ** 2
        if modulate == "mean":
            node_above = node_below = 2.0 * p0 / s2
        else:  # sigma^2: S = -(dP0/du)/sigma^2, dP0/du = G P0 - H J0, J0 jumps at reset
            j_above = (np.arange(p0.size) <= self.k_reset).astype(float)
            j_below = (np.arange(p0.size) < self.k_reset).astype(float)
            node_above = -(self.g_node * p0 - self.h * j_above) / s2
            node_below = -(self.g_node * p0 - self.h * j_below) / s2
        src = np.empty((p0.size - 1, 2))
        src[:, 0] = node_below[:-1]  # upper end of step k is node k, seen from below
        src[:, 1] = node_above[1:]  # lower end of step k is node k+1, seen from above
        return src

    def solve(self, s, modulate: str = "mean"):
        """Rate modulation and ISI transform at Laplace variables ``s`` (1/ms).

        Returns
        -------
        chi : ndarray of complex
            Rate modulation per unit modulation: Hz/mV (``mean``) or Hz/mV^2
            (``sigma2``).
        p_hat : ndarray of complex
            Laplace transform of the ISI density, ``E[exp(-s T)]``.
        """
        s = np.ascontiguousarray(np.asarray(s, dtype=complex).ravel())
        out = np.empty((s.size, 4), dtype=complex)
        _modulated_sweep(s, float(self.neuron.refractory), self.e_w, self.wup, self.wlo,
                         np.ascontiguousarray(self.sources(modulate)), self.du, self.h_step, self.k_reset,
                         self.u.size, out)
        ja, jb, je, ipe = out.T
        delay = np.exp(-s * float(self.neuron.refractory))
        zero = s == 0
        with np.errstate(divide="ignore", invalid="ignore"):
            r1 = np.where(zero, -self.rate_per_ms * ipe, -je / (ja + delay * jb))
            p_hat = np.where(zero, 1.0 + 0.0j, -delay * jb / ja)
        return 1000.0 * self.rate_per_ms * r1, p_hat
