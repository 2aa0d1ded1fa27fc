"""One age bin (or one escape-noise neuron) over one time step: the step shared by the
refractory-density solver, its adapting variant and the escape-noise Monte Carlo twin, so that
all of them simulate one and the same discretised neuron (see :mod:`popdens.solvers.refractory`)."""

from __future__ import annotations

import math

import numba

from ..model._kernels import MS_TO_S, NO_REFCOUNT, advance_potential, drift_value, hazard_value
from ..model.neurons import CODE_LIF

__all__ = ["AGE_TOL", "_bin_step", "_newborn", "_refire_survival"]

#: Relative tolerance (in units of dt) for deciding whether the refractory
#: period ends at a step boundary (guards against round-off in j*dt).
AGE_TOL = 1e-9


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def _bin_step(ncode, npar, nops, nargs, tau_m, reset, boundary, has_cutoff,
              hcode, hpar, hops, hargs, theta, uses_slope,
              age0, tau_ref, dt, e_dt, u, h_cached, mu0, mu1, stack, xbuf):  # pragma: no cover
    """Advance one bin over one step.

    Returns ``(u_new, h_new, H)``: the potential (mV) and hazard (Hz) at the
    step end and the integrated hazard ``H`` (dimensionless, ``inf`` at a
    spike cut-off) over the free part of the step, so the survival is
    ``exp(-H)``.
    """
    free = age0 + dt - tau_ref
    tol = AGE_TOL * dt
    if free <= tol:
        return reset, 0.0, 0.0
    if free >= dt - tol:
        free = dt
        if age0 - tau_ref < tol:
            # refractoriness ended exactly at the start of the step
            d0 = 0.0
            if uses_slope:
                d0 = (drift_value(ncode, npar, nops, nargs, u, stack, xbuf) + mu0) / tau_m
            h_start = hazard_value(hcode, hpar, hops, hargs, u, theta, d0, stack, xbuf)
        else:
            h_start = h_cached
        if ncode == CODE_LIF:
            slope_mu = (mu1 - mu0) / dt
            c = u - (npar[0] + mu0) + tau_m * slope_mu
            u_new = (npar[0] + mu1) - tau_m * slope_mu + c * e_dt
        else:
            u_new = advance_potential(ncode, npar, nops, nargs, tau_m, u, dt, mu0, mu1, stack, xbuf)
    else:
        # the refractory period ends inside this step: start at reset
        mus = mu1 - (mu1 - mu0) * free / dt
        d0 = 0.0
        if uses_slope:
            d0 = (drift_value(ncode, npar, nops, nargs, reset, stack, xbuf) + mus) / tau_m
        h_start = hazard_value(hcode, hpar, hops, hargs, reset, theta, d0, stack, xbuf)
        u_new = advance_potential(ncode, npar, nops, nargs, tau_m, reset, free, mus, mu1, stack, xbuf)
    d1 = 0.0
    if uses_slope:
        d1 = (drift_value(ncode, npar, nops, nargs, u_new, stack, xbuf) + mu1) / tau_m
    h_new = hazard_value(hcode, hpar, hops, hargs, u_new, theta, d1, stack, xbuf)
    if has_cutoff and u_new >= boundary:
        return boundary, h_new, math.inf
    return u_new, h_new, 0.5 * (h_start + h_new) * free * MS_TO_S


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def _newborn(ncode, npar, nops, nargs, tau_m, reset, hcode, hpar, hops, hargs, theta, uses_slope,
             tau_ref, dt, mu1, stack, xbuf):  # pragma: no cover
    """Potential (mV) and hazard (Hz) of neurons that fired during the step just ended.

    They fired on average half a step ago, so they enter with age dt/2: held
    at reset while refractory, then integrated freely for the rest of that
    half step.  This midpoint convention removes the O(dt) delay that
    placing every spike at the end of its step would add to each interval.
    """
    free = 0.5 * dt - tau_ref
    if free <= 0.0:
        return reset, 0.0
    un = advance_potential(ncode, npar, nops, nargs, tau_m, reset, free, mu1, mu1, stack, xbuf)
    d1 = 0.0
    if uses_slope:
        d1 = (drift_value(ncode, npar, nops, nargs, un, stack, xbuf) + mu1) / tau_m
    return un, hazard_value(hcode, hpar, hops, hargs, un, theta, d1, stack, xbuf)


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def _refire_survival(ncode, npar, nops, nargs, tau_m, reset, hcode, hpar, hops, hargs, theta, uses_slope,
                     tau_ref, dt, mu1, h_newborn, stack, xbuf):  # pragma: no cover
    """Probability that a neuron born in the step just ended does not fire again before its end.

    Under the midpoint convention of :func:`_newborn` a newborn has been free
    for ``dt/2 - tau_ref`` ms of its birth step (its potential has moved), so
    it may fire again within it: with the hazard integrated by the trapezoidal
    rule from reset to the newborn potential, it survives with ``exp(-H)``.
    A neuron that fires again is reborn, so a step's ``fired`` mass stands for
    ``fired / survival`` spikes (a geometric series) while the mass reborn
    stays ``fired``.  Without it the rate would be low by ``H``, a first-order
    error in dt when ``tau_ref < dt/2`` (measured 3.7e-4 at dt = 0.1 ms for a
    flat exponential hazard and no refractory period; 3.3e-7 with it).
    """
    free = 0.5 * dt - tau_ref
    if free <= 0.0:
        return 1.0
    d0 = 0.0
    if uses_slope:
        d0 = (drift_value(ncode, npar, nops, nargs, reset, stack, xbuf) + mu1) / tau_m
    h_reset = hazard_value(hcode, hpar, hops, hargs, reset, theta, d0, stack, xbuf)
    return math.exp(-0.5 * (h_reset + h_newborn) * free * MS_TO_S)
