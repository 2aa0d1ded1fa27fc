"""Fokker--Planck solver for populations with Gaussian white-noise input.

Equation
--------
With ``tau_m du = (F(u) + mu) dt + sigma sqrt(tau_m) dW`` the density
``p(u, t)`` (1/mV) obeys

.. math:: \\partial_t p = -\\partial_u J,\\qquad
          J = A(u,t)\\,p - D(t)\\,\\partial_u p + \\text{reinjection},

with ``A = (F(u) + mu)/tau_m`` (mV/ms) and ``D = sigma**2/(2 tau_m)``
(mV^2/ms), an absorbing boundary ``p = 0`` at the neuron's ``boundary``
(threshold or spike cut-off) and a reflecting boundary ``J = 0`` at the
lower end ``u_min``.  The outgoing flux at the boundary is the population
rate; the same probability re-enters at ``reset`` after the absolute
refractory period ``tau_ref``.

Discretisation
--------------
Finite volumes on a non-uniform grid (:mod:`popdens.solvers.grids`) refined near
the boundary and near reset, with the reset potential at a cell centre.
Face fluxes use the exponentially fitted Scharfetter--Gummel form
(Scharfetter & Gummel 1969; Chang & Cooper 1970; Il'in 1969)

.. math:: J_{i+1/2} = \\frac{D}{d}\\,[B(-P)\\,p_i - B(P)\\,p_{i+1}],\\qquad
          P = A\\,d/D,\\quad B(x) = x/(e^x - 1),

exact for a locally constant drift, positive coefficients for any cell
Peclet number (so backward Euler keeps the density non-negative), and
conservative: the total mass changes only by the boundary outflow and the
reinjection.  Time stepping is implicit: backward Euler or the
second-order, L-stable TR-BDF2 (Bank et al. 1985; Hosea & Shampine 1996),
one tridiagonal solve per (sub)step.  The drive and noise amplitude are
interpolated linearly between step boundaries.

Mean adaptation
---------------
For neurons with adaptation currents (:class:`~popdens.Adaptation`) the
density sees the drive ``mu - sum_k <w_k>``, where the population means obey

.. math:: \\tau_k \\frac{d\\langle w_k\\rangle}{dt} = a_k(\\langle u\\rangle - u_{\\rm rest})
          - \\langle w_k\\rangle + b_k \\tau_k\\, r(t)

(the mean-adaptation approximation of Augustin et al. 2017, PLoS Comput.
Biol. 13:e1005545, for the adaptive integrate-and-fire model of Brette &
Gerstner 2005): the spread of ``w`` across neurons, and its correlation with
the potential, are neglected.  It holds for slow adaptation with small jumps
(the spread of ``w`` is ``b sqrt(tau_k r / 2)``); its error is measured
against the Monte Carlo twin in the contributor guide.  Per step the means
decay exactly, relax towards ``a_k(<u> - rest)`` with the mean potential
averaged over the step and gain ``b_k exp(-dt/(2 tau_k))`` per unit of mass
fired; the drive at the step end uses the means predicted with the previous
step's firing.

Conductance input
-----------------
For :class:`~popdens.ConductanceNoise` the drift gains the mean conductances and the Stratonovich
term, ``A = (F(u) + mu + sum_x g_x0 (E_x - u))/tau_m - D'(u)/2``, and the diffusion coefficient
varies with the potential, ``D(u) = sum_x w_x^2 nu_x tau_x^2 (E_x - u)^2 / (2 tau_m^2)``
(:mod:`popdens.theory._conductance`): each face takes its own ``D`` in the Scharfetter--Gummel
flux (frozen over the face, as the drift is), with threshold and reset moved for the synaptic
filtering (:func:`popdens.model.effective.conductance_carrier`).

Refractoriness
--------------
The mass leaving in a step (spikes spread uniformly over the step) is
stored in a delay buffer and re-enters the reset cell, spread over the
step(s) that the delayed interval overlaps.  When ``tau_ref < dt`` part of
a step's outflow re-enters within the same step; that coupling is solved
exactly by a rank-one (Sherman--Morrison) correction, a second back
substitution with the same factorisation.  Density plus buffer mass is
conserved to round-off.

References
----------
Scharfetter, D. L. & Gummel, H. K. (1969). IEEE Trans. Electron Devices 16:64.
Chang, J. S. & Cooper, G. (1970). J. Comput. Phys. 6:1.
Bank, R. E. et al. (1985). IEEE Trans. Electron Devices 32:1992 (TR-BDF2).
Brunel, N. & Hakim, V. (1999). Neural Comput. 11:1621.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from .. import _validation as v
from ..model._kernels import MS_TO_S, NO_REFCOUNT
from ..model.adaptation import step_args
from ..model.conductance import ConductanceNoise
from ..model.effective import conductance_carrier, white_equivalent
from ..model.synaptic import ALPHA
from .grids import Grid, refined_grid
from ._base import SolverBase

__all__ = ["FokkerPlanckSolver"]

SCHEME_BE, SCHEME_TRBDF2 = 0, 1
SCHEMES = {"backward-euler": SCHEME_BE, "tr-bdf2": SCHEME_TRBDF2}
#: TR-BDF2 stage fraction 2 - sqrt(2) (Hosea & Shampine 1996).
GAMMA = 2.0 - math.sqrt(2.0)
#: Default distance of the automatic lower boundary below min(reset, rest + mu0),
#: in stationary standard deviations sigma/sqrt(2): the free-membrane Gaussian
#: tail beyond 8 std is exp(-32) ~ 1e-14.
LOWER_STDS = 8.0
#: Relative tolerance (in units of dt) when splitting the refractory delay into steps.
DELAY_TOL = 1e-9
#: Accuracy guard: largest cell width in units of the free-membrane standard
#: deviation sigma/sqrt(2).  Measured (LIF, stationary rate against the Siegert
#: formula, sigma 0.1-2 mV): relative error 6e-4 to 4e-3 at ratios 0.19-0.38,
#: 4e-3 to 1.7e-2 at 0.5-0.58, 1e-2 to 4e-2 at 0.74-1.5.
MAX_CELL_OVER_STD = 0.5
#: Ratio aimed at by the suggested number of cells.
TARGET_CELL_OVER_STD = 0.25
#: Accuracy guard: largest dt / tau_m.  Measured (LIF, 20 Hz sinusoidal drive, TR-BDF2,
#: RMS rate error against dt = 0.0125 ms): 2e-4 at 0.05, 8e-4 at 0.1, 5e-3 at 0.25.
MAX_DT_OVER_TAU = 0.1
#: Accuracy guard: largest probability in the lowest cell, at the reflecting boundary.
MAX_LOWEST_CELL_MASS = 1e-6
#: Automatic grid: cells tried first, and the part of the rate tolerance (max(RATE_RTOL * rate,
#: RATE_ATOL)) granted to the grid.  The grid's error is estimated from the stationary rates on n and 2n
#: cells (second order: err(n) ~ 4/3 |r_n - r_2n|, Richardson) at the drives the run will see, and n is
#: raised until it is below GRID_SHARE of the tolerance.  Measured at 400 cells (stationary rate vs
#: threshold integration): LIF sigma = 0.5 mV 1.3e-3 to 2.8e-3, EIF slope factor 1 mV 8.7e-4, slope
#: factor 0.5 mV and sigma 1 mV 1.6e-3; the automatic grid keeps them below 5e-4.
AUTO_FIRST_CELLS = 400
#: Relative and absolute (Hz) tolerance on the population rate that the defaults aim at.
RATE_RTOL = 1e-3
RATE_ATOL = 0.01
GRID_SHARE = 0.5
#: Most cells the automatic grid chooses (beyond, an AccuracyWarning names n_cells).
MAX_AUTO_CELLS = 12_000
#: Smallest diffusion factor of a face (conductance input: D vanishes at a reversal potential, where
#: the drift points away and the density is negligible).
MIN_DIFFUSION_FACTOR = 1e-12
#: Rescaling threshold of the stationary backward recursion (avoids overflow).
RESCALE_ABOVE = 1e200


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def _bern(x):  # pragma: no cover - compiled
    """Bernoulli function B(x) = x / (exp(x) - 1) for x >= 0."""
    if x < 1e-5:
        return 1.0 - 0.5 * x + x * x / 12.0
    if x > 700.0:
        return 0.0
    return x / math.expm1(x)


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def _coefficients(ff, dist, ds, mu, sigma, tau_m, alpha, beta):  # pragma: no cover - compiled
    """Face coefficients: J_{i+1/2} = alpha_i p_i - beta_i p_{i+1} (mV/ms).

    ``ds``: per-face factors of the diffusion coefficient (voltage-dependent noise), or empty (constant).
    """
    d_ref = sigma * sigma / (2.0 * tau_m)
    varying = ds.shape[0] > 0
    for i in range(ff.shape[0]):
        a = (ff[i] + mu) / tau_m
        dd = d_ref * ds[i] if varying else d_ref
        g = dd / dist[i]
        x = a * dist[i] / dd
        if x >= 0.0:
            b = g * _bern(x)
            beta[i] = b
            alpha[i] = b + a
        else:
            al = g * _bern(-x)
            alpha[i] = al
            beta[i] = al - a


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def _reset_weight(i, r, rf):  # pragma: no cover - compiled
    """Share of the reinjected mass in cell ``i``: ``1 - rf`` in the reset cell ``r``, ``rf`` in ``r + 1``."""
    if i == r:
        return 1.0 - rf
    if i == r + 1:
        return rf
    return 0.0


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def _solve(h, inv_delta, alpha, beta, rhs, r, rf, phi, out, cp, z):  # pragma: no cover - compiled
    """Solve (H/delta + K) p = rhs + e * phi * alpha_last * p_last into ``out``.

    Thomas algorithm; with ``phi > 0`` a second right-hand side ``e`` (the
    reset: ``1 - rf`` in cell ``r``, ``rf`` in cell ``r + 1``) and a
    Sherman--Morrison correction (same factorisation).
    """
    n = h.shape[0]
    # forward sweep: row i has lower -alpha[i-1], diag, upper -beta[i]
    diag = h[0] * inv_delta + alpha[0]
    up = -beta[0]
    cp[0] = up / diag
    out[0] = rhs[0] / diag
    if phi > 0.0:
        z[0] = _reset_weight(0, r, rf) / diag
    for i in range(1, n):
        low = -alpha[i - 1]
        diag = h[i] * inv_delta + alpha[i] + beta[i - 1] - low * cp[i - 1]
        if i < n - 1:
            cp[i] = -beta[i] / diag
        out[i] = (rhs[i] - low * out[i - 1]) / diag
        if phi > 0.0:
            z[i] = (_reset_weight(i, r, rf) - low * z[i - 1]) / diag
    for i in range(n - 2, -1, -1):
        out[i] -= cp[i] * out[i + 1]
        if phi > 0.0:
            z[i] -= cp[i] * z[i + 1]
    if phi > 0.0:
        g = phi * alpha[n - 1]
        s = g * out[n - 1] / (1.0 - g * z[n - 1])
        for i in range(n):
            out[i] += s * z[i]


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def _step(ff, dist, ds, h, tau_m, r, scheme, dt, phi, q, p, mu0, mu1, sg0, sg1,
          a0, b0, a1, b1, rhs, pg, cp, z):  # pragma: no cover - compiled
    """One step of the density ``p`` with drive ``mu0 -> mu1`` (mV) and noise ``sg0 -> sg1`` (mV).

    ``a0, b0`` hold the face coefficients at the step start and are replaced by those at its end;
    ``q`` is the known reinjection rate (1/ms).  Returns the mass that left through the boundary.
    When drive and noise are the same at both ends, every stage sees the coefficients already in
    ``a0, b0`` (bit for bit: the stage drive ``mu0 + g (mu1 - mu0)`` is then ``mu0``), so they
    are not computed again: the flux-coefficient passes, one ``expm1`` per face, are most of a step.
    """
    g = GAMMA
    return _step_faces(ff, ds, ff, ds, dist, h, tau_m, r, 0.0, scheme, dt, phi, q, p,
                       mu0 + g * (mu1 - mu0), sg0 + g * (sg1 - sg0), mu1, sg1, mu1 == mu0 and sg1 == sg0,
                       a0, b0, a1, b1, rhs, pg, cp, z)


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def _step_faces(ffg, dsg, ff1, ds1, dist, h, tau_m, r, rf, scheme, dt, phi, q, p, mug, sgg, mu1, sg1, const,
                a0, b0, a1, b1, rhs, pg, cp, z):  # pragma: no cover - compiled
    """:func:`_step` with the face drifts and diffusion factors of the TR-BDF2 stage (``ffg``, ``dsg``,
    drive ``mug``, noise ``sgg``) and of the step end (``ff1``, ``ds1``, ``mu1``, ``sg1``) given apart,
    and the reinjection shared between cells ``r`` (``1 - rf``) and ``r + 1`` (``rf``); ``const``: the
    coefficients in ``a0, b0`` hold over the whole step."""
    n = h.shape[0]
    g = GAMMA
    if scheme == SCHEME_BE:
        if const:
            ae, be = a0, b0
        else:
            _coefficients(ff1, dist, ds1, mu1, sg1, tau_m, a1, b1)
            ae, be = a1, b1
        inv = 1.0 / dt
        for i in range(n):
            rhs[i] = h[i] * p[i] * inv
        rhs[r] += (1.0 - rf) * q
        if rf != 0.0:
            rhs[r + 1] += rf * q
        _solve(h, inv, ae, be, rhs, r, rf, phi, p, cp, z)
        outflow = dt * ae[n - 1] * p[n - 1]
    else:
        wa = 1.0 / (g * (2.0 - g))
        wb = (1.0 - g) * (1.0 - g) / (g * (2.0 - g))
        wc = (1.0 - g) / (2.0 - g)
        if const:
            ae, be = a0, b0
        else:
            _coefficients(ffg, dist, dsg, mug, sgg, tau_m, a1, b1)
            ae, be = a1, b1
        d1 = 0.5 * g * dt
        inv = 1.0 / d1
        j_n = a0[n - 1] * p[n - 1]
        # explicit half of the trapezoid: H p / d1 - K_n p + sources at t_n
        for i in range(n):
            kp = a0[i] * p[i]
            if i < n - 1:
                kp -= b0[i] * p[i + 1]
            if i > 0:
                kp -= a0[i - 1] * p[i - 1] - b0[i - 1] * p[i]
            rhs[i] = h[i] * p[i] * inv - kp
        src = 2.0 * q + phi * j_n
        rhs[r] += (1.0 - rf) * src
        if rf != 0.0:
            rhs[r + 1] += rf * src
        _solve(h, inv, ae, be, rhs, r, rf, phi, pg, cp, z)
        j_g = ae[n - 1] * pg[n - 1]
        if not const:
            _coefficients(ff1, dist, ds1, mu1, sg1, tau_m, a1, b1)
        inv = 1.0 / (wc * dt)
        for i in range(n):
            rhs[i] = h[i] * (wa * pg[i] - wb * p[i]) * inv
        rhs[r] += (1.0 - rf) * q
        if rf != 0.0:
            rhs[r + 1] += rf * q
        _solve(h, inv, ae, be, rhs, r, rf, phi, p, cp, z)
        outflow = dt * ((j_n + j_g) * (0.5 / (2.0 - g)) + wc * ae[n - 1] * p[n - 1])
    if not const:
        for i in range(n):
            a0[i] = a1[i]
            b0[i] = b1[i]
    return outflow


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def _reinject(buf, head, n_delay, frac, outflow):  # pragma: no cover - compiled
    """Schedule the reinjection of a step's outflow; returns the new head and the refractory mass."""
    nb = buf.shape[0]
    if n_delay == 0:
        buf[(head + 1) % nb] += frac * outflow
    else:
        buf[(head + n_delay) % nb] += (1.0 - frac) * outflow
        buf[(head + n_delay + 1) % nb] += frac * outflow
    head = (head + 1) % nb
    refr = 0.0
    for j in range(nb):
        refr += buf[j]
    return head, refr


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def _advance(ff, dist, ds, h, centres, tau_m, reset, r, scheme, dt, n_delay, frac,
             p, buf, head, mu, sigma, out_rate, out_mean_u, out_refr,
             a0, b0, a1, b1, rhs, pg, cp, z):  # pragma: no cover - compiled
    """Advance ``len(mu) - 1`` steps in place; returns (head, steps_done, ok)."""
    n = h.shape[0]
    n_steps = mu.shape[0] - 1
    phi = (1.0 - frac) if n_delay == 0 else 0.0
    _coefficients(ff, dist, ds, mu[0], sigma[0], tau_m, a0, b0)
    for k in range(n_steps):
        q = buf[head] / dt  # known reinjection rate during this step (1/ms)
        buf[head] = 0.0
        outflow = _step(ff, dist, ds, h, tau_m, r, scheme, dt, phi, q, p, mu[k], mu[k + 1], sigma[k], sigma[k + 1],
                        a0, b0, a1, b1, rhs, pg, cp, z)
        head, refr = _reinject(buf, head, n_delay, frac, outflow)
        su = 0.0
        for i in range(n):
            su += h[i] * p[i] * centres[i]
        out_rate[k] = outflow / (dt * MS_TO_S)
        out_mean_u[k] = su + refr * reset
        out_refr[k] = refr
        if not (math.isfinite(outflow) and math.isfinite(su)):
            return head, k + 1, False
    return head, n_steps, True


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def _advance_adapting(ff, dist, ds, h, centres, tau_m, reset, r, scheme, dt, n_delay, frac,
                      decay, coup, kick, rest, w, aux,
                      p, buf, head, mu, sigma, out_rate, out_mean_u, out_refr,
                      a0, b0, a1, b1, rhs, pg, cp, z):  # pragma: no cover - compiled
    """:func:`_advance` with mean adaptation currents ``w`` (mV, shape ``(K,)``), see the module docstring.

    ``aux`` holds the summed adaptation subtracted from the drive at the last step end (mV), the mean
    potential (mV) and the mass fired in the previous step.  The drive at a call's first boundary is
    ``mu[0] - aux[0]``, so a jump on that boundary (its right limit in ``mu[0]``) acts from it on, and
    splitting a span into calls changes nothing.
    """
    n = h.shape[0]
    n_steps = mu.shape[0] - 1
    n_comp = w.shape[0]
    phi = (1.0 - frac) if n_delay == 0 else 0.0
    _coefficients(ff, dist, ds, mu[0] - aux[0], sigma[0], tau_m, a0, b0)
    for k in range(n_steps):
        q = buf[head] / dt
        buf[head] = 0.0
        # predicted mean adaptation at the step end (the previous step's firing persists)
        w_end = 0.0
        for c in range(n_comp):
            w_end += w[c] * decay[c] + coup[c] * (1.0 - decay[c]) * (aux[1] - rest) + kick[c] * aux[2]
        mu_end = mu[k + 1] - w_end
        outflow = _step(ff, dist, ds, h, tau_m, r, scheme, dt, phi, q, p, mu[k] - aux[0], mu_end, sigma[k], sigma[k + 1],
                        a0, b0, a1, b1, rhs, pg, cp, z)
        head, refr = _reinject(buf, head, n_delay, frac, outflow)
        su = 0.0
        for i in range(n):
            su += h[i] * p[i] * centres[i]
        mean_u = su + refr * reset
        for c in range(n_comp):
            w[c] = w[c] * decay[c] + coup[c] * (1.0 - decay[c]) * (0.5 * (aux[1] + mean_u) - rest) + kick[c] * outflow
        aux[0] = w_end
        aux[1] = mean_u
        aux[2] = outflow
        out_rate[k] = outflow / (dt * MS_TO_S)
        out_mean_u[k] = mean_u
        out_refr[k] = refr
        if not (math.isfinite(outflow) and math.isfinite(su)):
            return head, k + 1, False
    return head, n_steps, True


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def _mix(rows_f, rows_d, wf, wd, k0, k1, g, d_min, ff, ds):  # pragma: no cover - compiled
    """Face drifts ``ff`` (mV) and diffusion coefficients ``ds`` (mV^2/ms, at least ``d_min``) at the
    weights interpolated a fraction ``g`` of the way from boundary ``k0`` to ``k1``: ``ff = sum_j
    wf_j rows_f[j]`` over the rows ``F, F', 1, v`` and ``ds = sum_j wd_j rows_d[j]`` over ``1, v, v^2``."""
    f0 = wf[0, k0] + g * (wf[0, k1] - wf[0, k0])
    f1 = wf[1, k0] + g * (wf[1, k1] - wf[1, k0])
    f2 = wf[2, k0] + g * (wf[2, k1] - wf[2, k0])
    f3 = wf[3, k0] + g * (wf[3, k1] - wf[3, k0])
    e0 = wd[0, k0] + g * (wd[0, k1] - wd[0, k0])
    e1 = wd[1, k0] + g * (wd[1, k1] - wd[1, k0])
    e2 = wd[2, k0] + g * (wd[2, k1] - wd[2, k0])
    for i in range(ff.shape[0]):
        ff[i] = f0 * rows_f[0, i] + f1 * rows_f[1, i] + f2 + f3 * rows_f[3, i]
        ds[i] = max(e0 + e1 * rows_d[1, i] + e2 * rows_d[2, i], d_min)


@numba.njit(cache=True, nogil=True, _nrt=NO_REFCOUNT)
def _advance_varying(rows_f, rows_d, wf, wd, d_min, unit_sigma, dist, h, centres, tau_m, scheme, dt, n_delay,
                     frac, r_cell, r_frac, u_shift, u_reset, p, buf, head, out_rate, out_mean_u, out_refr,
                     a0, b0, a1, b1, rhs, pg, cp, z, ffg, dsg, ff1, ds1):  # pragma: no cover - compiled
    """Advance ``wf.shape[1] - 1`` steps with face drifts and diffusion coefficients that vary in time
    (:func:`_mix` of the weights ``wf``, ``wd`` at each boundary, linear in between), the reinjection of
    step ``k`` shared between cells ``r_cell[k]`` and ``r_cell[k] + 1`` (fraction ``r_frac[k]``), and the
    grid displaced by ``u_shift[k]`` (mV) at the step end; returns (head, steps_done, ok)."""
    n = h.shape[0]
    n_steps = wf.shape[1] - 1
    phi = (1.0 - frac) if n_delay == 0 else 0.0
    _mix(rows_f, rows_d, wf, wd, 0, 0, 0.0, d_min, ff1, ds1)
    _coefficients(ff1, dist, ds1, 0.0, unit_sigma, tau_m, a0, b0)
    for k in range(n_steps):
        const = True
        for j in range(wf.shape[0]):
            if wf[j, k] != wf[j, k + 1]:
                const = False
        for j in range(wd.shape[0]):
            if wd[j, k] != wd[j, k + 1]:
                const = False
        if not const:
            _mix(rows_f, rows_d, wf, wd, k, k + 1, GAMMA, d_min, ffg, dsg)
            _mix(rows_f, rows_d, wf, wd, k + 1, k + 1, 0.0, d_min, ff1, ds1)
        q = buf[head] / dt
        buf[head] = 0.0
        outflow = _step_faces(ffg, dsg, ff1, ds1, dist, h, tau_m, r_cell[k], r_frac[k], scheme, dt, phi, q, p,
                              0.0, unit_sigma, 0.0, unit_sigma, const, a0, b0, a1, b1, rhs, pg, cp, z)
        head, refr = _reinject(buf, head, n_delay, frac, outflow)
        su = 0.0
        mass = 0.0
        for i in range(n):
            su += h[i] * p[i] * centres[i]
            mass += h[i] * p[i]
        out_rate[k] = outflow / (dt * MS_TO_S)
        out_mean_u[k] = su + u_shift[k] * mass + refr * u_reset[k]
        out_refr[k] = refr
        if not (math.isfinite(outflow) and math.isfinite(su)):
            return head, k + 1, False
    return head, n_steps, True


@numba.njit(cache=True, nogil=True)
def _stationary(alpha, beta, r, p):  # pragma: no cover - compiled
    """Stationary density of the discrete operator, up to a factor; returns the flux.

    Backward recursion from the boundary: the face flux is constant (= J)
    above the reset cell and zero below it (Brunel & Hakim 1999 integrate
    the continuous equation the same way).
    """
    n = p.shape[0]
    jv = 1.0
    p[n - 1] = jv / alpha[n - 1]
    for i in range(n - 2, -1, -1):
        f = jv if i >= r else 0.0
        p[i] = (f + beta[i] * p[i + 1]) / alpha[i]
        if p[i] > RESCALE_ABOVE:
            for j in range(i, n):
                p[j] *= 1.0 / RESCALE_ABOVE
            jv *= 1.0 / RESCALE_ABOVE
    return jv


class FokkerPlanckSolver(SolverBase):
    """Finite-volume Fokker--Planck solver for white-noise populations (see module docstring).

    Parameters
    ----------
    population : Population
        Neuron model with :class:`~popdens.WhiteNoise`, or with
        :class:`~popdens.ColouredNoise` of constant ``sigma``: solved as its
        white-noise equivalent with shifted threshold and reset
        (:mod:`popdens.model.effective`; an approximation, first order in
        ``sqrt(tau_syn/tau_m)``); or with :class:`~popdens.ConductanceNoise`:
        voltage-dependent drift and diffusion of the conductances (white
        limit, Stratonovich) with threshold and reset moved for the
        synaptic filtering, the equation of
        :mod:`popdens.theory._conductance` (``sigma`` is then the noise
        amplitude at threshold, set by the solver).
    dt : float
        Time step (ms).
    scheme : {"tr-bdf2", "backward-euler"}
        Time stepping: second order (default) or first order.  Backward
        Euler keeps the density non-negative for every ``dt``.
    n_cells : int, optional
        Approximate number of potential cells.  Default: chosen so that the
        grid's error in the stationary rate, estimated at the drives the run
        will see (:meth:`plan`, called by :func:`popdens.simulate`), stays
        below half the rate tolerance ``max(1e-3 rate, 0.01 Hz)`` (at least 400).
    refinement : float
        Ratio of coarsest to finest cell width (default 10).
    u_min : float, optional
        Lower (reflecting) boundary (mV).  Default: ``LOWER_STDS`` stationary
        standard deviations ``sigma/sqrt(2)`` below ``min(reset, rest + min(mu0, 0))``,
        with ``sigma`` the initial noise amplitude.  For drives that later fall
        well below ``mu0`` or noise that grows well above its initial value,
        set ``u_min`` (diagnostic ``mass_lowest_cell`` shows whether the
        reflecting boundary is felt).
    grid : Grid, optional
        A ready grid (overrides ``n_cells``, ``refinement``, ``u_min``); its
        upper edge must be the neuron's boundary.
    """

    method_name = "fokker-planck"
    axis_name = "membrane potential (mV)"
    default_dt = 0.1

    def __init__(self, population, dt: float, scheme: str = "tr-bdf2", n_cells: int | None = None,
                 refinement: float = 10.0, u_min: float | None = None, grid: Grid | None = None):
        self._conductance = None
        self._sigma_ref = None
        if isinstance(getattr(population, "noise", None), ConductanceNoise):
            self._conductance = population.noise
            carrier, self._sigma_ref = conductance_carrier(population)
            nrn0 = population.neuron
            # the neuron as given, and the carrier's boundary shifts (mV) at the construction input
            self._own_neuron = nrn0
            self._shifts0 = (float(carrier.neuron.boundary) - float(nrn0.boundary),
                             float(carrier.neuron.reset) - float(nrn0.reset))
            super().__init__(carrier, dt)
        else:
            super().__init__(white_equivalent(population), dt)
        if scheme not in SCHEMES:
            raise ValueError(f"`scheme` must be one of {sorted(SCHEMES)}, got {scheme!r}")
        self.scheme = scheme
        self.n_cells_option = None if n_cells is None else v.positive_int("n_cells", n_cells)
        self._planned: list[tuple[float, float]] = []  # (mu, sigma) the grid must resolve
        self.refinement = float(refinement)
        nrn = self.population.neuron
        if u_min is not None:
            u_min = v.as_finite_float("u_min", u_min)
            v.less_than("u_min", u_min, "reset", float(nrn.reset))
        self.u_min_option = u_min
        if grid is not None:
            if not isinstance(grid, Grid):
                raise ValueError(f"`grid` must be a popdens.solvers.grids.Grid, got {grid!r}")
            if abs(grid.upper - nrn.boundary) > 1e-12 * max(1.0, abs(nrn.boundary)):
                raise ValueError(f"`grid` must end at the neuron's boundary {nrn.boundary!r} mV, "
                                 f"got {grid.upper!r}")
        self.grid = grid
        self._auto_grid = grid is None and u_min is None
        tau_ref = float(nrn.refractory)
        steps = tau_ref / self.dt
        n_delay = int(math.floor(steps + DELAY_TOL))
        frac = steps - n_delay
        if frac < DELAY_TOL:
            frac = 0.0
        self.n_delay, self.frac = n_delay, frac
        self.buf = np.zeros(n_delay + 2)
        self.head = 0
        self.p = None
        # mean adaptation (see the module docstring): currents w (mV) and (drive at the step start,
        # mean potential, mass fired in the last step)
        self._adapt = step_args(nrn, self.dt)[1:] if nrn.adapting else None
        self.w = np.zeros(len(nrn.adaptation))
        self.aux = np.zeros(3)
        self._varying = None  # the next block's time-varying conductance arrays (advance_conductance)
        self._shift_before = None  # grid displacement (mV) one boundary before the next block

    # ----------------------------------------------------------------- grid
    @property
    def order(self) -> int:
        return 1 if self.scheme == "backward-euler" else 2

    def resolution_options(self) -> dict:
        return {"grid": self.grid} if self.grid is not None else {}

    def _noise(self, sigma, mu):
        """``sigma`` as given, or for conductance input the amplitude at threshold (shaped like ``mu``)."""
        if self._conductance is None:
            return sigma
        return self._sigma_ref if np.ndim(mu) == 0 else np.full(np.shape(mu), self._sigma_ref)

    def plan(self, mu, sigma) -> None:
        """Declare the drives ``mu`` and noise amplitudes ``sigma`` (mV, arrays) a run will see.

        The automatic grid (``n_cells`` not given) is then fine enough at their
        extremes, and the automatic ``u_min`` is set below the lowest drive.
        Call before :meth:`initialize`.
        """
        sigma = self._noise(sigma, np.asarray(mu, dtype=float).ravel())
        mu = np.asarray(mu, dtype=float).ravel()
        sigma = np.asarray(sigma, dtype=float).ravel()
        ok = np.isfinite(mu)
        if np.any(ok):
            s_ok = sigma[np.isfinite(sigma) & (sigma > 0)]
            if s_ok.size:
                self._planned = [(float(m), float(sg)) for m in (mu[ok].min(), mu[ok].max())
                                 for sg in {float(s_ok.min()), float(s_ok.max())}]

    def _lower(self, mu0: float, sigma0: float) -> float:
        nrn = self.population.neuron
        mus = [mu0] + [m for m, _ in self._planned]
        sigmas = [sigma0] + [sg for _, sg in self._planned]
        base = min(float(nrn.reset), float(nrn.rest) + min(min(mus), 0.0))
        return base - LOWER_STDS * max(sigmas) / math.sqrt(2.0)

    def _arrays(self, grid: Grid):
        """Widths, centres, centre distances, face drifts (mV), reset cell and face diffusion factors
        (empty for constant noise) of ``grid``."""
        nrn = self.population.neuron
        c = np.array(grid.centres)
        e = np.array(grid.edges)
        # distances between neighbouring centres, and centre -> boundary for the last face
        dist = np.append(np.diff(c), e[-1] - c[-1])
        faces = np.append(e[1:-1], 0.5 * (c[-1] + e[-1]))
        ff = np.ascontiguousarray(nrn.drift(faces), dtype=float)
        ds = np.zeros(0)
        if self._conductance is not None:
            tau_m = float(nrn.tau_m)
            extra, d = self._conductance.density_terms(tau_m, faces)
            ff = np.ascontiguousarray(ff + extra)
            d_ref = self._sigma_ref ** 2 / (2.0 * tau_m)
            ds = np.ascontiguousarray(np.maximum(d / d_ref, MIN_DIFFUSION_FACTOR))
        if not np.all(np.isfinite(ff)):
            raise ValueError("the neuron's drift is not finite on the grid")
        return np.array(grid.widths), c, dist, ff, int(grid.reset_cell), ds

    def _stationary_rate(self, arrays, mu: float, sigma: float) -> float:
        """Stationary rate (Hz) of the discrete operator on a grid's ``arrays``."""
        h, _, dist, ff, r, ds = arrays
        a, b, p = np.zeros(h.size), np.zeros(h.size), np.zeros(h.size)
        _coefficients(ff, dist, ds, float(mu), float(sigma), float(self.population.neuron.tau_m), a, b)
        jv = _stationary(a, b, r, p)
        total = float(np.dot(h, p)) + jv * float(self.population.neuron.refractory)
        return jv / total / MS_TO_S

    def _grid_error(self, coarse, fine, points) -> tuple[float, float]:
        """Largest estimated grid error of the rate over ``points``, in units of the tolerance
        budget GRID_SHARE * max(RATE_RTOL r, RATE_ATOL), and the worst (mu, sigma)'s error (Hz)."""
        worst, worst_hz = 0.0, 0.0
        for mu, sg in points:
            r1 = self._stationary_rate(coarse, mu, sg)
            r2 = self._stationary_rate(fine, mu, sg)
            if not (math.isfinite(r1) and math.isfinite(r2)):
                continue
            err = abs(r1 - r2) * 4.0 / 3.0  # second order in the cell width (Richardson)
            ratio = err / (GRID_SHARE * max(RATE_RTOL * abs(r2), RATE_ATOL))
            if ratio > worst:
                worst, worst_hz = ratio, err
        return worst, worst_hz

    def _auto_cells(self, lo: float, points) -> int:
        """Cells for which the estimated grid error at ``points`` is within the budget."""
        nrn = self.population.neuron
        n = AUTO_FIRST_CELLS
        for _ in range(4):
            coarse = self._arrays(refined_grid(lo, nrn.boundary, nrn.reset, n, self.refinement))
            fine = self._arrays(refined_grid(lo, nrn.boundary, nrn.reset, 2 * n, self.refinement))
            worst, _ = self._grid_error(coarse, fine, points)
            if worst <= 1.0 or n >= MAX_AUTO_CELLS:
                break
            # error ~ n^-2: aim 20 % below the budget, in steps of 50 cells
            n = min(MAX_AUTO_CELLS, int(math.ceil(n * math.sqrt(worst / 0.8) / 50.0)) * 50)
        return n

    def _build(self, mu0: float, sigma0: float) -> None:
        nrn = self.population.neuron
        if self.grid is None:
            lo = self.u_min_option
            if lo is None:
                lo = self._lower(mu0, sigma0)
            n = self.n_cells_option
            if n is None:
                n = self._auto_cells(lo, [(mu0, sigma0)] + self._planned)
            self.grid = refined_grid(lo, nrn.boundary, nrn.reset, n, self.refinement)
        gr = self.grid
        self._h, self._c, self._dist, self._ff, self._r, self._ds = self._arrays(gr)
        self._fine = None  # the 2x grid of the grid-error guard, built when first needed
        n = self._c.size
        self._scratch = [np.zeros(n) for _ in range(8)]
        self.p = np.zeros(n)

    def _args(self):
        nrn = self.population.neuron
        return (self._ff, self._dist, self._ds, self._h, self._c, float(nrn.tau_m), float(nrn.reset), self._r,
                SCHEMES[self.scheme], self.dt, self.n_delay, self.frac)

    def _schedule_fired(self, mass: float, steps_ago: int) -> None:
        """Put into the buffer the part of ``mass``, fired (uniformly) in the step
        ``steps_ago`` >= 1 steps before the current one, that has not re-entered yet."""
        nb = self.buf.size
        for j, w in ((self.n_delay - steps_ago, 1.0 - self.frac), (self.n_delay + 1 - steps_ago, self.frac)):
            if w == 0.0:
                continue
            if j >= 0:  # otherwise it has re-entered already (it is part of p)
                self.buf[(self.head + j) % nb] += mass * w

    # ----------------------------------------------------------------- init
    def initialize(self, mu0: float, sigma0: float, initial="stationary") -> None:
        """Set the state at t = 0.

        ``initial``: ``"stationary"`` (the stationary state of the discrete
        operator at drive ``mu0`` (mV) and noise ``sigma0`` (mV)),
        ``"synchronous"`` (every neuron fires at t = 0 and enters
        refractoriness; without refractoriness a delta at reset) or an
        array: a density (1/mV) on :attr:`axis` (normalised here; no
        refractory mass).
        """
        sigma0 = self._noise(sigma0, 0.0)
        if sigma0 is None or not sigma0 > 0:
            raise ValueError(f"the noise amplitude must be > 0 mV, got {sigma0!r}")
        if self.p is None:
            self._build(float(mu0), float(sigma0))
        self.buf[:] = 0.0
        self.head = 0
        self.p[:] = 0.0
        w_sum = 0.0
        if self._adapt is not None:
            w_sum = self._stationary_adaptation(float(mu0), float(sigma0)) if initial != "synchronous" \
                else float(np.sum(self._adapt[2]))
            if self._auto_grid and float(mu0) - w_sum < min(float(mu0), 0.0):
                # the adapted drive lies below the one the automatic grid was placed for
                self.grid = None
                self._build(float(mu0) - w_sum, float(sigma0))
                if initial != "synchronous":
                    w_sum = self._stationary_adaptation(float(mu0), float(sigma0))
        if isinstance(initial, str) and initial == "stationary":
            flux = self._stationary_density(float(mu0) - w_sum, float(sigma0))
            for i in range(self.n_delay + 1):
                self._schedule_fired(flux * self.dt, i + 1)
        elif isinstance(initial, str) and initial == "synchronous":
            # fired at t = 0 exactly: re-enter at tau_ref, i.e. spread over the step(s) around it
            self._schedule_synchronous()
        elif isinstance(initial, str):
            raise ValueError(f"`initial` must be 'stationary', 'synchronous' or an array, got {initial!r}")
        else:
            dens = np.asarray(initial, dtype=float)
            if dens.shape != self.p.shape:
                raise ValueError(f"`initial` density must have shape {self.p.shape} matching `axis`, got {dens.shape}")
            if not np.all(np.isfinite(dens)) or np.any(dens < 0) or np.dot(dens, self._h) <= 0:
                raise ValueError("`initial` density must be finite, non-negative and not all zero")
            self.p[:] = dens / np.dot(dens, self._h)
        if self._adapt is not None:
            decay, coup, kick, rest = self._adapt
            if initial == "synchronous":
                self.w[:] = kick
            self.aux[:] = (float(self.w.sum()), self.mean_potential(),
                           self._stationary_flux * self.dt if initial == "stationary" else 0.0)

    def _stationary_density(self, mu: float, sigma: float) -> float:
        """Set ``p`` to the stationary density of the discrete operator at drive ``mu`` (mV); returns the flux (1/ms)."""
        a, b = self._scratch[0], self._scratch[1]
        _coefficients(self._ff, self._dist, self._ds, mu, sigma, float(self.population.neuron.tau_m), a, b)
        jv = _stationary(a, b, self._r, self.p)
        total = float(np.dot(self._h, self.p)) + jv * self.population.neuron.refractory
        self.p /= total
        self._stationary_flux = jv / total
        return self._stationary_flux

    def _stationary_adaptation(self, mu0: float, sigma0: float) -> float:
        """Summed mean adaptation (mV) of the discrete scheme's stationary state; sets ``w``.

        Each component solves ``w_k (1 - e_k) = a_k (1 - e_k)(<u> - rest) + kick_k * flux * dt``, the
        fixed point of the step kernel, with ``<u>`` and the flux of the stationary density at the
        drive ``mu0 - sum w``; the sum is found by Brent's method (it lowers the rate monotonically).
        """
        from scipy.optimize import brentq

        decay, coup, kick, rest = self._adapt
        reset = float(self.population.neuron.reset)

        def comps(total):
            flux = self._stationary_density(mu0 - total, sigma0)
            ubar = float(np.dot(self._h * self._c, self.p)) + flux * self.population.neuron.refractory * reset
            return coup * (ubar - rest) + kick * flux * self.dt / (1.0 - decay)

        def excess(total):
            return float(np.sum(comps(total))) - total

        hi = max(1.0, float(np.sum(comps(0.0))))
        while excess(hi) > 0.0:
            hi *= 2.0
            if hi > 1e6:
                raise ValueError(f"no stationary mean adaptation at `mu` = {mu0!r} mV")
        total = brentq(excess, 0.0, hi, xtol=1e-13, rtol=1e-13) if excess(0.0) > 0.0 else 0.0
        self.w[:] = comps(total)
        return float(np.sum(self.w))

    def _schedule_synchronous(self) -> None:
        tau_ref = self.population.neuron.refractory
        x = tau_ref / self.dt - 0.5  # reinjection spread over step j has mean time (j + 1/2) dt
        if tau_ref == 0.0:
            self.p[self._r] = 1.0 / self._h[self._r]
            return
        j0 = int(math.floor(x))
        w1 = x - j0
        for j, w in ((j0, 1.0 - w1), (j0 + 1, w1)):
            if w <= 0.0:
                continue
            if j < 0:
                self.p[self._r] += w / self._h[self._r]
            else:
                self.buf[(self.head + j) % self.buf.size] += w

    # ----------------------------------------------------------------- step
    def advance_conductance(self, mu, channels, first, second):
        """Advance ``len(mu) - 1`` steps with conductance input that varies in time.

        For a solver built with :class:`~popdens.ConductanceNoise`: the input is given per channel by
        ``S1 = sum w n`` and ``S2 = sum w^2 n`` (Hz; jumps ``w`` in leak units, ``n`` input spikes per
        second) at every step boundary, which fixes the mean conductance ``S1 tau`` and the white-limit
        intensity ``S2 tau^2`` (:mod:`popdens.network._conductance_input`); with one input type of jump
        ``w`` at rate ``nu(t)``, ``S1 = w nu`` and ``S2 = w^2 nu``.  Drift and diffusion coefficient are
        linear in them and are combined per step in compiled code; threshold and reset move with the
        boundary shifts of the input at each boundary: the threshold by a change of variable (the grid
        moves with it: the drift gains ``F'(u) Delta - e1 Delta - tau_m dDelta/dt`` and the diffusion is
        taken at ``u + Delta``, exact for a linear ``F``, first order otherwise), the reset relative to it
        by sharing the reinjection between the two nearest cells.  With the input of construction at
        every boundary the step is the solver's own (to round-off).

        Parameters
        ----------
        mu : array_like
            Drive (mV) at the step boundaries, shape ``(n + 1,)``.
        channels : sequence of (float, float)
            ``(reversal mV, tau ms)`` of each channel.
        first, second : array_like
            ``S1`` and ``S2`` (Hz) of each channel at the boundaries, shape ``(len(channels), n + 1)``.

        Returns
        -------
        tuple of ndarray
            Rate (Hz), mean potential (mV) and refractory fraction per step, as :meth:`advance`.
        """
        if self._conductance is None:
            raise ValueError("advance_conductance needs a solver built for ConductanceNoise input")
        if self._adapt is not None:
            raise ValueError("advance_conductance does not support adapting neurons")
        if self.p is None:
            raise RuntimeError("call initialize() first")
        mu = np.ascontiguousarray(mu, dtype=float)
        rev = np.array([float(c[0]) for c in channels])[:, None]
        tau = np.array([float(c[1]) for c in channels])[:, None]
        s1 = np.asarray(first, dtype=float).reshape(len(channels), mu.size) * 1e-3  # 1/ms
        s2 = np.asarray(second, dtype=float).reshape(len(channels), mu.size) * 1e-3
        nrn = self._own_neuron
        tau_m = float(nrn.tau_m)
        th0, re0 = float(nrn.boundary), float(nrn.reset)
        q = s2 * tau * tau / (2.0 * tau_m * tau_m)  # D(u) = sum q (E - u)^2 (mV^2/ms per mV^2)
        c = s1 * tau + tau_m * q  # drift sum c (E - u): mean conductance and the Stratonovich term
        e0, e1 = np.sum(c * rev, axis=0), np.sum(c, axis=0)
        d0, d1, d2 = np.sum(q * rev * rev, axis=0), -2.0 * np.sum(q * rev, axis=0), np.sum(q, axis=0)
        if nrn.has_cutoff:
            sh_th = sh_re = np.zeros(mu.size)
        else:  # ConductanceNoise.boundary_shifts at each boundary
            d_x = q * (rev - th0) ** 2
            d_th = np.sum(d_x, axis=0)
            part = ALPHA / math.sqrt(2.0) * d_x * np.sqrt(tau) / np.sqrt(np.where(d_th > 0.0, d_th, np.inf))
            sh_th = np.sum(part, axis=0)
            sh_re = np.sum(np.where(rev != th0, part * (rev - re0) / np.where(rev != th0, rev - th0, 1.0), 0.0),
                           axis=0)
        delta = sh_th - self._shifts0[0]  # the grid's displacement (mV)
        before = delta[0] if self._shift_before is None else self._shift_before
        slope = np.diff(np.concatenate([[before], delta])) / self.dt  # backward differences (mV/ms)
        wf = np.array([np.ones(mu.size), delta, mu + e0 - e1 * delta - tau_m * slope, -e1])
        wd = np.array([d0 + d1 * delta + d2 * delta * delta, d1 + 2.0 * d2 * delta, d2])
        # the reset relative to the displaced grid, at each step's midpoint
        eps = (sh_re - self._shifts0[1]) - delta
        pos = self._c[self._r] + 0.5 * (eps[1:] + eps[:-1])
        cell = np.clip(np.searchsorted(self._c, pos, side="right") - 1, 0, self._c.size - 2)
        share = np.clip((pos - self._c[cell]) / (self._c[cell + 1] - self._c[cell]), 0.0, 1.0)
        self._varying = (np.ascontiguousarray(wf), np.ascontiguousarray(wd), np.ascontiguousarray(cell, dtype=np.int64),
                         np.ascontiguousarray(share), np.ascontiguousarray(delta[1:]),
                         np.ascontiguousarray(re0 + sh_re[1:]))
        if mu.size > 1:
            self._shift_before = float(delta[-2])
        try:
            return self.advance(mu, None)
        finally:
            self._varying = None

    def _varying_rows(self):
        """Face rows ``F, F', 1, v`` of the drift and ``1, v, v^2`` of the diffusion (advance_conductance)."""
        if getattr(self, "_rows", None) is None or self._rows[0] is not self.grid:
            e, c = np.array(self.grid.edges), self._c
            faces = np.append(e[1:-1], 0.5 * (c[-1] + e[-1]))
            nrn = self._own_neuron
            rows_f = np.array([nrn.drift(faces), nrn.drift_slope(faces), np.ones(faces.size), faces])
            rows_d = np.array([np.ones(faces.size), faces, faces * faces])
            self._rows = (self.grid, np.ascontiguousarray(rows_f, dtype=float), rows_d,
                          [np.zeros(faces.size) for _ in range(4)])
        return self._rows[1:]

    def _advance_impl(self, mu, sigma):
        if self.p is None:
            raise RuntimeError("call initialize() first")
        if self._varying is not None:
            n = mu.size - 1
            rate, mean_u, refr = np.empty(n), np.empty(n), np.empty(n)
            s = self._scratch
            rows_f, rows_d, extra = self._varying_rows()
            tau_m = float(self.population.neuron.tau_m)
            d_min = MIN_DIFFUSION_FACTOR * self._sigma_ref ** 2 / (2.0 * tau_m)
            head, done, ok = _advance_varying(rows_f, rows_d, self._varying[0], self._varying[1], d_min,
                                              math.sqrt(2.0 * tau_m), self._dist, self._h, self._c, tau_m,
                                              SCHEMES[self.scheme], self.dt, self.n_delay, self.frac,
                                              *self._varying[2:], self.p, self.buf, self.head, rate, mean_u, refr,
                                              s[0], s[1], s[2], s[3], s[4], s[5], s[6], s[7], *extra)
            self.head = int(head)
            msg = "" if ok else f"non-finite density at t = {self.t + done * self.dt:g} ms"
            return rate[:done], mean_u[:done], refr[:done], (bool(ok), msg)
        sigma = self._noise(sigma, mu)
        if sigma is None or sigma.shape != mu.shape:
            raise ValueError("`sigma` (mV) must be given at the same step boundaries as `mu`")
        if not np.all(sigma > 0):
            return np.empty(0), np.empty(0), np.empty(0), (False, "the noise amplitude must stay > 0 mV")
        n = mu.size - 1
        rate = np.empty(n)
        mean_u = np.empty(n)
        refr = np.empty(n)
        s = self._scratch
        if self._adapt is None:
            head, done, ok = _advance(*self._args(), self.p, self.buf, self.head, mu, sigma, rate, mean_u, refr,
                                      s[0], s[1], s[2], s[3], s[4], s[5], s[6], s[7])
        else:
            head, done, ok = _advance_adapting(*self._args(), *self._adapt, self.w, self.aux, self.p, self.buf,
                                               self.head, mu, sigma, rate, mean_u, refr,
                                               s[0], s[1], s[2], s[3], s[4], s[5], s[6], s[7])
        self.head = int(head)
        msg = "" if ok else f"non-finite density at t = {self.t + done * self.dt:g} ms"
        return rate[:done], mean_u[:done], refr[:done], (bool(ok), msg)

    # ------------------------------------------------------------ observers
    @property
    def axis(self) -> np.ndarray:
        """Cell centres (mV)."""
        if self.p is None:
            raise RuntimeError("the grid is built by initialize()")
        return self._c

    def density(self) -> np.ndarray:
        """Density (1/mV) of the non-refractory neurons on :attr:`axis` (cell averages)."""
        return self.p.copy()

    def mass(self) -> float:
        return float(np.dot(self._h, self.p) + self.buf.sum())

    def mean_potential(self) -> float:
        return float(np.dot(self._h * self._c, self.p) + self.buf.sum() * self.population.neuron.reset)

    def refractory_fraction(self) -> float:
        return float(self.buf.sum())

    def instantaneous_rate(self, mu: float, sigma: float) -> float:
        """Outgoing flux at the boundary (Hz) for drive ``mu`` (mV) and noise ``sigma`` (mV)."""
        a, b = np.zeros(self.p.size), np.zeros(self.p.size)
        mu = float(mu) - float(self.w.sum())
        sigma = self._noise(sigma, mu)
        _coefficients(self._ff, self._dist, self._ds, mu, float(sigma), float(self.population.neuron.tau_m), a, b)
        return float(a[-1] * self.p[-1] / MS_TO_S)

    def accuracy_issues(self, mu, sigma) -> list[tuple[str, str]]:
        """Cell size against the noise, ``dt`` against ``tau_m``, mass at the lower boundary."""
        issues = []
        if self.p is None:
            return issues
        tau_m = float(self.population.neuron.tau_m)
        sigma = self._noise(sigma, np.asarray(mu, dtype=float))
        s_min = float(np.min(sigma)) if sigma is not None and np.size(sigma) else math.nan
        ratio = float(self._h.max()) / (s_min / math.sqrt(2.0))
        # the grid's estimated rate error at the current drive (as the density sees it: less the mean
        # adaptation) and, as a floor, the cell size against sigma
        mu = np.asarray(mu, dtype=float) - float(self.w.sum())
        worst, err_hz = self._grid_error_now(mu, sigma)
        n_err = int(math.ceil(self.p.size * math.sqrt(worst / 0.8) / 50.0)) * 50  # to 0.8 of the budget
        n_std = int(math.ceil(self.p.size * ratio / TARGET_CELL_OVER_STD / 50.0)) * 50
        if worst > 1.0 / GRID_SHARE:
            issues.append(("n_cells", f"the potential grid ({self.p.size} cells) is too coarse at drive "
                                      f"{float(mu[-1]):.4g} mV: its estimated rate error {err_hz:.3g} Hz exceeds "
                                      f"max({RATE_RTOL:g} x rate, {RATE_ATOL:g} Hz); "
                                      f"use n_cells = {max(n_err, n_std if ratio > MAX_CELL_OVER_STD else 0)} or more"))
        elif ratio > MAX_CELL_OVER_STD:
            issues.append(("n_cells", f"potential cells up to {self._h.max():.3g} mV wide are too coarse for "
                                      f"sigma = {s_min:.3g} mV ({ratio:.2f} free-membrane standard deviations, "
                                      f"limit {MAX_CELL_OVER_STD:g}); use n_cells = {max(n_std, n_err)} or more"))
        if self.dt > MAX_DT_OVER_TAU * tau_m:
            k = math.ceil(self.dt / (MAX_DT_OVER_TAU * tau_m))
            issues.append(("dt", f"`dt` = {self.dt:g} ms is more than {MAX_DT_OVER_TAU:g} `tau_m` "
                                 f"({tau_m:g} ms); use dt = {self.dt / k:.4g} ms or smaller"))
        low = float(self._h[0] * self.p[0])
        if low > MAX_LOWEST_CELL_MASS:
            issues.append(("u_min", f"the lowest cell (reflecting boundary `u_min` = {self.grid.lower:.4g} mV) "
                                    f"holds {low:.3g} of the population (limit {MAX_LOWEST_CELL_MASS:g}); "
                                    f"use u_min = {self.grid.lower - 4.0 * s_min / math.sqrt(2.0):.4g} mV or lower"))
        return issues

    def _grid_error_now(self, mu, sigma) -> tuple[float, float]:
        """Grid error estimate (as in :meth:`_grid_error`) at the last drive and noise of a block."""
        if sigma is None or not np.size(sigma) or not np.size(mu):
            return 0.0, 0.0
        if self._fine is None:
            g = self.grid
            e = g.edges
            # halve every cell; the reset cell's centre stays a centre (split into three: 1/4, 1/2, 1/4)
            mids = 0.5 * (e[1:] + e[:-1])
            q = 0.25 * (e[g.reset_cell + 1] - e[g.reset_cell])
            cuts = np.concatenate([mids[:g.reset_cell], [mids[g.reset_cell] - q, mids[g.reset_cell] + q],
                                   mids[g.reset_cell + 1:]])
            fine = Grid(np.sort(np.concatenate([e, cuts])), 2 * g.reset_cell + 1)
            self._fine = self._arrays(fine)
        coarse = (self._h, self._c, self._dist, self._ff, self._r, self._ds)
        return self._grid_error(coarse, self._fine, [(float(mu[-1]), float(sigma[-1]))])

    def diagnostics(self) -> dict:
        if self.p is None:
            return {}
        out = {"n_cells": int(self.p.size), "u_min_mV": self.grid.lower, "scheme": self.scheme,
               "min_cell_mV": float(self._h.min()), "max_cell_mV": float(self._h.max()),
               "mass_lowest_cell": float(self._h[0] * self.p[0])}
        if self._adapt is not None:
            out["mean_adaptation_mV"] = [float(x) for x in self.w]
        return out
