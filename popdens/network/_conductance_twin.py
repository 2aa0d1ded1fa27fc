"""The spiking twin's conductance synapses: checks and per-pathway arrays for the compiled kernel.

The kernel is :func:`popdens.twins._network_conductance.run_conductance_network`; it shares the
ring buffers, connectivity and external feeds that :func:`popdens.network.montecarlo_network`
builds for current synapses and takes, per pathway (recurrent first, then the external feeds),
whether it is a conductance, its weight (leak units), reversal potential (mV), time constant (ms)
and the step-average factor ``a = tau (1 - exp(-dt/tau)) / dt``.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["conductance_kernel"]


def conductance_kernel(circuit):
    """``None`` when no cohort receives conductance synapses, else ``build(feeds, dt) -> kernel``.

    Parameters
    ----------
    circuit : Circuit
        The circuit to simulate.

    Returns
    -------
    callable or None
        ``build(feeds, dt)`` returns a function with the call signature of
        :func:`popdens.twins._network.run_network` running the conductance kernel.

    Raises
    ------
    NotImplementedError
        Conductance cohorts mixed with cohorts of other input, or adapting neurons.
    """
    kinds = [circuit.synapse_kind(k) for k in range(circuit.n)]
    if "conductance" not in kinds:
        return None
    others = [nm for nm, kd in zip(circuit.names, kinds) if kd != "conductance"]
    if others:
        raise NotImplementedError(f"montecarlo_network: cohorts {others} do not receive conductance synapses while "
                                  "others do; the spiking twin simulates conductance circuits whose every cohort "
                                  "has conductance input")
    for a in circuit.cohorts:
        if a.population.neuron.adapting:
            raise NotImplementedError(f"montecarlo_network: cohort {a.name!r} has `adaptation`, which the "
                                      "conductance twin does not support yet")

    def build(feeds, dt: float):
        from ..twins._network_conductance import run_conductance_network  # noqa: PLC0415 - compiled

        cond, w, rev, tau = [], [], [], []
        for p in circuit.pathways:
            cond.append(1)
            w.append(p.weight)
            rev.append(p.reversal)
            tau.append(p.tau_syn)
        for kind, a in zip(feeds.kinds, feeds.cohorts):
            if kind == "poisson":  # a conductance background (tau_syn > 0)
                bg = a.background
                cond.append(1)
                w.append(bg.weight)
                rev.append(bg.reversal)
                tau.append(bg.tau_syn)
            else:  # coloured external noise of zero amplitude (sigma_ext = 0 is required)
                cond.append(0)
                w.append(0.0)
                rev.append(0.0)
                tau.append(1.0)
        tau_a = np.array(tau, dtype=float)
        extra = (np.array(cond, dtype=np.int64), np.array(w, dtype=float), np.array(rev, dtype=float), tau_a,
                 np.array([t * -math.expm1(-dt / t) / dt for t in tau_a], dtype=float))
        extra = tuple(x if x.size else np.zeros(1, x.dtype) for x in extra)

        def kernel(*args):
            return run_conductance_network(*args, *extra)

        return kernel

    return build
