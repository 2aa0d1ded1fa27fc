"""Conductance synapses in the mean field of a circuit.

A cohort whose pathways (and background) are ``synapse="conductance"``
receives, at rates ``A_l`` (Hz), Poisson input through exponentially
decaying conductances: pathway ``l -> k`` delivers ``n = C_kl A_l`` input
spikes per second to each neuron, each opening a conductance ``w`` (leak
units) that decays with ``tau_syn`` towards the ``reversal`` potential; a
background adds ``count * rate``.  At a fixed point the cohort is a
:class:`~popdens.ConductanceNoise` population (effective-time-constant
approximation; Richardson 2004, Phys. Rev. E 69:051918; Richardson &
Gerstner 2005, Neural Comput. 17:923) driven by the cohort's own
``drive``.

Merging pathways into channels
------------------------------
:class:`~popdens.ConductanceNoise` carries two channels of one weight, time
constant and reversal potential each.  Its theory (mean conductance, the
white-limit diffusion ``D(u)``, the boundary shifts and the linear
response; :mod:`popdens.theory._conductance`) uses a channel only through
its mean ``w nu tau`` and its intensity ``w^2 nu tau^2`` (Campbell's
theorem), so inputs of one ``(reversal, tau_syn)`` with different weights
merge exactly into one channel with

.. math:: S_1 = \\sum_p w_p n_p,\\quad S_2 = \\sum_p w_p^2 n_p,\\qquad
          w = S_2 / S_1,\\quad \\nu = S_1^2 / S_2

(same ``w nu`` and ``w^2 nu``).  More than two distinct ``(reversal,
tau_syn)`` pairs into one cohort, or two of one reversal potential, are
refused with an error naming the inputs.  The Monte Carlo twin simulates
every pathway's conductance as it is.

Linear response of a channel (stability)
----------------------------------------
A modulation ``delta n_p exp(lam t)`` of a pathway's input rate modulates
its channel's conductance through the kernel ``1/(1 + lam tau_syn)`` after
the delay; the conductance changes the drift (mean conductance and the
effective time constant) and the noise intensity together.  The rate's
response is taken as

.. math:: H_p(\\lambda) = \\frac{\\partial\\nu}{\\partial n_p}\\,
          \\frac{\\chi(\\lambda)}{\\chi(0)},

with ``d nu / d n_p`` the derivative of the stationary rate (a central
difference of :func:`popdens.gain` in the channel's ``S_1`` and ``S_2``,
exact merging included) and ``chi`` the conductance population's
mean-drive transfer function at complex frequency
(:func:`popdens.transfer`): exact at ``lam -> 0``, and an approximation
of ours beyond (a conductance modulation acts on the drift with the
driving force ``E - u``, which the mean-drive response weighs uniformly);
its verdicts are compared with the spiking twin in the contributor guide.

Time integration
----------------
In :func:`popdens.network.simulate_network` a channel's ``S_1`` and ``S_2``
follow the pathways' exponentially filtered delayed rates (:class:`ConductanceFeed`):
``S_1 tau`` is then the exact mean conductance for the delayed input rate,
and the white-limit intensity and the boundary shifts are taken at the same
filtered rates (quasi-static).  The cohort's Fokker--Planck solver combines
drift and diffusion from them at every step
(:meth:`~popdens.solvers.fokker_planck.FokkerPlanckSolver.advance_conductance`).

Units: rates Hz, conductances in leak units, potentials mV, times ms.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np

from ..model.conductance import ConductanceNoise
from ..model.noise import Population

__all__ = ["Channel", "conductance_channels", "conductance_population", "rate_slopes", "add_conductance_terms",
           "ConductanceFeed"]

#: Relative step of the central differences of the stationary rate in a channel's S_1 and S_2
#: (the rate is computed to ~1e-7 relative; truncation O(step^2) ~ 1e-6; common practice).
SLOPE_STEP = 1e-3


@dataclass(frozen=True)
class Channel:
    """Merged conductance input of one ``(reversal, tau_syn)`` into one cohort (module docstring).

    Attributes
    ----------
    reversal : float
        Reversal potential (mV).
    tau : float
        Decay time constant (ms).
    first : float
        ``S_1 = sum w n`` (Hz; leak units times input spikes per second).
    second : float
        ``S_2 = sum w^2 n`` (Hz).
    largest : float
        Largest weight of the inputs (leak units): the weight used when ``S_1 = 0``.
    inputs : tuple of str
        The inputs merged (``"pathway E->I"``, ``"background"``), for messages.
    """

    reversal: float
    tau: float
    first: float
    second: float
    largest: float
    inputs: tuple

    def weight_and_rate(self) -> tuple[float, float]:
        """Equivalent ``(weight, rate)`` (leak units, Hz): the same ``w nu`` and ``w^2 nu``."""
        if self.first > 0.0 and self.second > 0.0:
            return self.second / self.first, self.first * self.first / self.second
        return self.largest, 0.0


def _inputs(circuit, k: int):
    """``(label, pathway index or None, weight, reversal, tau)`` of every conductance input of cohort ``k``."""
    out = []
    name = circuit.names[k]
    for q, p in enumerate(circuit.pathways):
        if p.target == name and p.synapse == "conductance":
            out.append((f"pathway {p.label}", q, p.weight, p.reversal, p.tau_syn))
    bg = circuit.cohorts[k].background
    if bg is not None and bg.synapse == "conductance":
        out.append(("background", None, bg.weight, bg.reversal, bg.tau_syn))
    return out


def conductance_channels(circuit, k: int, rates) -> list[Channel]:
    """The merged channels of cohort ``k`` at rates ``rates`` (Hz), highest reversal potential first.

    Parameters
    ----------
    circuit : Circuit
        The circuit; cohort ``k`` receives conductance synapses.
    k : int
        Cohort index.
    rates : array_like
        Rates of every cohort (Hz); negative values count as 0.

    Returns
    -------
    list of Channel
        One or two channels.

    Raises
    ------
    ValueError
        More than two distinct ``(reversal, tau_syn)`` pairs, or two with one reversal potential.
    """
    r = np.maximum(np.asarray(rates, dtype=float), 0.0)
    groups: dict = {}
    for label, q, w, rev, tau in _inputs(circuit, k):
        if q is None:
            bg = circuit.cohorts[k].background
            n = bg.count * bg.rate
        else:
            p = circuit.pathways[q]
            n = p.in_degree * float(r[circuit.index(p.source)])
        g = groups.setdefault((rev, tau), [0.0, 0.0, 0.0, []])
        g[0] += w * n
        g[1] += w * w * n
        g[2] = max(g[2], w)
        g[3].append(label)
    _check_pairs(circuit.names[k], groups)
    chans = [Channel(rev, tau, s1, s2, big, tuple(lab)) for (rev, tau), (s1, s2, big, lab) in groups.items()]
    return sorted(chans, key=lambda c: -c.reversal)


def _check_pairs(name: str, groups: dict) -> None:
    def listing():
        return "; ".join(f"reversal {rev:g} mV, tau_syn {tau:g} ms: {', '.join(g[3])}"
                         for (rev, tau), g in groups.items())

    if len(groups) > 2:
        raise ValueError(f"cohort {name!r}: its conductance synapses have {len(groups)} distinct (`reversal`, "
                         f"`tau_syn`) pairs; the effective-time-constant theory carries two (one excitatory, one "
                         f"inhibitory channel): {listing()}")
    revs = [rev for rev, _ in groups]
    if len(groups) == 2 and revs[0] == revs[1]:
        raise ValueError(f"cohort {name!r}: two conductance channels share the `reversal` potential but differ "
                         f"in `tau_syn`; the theory carries one time constant per reversal potential: {listing()}")


def _noise(chans) -> ConductanceNoise:
    w_e, nu_e = chans[0].weight_and_rate()
    kw = dict(exc_rate=nu_e, exc_weight=w_e, exc_tau=chans[0].tau, exc_reversal=chans[0].reversal)
    if len(chans) > 1:
        w_i, nu_i = chans[1].weight_and_rate()
        if nu_i > 0.0:
            kw.update(inh_rate=nu_i, inh_weight=w_i, inh_tau=chans[1].tau, inh_reversal=chans[1].reversal)
    return ConductanceNoise(**kw)


def conductance_population(circuit, k: int, rates) -> Population:
    """Cohort ``k`` as a :class:`~popdens.ConductanceNoise` population at rates ``rates`` (Hz).

    Parameters
    ----------
    circuit : Circuit
        The circuit; cohort ``k`` receives conductance synapses.
    k : int
        Cohort index.
    rates : array_like
        Rates of every cohort (Hz).

    Returns
    -------
    Population
        The cohort's neuron with the merged conductance input (module docstring); its drive is
        the cohort's own ``drive`` (mV).
    """
    return Population(circuit.cohorts[k].population.neuron, _noise(conductance_channels(circuit, k, rates)))


@functools.lru_cache(maxsize=256)
def _channel_slopes(neuron, chans: tuple, mu: float, gain) -> tuple:
    """``(d nu / d S_1, d nu / d S_2)`` (Hz per Hz) of each channel by central differences of ``gain``."""
    out = []
    for j, c in enumerate(chans):
        pair = []
        for field in ("first", "second"):
            base = getattr(c, field)
            step = SLOPE_STEP * base if base > 0.0 else SLOPE_STEP
            vals = []
            for sign in (1.0, -1.0):
                moved = list(chans)
                moved[j] = Channel(c.reversal, c.tau, *((base + sign * step, c.second) if field == "first"
                                                        else (c.first, base + sign * step)), c.largest, c.inputs)
                vals.append(float(gain(Population(neuron, _noise(moved)), mu)))
            pair.append((vals[0] - vals[1]) / (2.0 * step))
        out.append(tuple(pair))
    return tuple(out)


def rate_slopes(circuit, k: int, rates, mu: float, gain) -> dict:
    """Derivative of cohort ``k``'s stationary rate by each conductance pathway's input rate.

    Parameters
    ----------
    circuit : Circuit
        The circuit; cohort ``k`` receives conductance synapses.
    k : int
        Cohort index.
    rates : array_like
        Rates of every cohort (Hz) at the fixed point.
    mu : float
        The cohort's drive (mV).
    gain : callable
        ``gain(population, mu) -> rate (Hz)``.

    Returns
    -------
    dict
        Pathway index -> ``d nu / d n`` (Hz per Hz of input spikes per neuron), with
        ``d nu / d n = w d nu / d S_1 + w^2 d nu / d S_2`` for a pathway of weight ``w``.
    """
    chans = conductance_channels(circuit, k, rates)
    # merging is exact only within a channel, so stripping the input labels keeps the cache small
    key = tuple(Channel(c.reversal, c.tau, c.first, c.second, c.largest, ()) for c in chans)
    slopes = _channel_slopes(circuit.cohorts[k].population.neuron, key, float(mu), gain)
    out = {}
    for label, q, w, rev, tau in _inputs(circuit, k):
        if q is None:
            continue
        j = next(i for i, c in enumerate(chans) if (c.reversal, c.tau) == (rev, tau))
        out[q] = w * slopes[j][0] + w * w * slopes[j][1]
    return out


def add_conductance_terms(out, circuit, state, lam, transfer, gain, cohorts) -> None:
    """Add the conductance pathways' entries of the characteristic matrix (module docstring) into ``out``.

    Parameters
    ----------
    out : ndarray of complex, shape (len(lam), n, n)
        The matrix being built.
    circuit : Circuit
        The circuit.
    state : FixedPoint
        The fixed point (rates in Hz, drive in mV).
    lam : ndarray of complex
        Flat eigenvalue candidates (1/ms).
    transfer, gain : callable
        ``transfer(population, mu, freqs, "mean")`` (Hz/mV; complex ``freqs`` in Hz) and
        ``gain(population, mu)`` (Hz).
    cohorts : iterable of int
        The cohorts with conductance input.
    """
    f = lam * 1000.0 / (2j * np.pi)
    for k in cohorts:
        mu = float(state.mu[k])
        pop = conductance_population(circuit, k, state.rates)
        chi = np.asarray(transfer(pop, mu, np.concatenate([[0.0], f]), "mean"), dtype=complex)
        shape = chi[1:] / chi[0]
        for q, slope in rate_slopes(circuit, k, state.rates, mu, gain).items():
            p = circuit.pathways[q]
            l = circuit.index(p.source)
            out[:, k, l] += slope * shape * p.in_degree * p.kernel_laplace(lam)


class ConductanceFeed:
    """The input of a conductance cohort in the mean-field time integration (:func:`popdens.network.simulate_network`).

    Each channel's ``S1 = sum w n`` and ``S2 = sum w^2 n`` (Hz) follow the pathways' filtered delayed
    rates ``s_q`` (1/ms, the integrator's ``s_rec``): pathway ``q`` of in-degree ``C`` adds ``w C s_q``
    and ``w^2 C s_q`` (times 1000), the background its constant ``count * rate``.  The mean conductance
    of a channel, ``S1 tau``, is then exactly the mean of the exponentially decaying conductances for
    the delayed input rate; the diffusion takes the intensity ``S2 tau^2`` of the same filtered rate
    (quasi-static: the effective-time-constant theory at the momentary mean input), and so do the
    boundary shifts.  The cohort's Fokker--Planck solver is built at the input of ``t = 0`` and stepped by
    :meth:`~popdens.solvers.fokker_planck.FokkerPlanckSolver.advance_conductance`.

    Parameters
    ----------
    circuit : Circuit
        The circuit; cohort ``k`` receives conductance synapses.
    k : int
        Cohort index.
    """

    def __init__(self, circuit, k: int):
        self.name = circuit.names[k]
        chans = conductance_channels(circuit, k, np.zeros(circuit.n))
        self.channels = [(c.reversal, c.tau) for c in chans]
        nq = len(circuit.pathways)
        self.const = np.zeros((2, len(chans)))
        self.coupling = np.zeros((2, len(chans), nq))  # Hz per (1/ms) of each pathway's filtered rate
        for label, q, w, rev, tau in _inputs(circuit, k):
            x = self.channels.index((rev, tau))
            if q is None:
                bg = circuit.cohorts[k].background
                n = bg.count * bg.rate
                self.const[:, x] += (w * n, w * w * n)
            else:
                c_in = circuit.pathways[q].in_degree * 1000.0  # input spikes per second per 1/ms of rate
                self.coupling[:, x, q] += (w * c_in, w * w * c_in)
        self.circuit, self.k = circuit, k

    def inputs(self, s) -> tuple[np.ndarray, np.ndarray]:
        """``(S1, S2)`` (Hz) of each channel for filtered rates ``s`` (1/ms), shape ``(pathways, columns)``."""
        s = np.asarray(s, dtype=float)
        return (self.const[0][:, None] + self.coupling[0] @ s, self.const[1][:, None] + self.coupling[1] @ s)

    def advance(self, solver, mu, s):
        """Advance ``solver`` over the boundaries of ``mu`` (mV) with the filtered rates ``s`` (1/ms)."""
        first, second = self.inputs(s)
        return solver.advance_conductance(mu, self.channels, first, second)
