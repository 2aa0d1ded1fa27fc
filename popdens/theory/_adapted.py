"""Stationary states of adapting populations (the back end of the steady-state front end).

Escape noise (spike-weighted closure)
-------------------------------------
A neuron leaves each spike with its adaptation ``z = jump + x``: the kick of
that spike on top of ``x``, what it carried into the spike.  In the
closure used by the refractory-density solver (default ``"spike-weighted"``,
:mod:`popdens.solvers._refractory_adapting`) every neuron leaves a spike with
the same ``z``, and ``x`` is the mean adaptation with which neurons reach
their next spike, ``x_k = J_k(jump + x) = int P(a) z_k(a) da``
(:mod:`popdens.theory._renewal_adapting`).  The stationary state is the
renewal process from the fixed point ``x*``: rate ``1/m0``, mean potential
``m_u/m0``.  The CV of that renewal process neglects the spread of ``x``
across intervals (and the serial correlations it causes) and is labelled
accordingly.

White noise (mean adaptation)
-----------------------------
The population means ``w_k`` obey ``tau_k dw_k/dt = a_k(<u> - rest) - w_k +
jump_k tau_k r`` (Augustin et al. 2017, PLoS Comput. Biol. 13:e1005545); at
steady state ``w_k = a_k (<u> - rest) + jump_k tau_k r``, with ``r`` and
``<u>`` those of the renewal neuron at the drive ``mu - sum w``.  The sum
``S`` solves ``sum_k w_k(S) = S`` (Brent's method; the left side falls as
``S`` grows).  This is the adiabatic (slow-adaptation) limit of the exact
model.

Units: mV, ms; rates in Hz.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq, root

from ..exceptions import ConvergenceError
from ..model.adaptation import pack
from ._renewal import STATUS_OK
from ._renewal_adapting import adapted_renewal, n_components
from ._scales import kernel_neuron, scratch

__all__ = ["AdaptedState", "escape_adapted", "white_adapted"]

#: Tolerance of the fixed point of the adaptation carried into a spike (mV).
FIXED_POINT_TOL = 1e-12
#: Largest summed mean adaptation (mV) searched before giving up.
MAX_ADAPTATION_MV = 1e6


@dataclass(frozen=True)
class AdaptedState:
    """Stationary state of an adapting population at one drive."""

    rate: float  # Hz
    mean_u: float  # mV (nan where not computed)
    m0: float  # mean ISI (ms)
    m1: float  # half the second moment of the ISI (ms^2)
    post_spike: np.ndarray  # adaptation right after a spike (mV, escape) or mean adaptation (mV, white)
    effective_drive: float  # mu - sum of mean currents (mV, white noise)


def _escape_call(population, mu):
    nrn, hz = population.neuron, population.noise.hazard
    kinds, taus, jumps, coup = pack(nrn.adaptation)
    kn = kernel_neuron(nrn)
    kh = (hz.code, np.ascontiguousarray(hz.kernel_params, dtype=float), hz.program[0], hz.program[1])
    stack, xbuf = scratch(nrn.program, hz.program)
    nc = n_components(kinds.size)
    work, out = np.zeros((10, nc)), np.zeros(nc)

    def run(x):
        st = adapted_renewal(*kn, float(nrn.tau_m), float(nrn.reset), float(nrn.boundary), bool(nrn.has_cutoff),
                             float(nrn.refractory), float(mu), *kh, float(nrn.threshold), kinds, taus, coup,
                             float(nrn.rest), np.ascontiguousarray(jumps + x), work, out, stack, xbuf)
        if st != STATUS_OK:
            raise ConvergenceError(f"the adapted renewal integrals did not converge at `mu` = {mu!r} mV")
        return out.copy()

    return run, kinds.size, jumps


def escape_adapted(population, mu: float) -> AdaptedState:
    """Stationary state of the spike-weighted closure at drive ``mu`` (mV), escape noise."""
    run, k, jumps = _escape_call(population, mu)

    def carried(x):
        o = run(x)
        if not math.isfinite(o[k + 2]):
            return np.zeros(k)  # the neuron stops firing: nothing is carried into a spike
        return o[k + 5:]

    if k == 1:
        g = lambda x: float(carried(np.array([x]))[0]) - x  # noqa: E731
        hi = max(1.0, 2.0 * float(jumps[0]))
        while g(hi) > 0.0:
            hi *= 2.0
            if hi > MAX_ADAPTATION_MV:
                raise ConvergenceError(f"no stationary adaptation state at `mu` = {mu!r} mV")
        x = np.array([brentq(g, 0.0, hi, xtol=FIXED_POINT_TOL, rtol=1e-13) if g(0.0) > 0.0 else 0.0])
    else:
        sol = root(lambda x: carried(x) - x, np.zeros(k), method="hybr", options={"xtol": 1e-13})
        x = sol.x
        if not np.all(np.abs(carried(x) - x) <= 1e-9 * (1.0 + np.abs(x))):
            raise ConvergenceError(f"no stationary adaptation state at `mu` = {mu!r} mV: {sol.message}")
    o = run(x)
    m0 = float(o[k + 2])
    rate = 1000.0 / m0 if math.isfinite(m0) else 0.0
    mean_u = float(o[k + 4]) / m0 if math.isfinite(m0) else float("nan")
    return AdaptedState(rate=rate, mean_u=mean_u, m0=m0, m1=float(o[k + 3]), post_spike=jumps + x,
                        effective_drive=float(mu))


def white_adapted(population, mu: float, rate_of, mean_u_of=None) -> AdaptedState:
    """Mean-adaptation stationary state at drive ``mu`` (mV), white noise.

    ``rate_of(drive)`` gives the renewal neuron's rate (Hz) and
    ``mean_u_of(drive)`` its mean potential (mV), needed only with a coupling.
    """
    nrn = population.neuron
    _, taus, jumps, coup = pack(nrn.adaptation)
    rest = float(nrn.rest)
    coupled = bool(np.any(coup != 0.0))

    def comps(total):
        r = float(rate_of(mu - total)) * 1e-3  # 1/ms
        ubar = float(mean_u_of(mu - total)) if coupled else 0.0
        return coup * (ubar - rest) + jumps * taus * r

    def excess(total):
        return float(np.sum(comps(total))) - total

    e0 = excess(0.0)
    if e0 > 0.0:
        hi = max(1.0, e0)
        while excess(hi) > 0.0:
            hi *= 2.0
            if hi > MAX_ADAPTATION_MV:
                raise ConvergenceError(f"no stationary mean adaptation at `mu` = {mu!r} mV")
        total = brentq(excess, 0.0, hi, xtol=FIXED_POINT_TOL, rtol=1e-13)
    elif e0 < 0.0 and coupled:
        # a coupling below rest can make the mean current negative
        lo = min(-1.0, e0)
        while excess(lo) < 0.0:
            lo *= 2.0
            if lo < -MAX_ADAPTATION_MV:
                raise ConvergenceError(f"no stationary mean adaptation at `mu` = {mu!r} mV")
        total = brentq(excess, lo, 0.0, xtol=FIXED_POINT_TOL, rtol=1e-13)
    else:
        total = 0.0
    w = comps(total)
    r = float(rate_of(mu - total))
    return AdaptedState(rate=r, mean_u=float(mean_u_of(mu - total)) if mean_u_of else float("nan"),
                        m0=1000.0 / r if r > 0 else math.inf, m1=float("nan"), post_spike=w,
                        effective_drive=float(mu - total))
