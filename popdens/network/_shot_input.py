"""Shot-noise (finite-PSP) input of a cohort: its pathways and background as Poisson trains of jumps.

A cohort whose synapses are ``synapse="shot"`` receives, per neuron, Poisson
trains of instantaneous jumps: from each pathway ``l -> k`` ``C_kl`` trains
at the source rate ``A_l`` with jump ``J_kl`` (mV), and from its
:class:`~popdens.network.PoissonBackground` ``count`` trains at ``rate``.
The mean field treats them as independent Poisson input (Brunel 2000's
sparse-network assumption) and uses the shot-noise theory of
:class:`~popdens.ShotNoise` instead of the diffusion approximation:

.. math:: \\nu_{e,k} = \\sum_{l:\\,J_{kl} > 0} C_{kl} A_l + \\nu_{{\\rm bg},e},\\qquad
          \\nu_{i,k} = \\sum_{l:\\,J_{kl} < 0} C_{kl} A_l + \\nu_{{\\rm bg},i}

(Hz), with excitatory jumps ``a_e`` and inhibitory jumps ``a_i``, and the
cohort's own ``drive`` as the constant drive ``mu``.  :class:`~popdens.ShotNoise`
has one excitatory and one inhibitory amplitude, so all excitatory shot
inputs of a cohort must share one weight, and all inhibitory ones one
weight (checked when the circuit is built, naming the pathways).  The
jump-density theory has no diffusion term, so a shot cohort's own white
noise ``sigma_ext`` must be 0: all its fluctuations come from the jumps.

Linearisation (stability): a rate perturbation of a source changes the
target's *input rates*, so the characteristic matrix uses the response of the
output rate to the input rates (:class:`popdens.theory._shot_rate_response.RateResponse`),

.. math:: M_{kl}(\\lambda) = \\chi_{e|i,k}(\\lambda)\\, C_{kl}\\, e^{-\\lambda d_{kl}},

``chi_e`` for ``J_kl > 0``, ``chi_i`` for ``J_kl < 0`` (Hz per Hz).

Time integration (:class:`ShotStepper`): the cohort's jump-density solver
(:class:`~popdens.solvers.jump_density.JumpDensitySolver`) is stepped with the
input rates ``nu_e(t), nu_i(t)`` built from every pathway's delayed rate at
the step boundaries (the network integrator's record ``s_rec``, 1/ms) plus the
constant background, and the cohort's own ``drive(t)`` as its drive.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from ..model.drive import Constant
from ..model.noise import Population
from ..model.shot import ShotNoise

__all__ = ["check_shot_cohort", "shot_population", "shot_rate", "diffusion_circuit", "add_shot_terms", "ShotStepper"]

#: Two shot weights of one sign within this relative distance are one amplitude.
SAME_WEIGHT = 1e-12


def check_shot_cohort(cohort, pathways) -> None:
    """Raise ValueError when a shot cohort's input does not fit :class:`~popdens.ShotNoise`.

    ``pathways``: the pathways into ``cohort`` (all ``synapse="shot"``).
    """
    s = cohort.sigma_ext
    if not (isinstance(s, Constant) and s.mu == 0.0):
        raise ValueError(f"cohort {cohort.name!r}: `sigma_ext` must be 0 mV for shot-noise synapses (the "
                         f"jump-density theory has no extra white noise; all fluctuations come from the input "
                         f"spikes), got {s!r}; pass sigma_ext=0")
    if cohort.population.neuron.adaptation:
        raise ValueError(f"cohort {cohort.name!r}: shot-noise synapses are analysed without adaptation; "
                         "remove `adaptation` from the neuron model or use current synapses")
    sides = {1: [], -1: []}
    for p in pathways:
        if p.weight != 0.0:
            sides[1 if p.weight > 0 else -1].append((f"pathway {p.label}", p.weight))
    bg = cohort.background
    if bg is not None and bg.weight != 0.0:
        sides[1 if bg.weight > 0 else -1].append(("its background", bg.weight))
    for sign, items in sides.items():
        w = [x for _, x in items]
        if w and max(w) - min(w) > SAME_WEIGHT * max(abs(x) for x in w):
            detail = ", ".join(f"{nm}: {x:g} mV" for nm, x in items)
            kind = "excitatory" if sign > 0 else "inhibitory"
            raise ValueError(f"cohort {cohort.name!r}: all {kind} shot-noise inputs must have one `weight` (one "
                             f"PSP amplitude per sign), got {detail}")


def shot_population(circuit, k: int, rates) -> tuple[Population | None, float]:
    """The shot-noise population of cohort ``k`` at source rates ``rates`` (Hz) and its drive (mV, at
    t = 0); the population is None when the cohort receives no input spikes at all."""
    a = circuit.cohorts[k]
    r = np.maximum(np.asarray(rates, dtype=float), 0.0)
    nu = {1: 0.0, -1: 0.0}
    amp = {1: 0.0, -1: 0.0}
    for p in circuit.pathways:
        if circuit.index(p.target) == k and p.weight != 0.0:
            s = 1 if p.weight > 0 else -1
            nu[s] += p.in_degree * float(r[circuit.index(p.source)])
            amp[s] = abs(p.weight)
    bg = a.background
    if bg is not None and bg.weight != 0.0:
        s = 1 if bg.weight > 0 else -1
        nu[s] += bg.count * bg.rate
        amp[s] = abs(bg.weight)
    mu = float(a.drive(0.0))
    if nu[1] == 0.0 and nu[-1] == 0.0:
        return None, mu
    exc_psp = amp[1] if amp[1] > 0.0 else amp[-1]  # ShotNoise needs one; unused without excitatory input
    return Population(a.population.neuron, ShotNoise(nu[1], exc_psp, nu[-1], amp[-1])), mu


def _drift_rate(neuron, mu: float) -> float:
    """Rate (Hz) of a neuron without input spikes: the deterministic period from reset to the boundary."""
    from scipy.integrate import quad  # noqa: PLC0415 - scipy-heavy, loaded on first use

    lo, hi = float(neuron.reset), float(neuron.boundary)
    u = np.linspace(lo, hi, 201)
    if np.any(np.asarray(neuron.drift(u), dtype=float) + mu <= 0.0):
        return 0.0
    t, _ = quad(lambda x: float(neuron.tau_m) / (float(neuron.drift(x)) + mu), lo, hi, limit=200)
    return 1e3 / (float(neuron.refractory) + t)


def shot_rate(gain, population, neuron, mu: float) -> float:
    """Stationary rate (Hz): ``gain(population, mu)``, or the deterministic rate without input spikes."""
    if population is None:
        return _drift_rate(neuron, mu)
    return float(gain(population, mu))


def diffusion_circuit(circuit):
    """The same circuit with every shot synapse made a current synapse (the diffusion approximation)."""
    cohorts = []
    for a in circuit.cohorts:
        bg = a.background
        if bg is not None and bg.synapse == "shot":
            a = dataclasses.replace(a, background=dataclasses.replace(bg, synapse="current"))
        cohorts.append(a)
    pathways = [dataclasses.replace(p, synapse="current") if p.synapse == "shot" else p for p in circuit.pathways]
    return dataclasses.replace(circuit, cohorts=cohorts, pathways=pathways)


def add_shot_terms(out, circuit, state, lam, cohorts) -> None:
    """Add the shot pathways' terms of ``M(lam)`` (shape ``(lam.size, n, n)``) for the cohorts ``cohorts``
    (module docstring); ``state`` is the fixed point, ``lam`` in 1/ms (flat)."""
    from ..theory._shot_rate_response import RateResponse  # noqa: PLC0415 - scipy-heavy, loaded on first use

    same = {}
    for k in cohorts:
        pop, mu = shot_population(circuit, k, state.rates)
        if pop is None:
            raise ValueError(f"cohort {circuit.names[k]!r} receives no input spikes at rates {state.rates} Hz: "
                             "its rate response is not defined (give it a background or a nonzero source rate)")
        key = (pop, mu)
        if key not in same:
            same[key] = RateResponse(pop, mu)(lam)
        chi_e, chi_i = same[key]
        for p in circuit.pathways:
            if circuit.index(p.target) != k or p.weight == 0.0:
                continue
            l = circuit.index(p.source)
            chi = chi_e if p.weight > 0 else chi_i
            out[:, k, l] += chi * p.in_degree * p.kernel_laplace(lam)


#: Room below the solver's grid, in units of (boundary - reset), for input that pushes the potential
#: below its initial range during a run (as the Fokker--Planck cohorts of the integrator).
EXTRA_LOWER_SPANS = 1.0


class ShotStepper:
    """Cohort ``k``'s jump-density solver in the network integrator (module docstring).

    ``s0`` are the pathways' delayed rates (1/ms, in ``circuit.pathways`` order) at t = 0, which set the
    stationary initial state at drive ``mu0`` (mV); ``drives`` (mV) are samples of the drive over the
    run, for the grid's range.
    """

    def __init__(self, circuit, k: int, dt: float, s0, mu0: float, options: dict | None = None, drives=()):
        from ..solvers.jump_density import JumpDensitySolver  # noqa: PLC0415 - scipy-heavy, loaded on first use

        a = circuit.cohorts[k]
        self.name = a.name
        self.tau_m = a.tau_m
        nq = len(circuit.pathways)
        self.w_exc, self.w_inh = np.zeros(nq), np.zeros(nq)
        amp = {1: 0.0, -1: 0.0}
        for q, p in enumerate(circuit.pathways):
            if circuit.index(p.target) == k and p.weight != 0.0:
                (self.w_exc if p.weight > 0 else self.w_inh)[q] = p.in_degree * 1e3  # Hz per 1/ms
                amp[1 if p.weight > 0 else -1] = abs(p.weight)
        self.bg_exc = self.bg_inh = 0.0
        bg = a.background
        if bg is not None and bg.weight != 0.0:
            if bg.weight > 0:
                self.bg_exc = bg.count * bg.rate
            else:
                self.bg_inh = bg.count * bg.rate
            amp[1 if bg.weight > 0 else -1] = abs(bg.weight)
        if amp[1] == 0.0 and amp[-1] == 0.0:
            raise ValueError(f"cohort {a.name!r}: shot-noise synapses with zero weight everywhere carry no input")
        self.a_exc, self.a_inh = amp[1], amp[-1]
        ne0, ni0 = self.rates(np.asarray(s0, dtype=float)[:, None])
        if ne0[0] == 0.0 and ni0[0] == 0.0:
            raise ValueError(f"cohort {a.name!r} receives no input spikes at t = 0 (its sources' `initial_rates` "
                             "are 0 and it has no background): its initial state is not defined; give its sources "
                             "initial rates > 0 or the cohort a background")
        noise = ShotNoise(float(ne0[0]), self.a_exc if self.a_exc > 0 else self.a_inh, float(ni0[0]), self.a_inh)
        opts = dict(options or {})
        nrn = a.population.neuron
        try:
            self.solver = JumpDensitySolver(Population(nrn, noise), dt, **opts)
        except TypeError as exc:
            raise ValueError(f"cohort {a.name!r}: bad solver option in {sorted(opts)}: {exc}") from None
        if "u_min" not in opts:
            low = min([mu0, *np.asarray(drives, dtype=float).ravel()])
            self.solver.plan([mu0, low - EXTRA_LOWER_SPANS * (float(nrn.boundary) - float(nrn.reset))], None)
        self.solver.initialize(float(mu0), None, "stationary")

    def rates(self, s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Excitatory and inhibitory input rates (Hz) from the pathways' delayed rates ``s`` (1/ms, shape
        ``(n_pathways, m)``)."""
        return self.bg_exc + self.w_exc @ s, self.bg_inh + self.w_inh @ s

    def advance(self, mu: np.ndarray, s: np.ndarray) -> np.ndarray:
        """Advance ``len(mu) - 1`` steps at drive ``mu`` (mV) and the delayed rates ``s`` (1/ms) at the same
        boundaries; returns the step-mean rates (Hz)."""
        ne, ni = self.rates(s)
        rate, _, _ = self.solver.advance_rates(mu, np.maximum(ne, 0.0), np.maximum(ni, 0.0))
        return rate

    def equivalent(self, mu: np.ndarray, s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Diffusion-equivalent total drive and noise amplitude (mV) of the input at drive ``mu`` (mV) and
        delayed rates ``s`` (1/ms): ``mu + tau_m (nu_e a_e - nu_i a_i)`` and ``sqrt(tau_m (nu_e a_e^2 + nu_i
        a_i^2))`` (rates in 1/ms; fixed amplitudes, Stein 1965)."""
        ne, ni = self.rates(s)
        t = self.tau_m * 1e-3
        return (mu + t * (ne * self.a_exc - ni * self.a_inh),
                np.sqrt(np.maximum(t * (ne * self.a_exc ** 2 + ni * self.a_inh ** 2), 0.0)))
