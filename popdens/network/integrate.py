"""Mean-field time integration of a circuit: every cohort's density solver, stepped together.

:func:`simulate_network` steps every cohort's density solver together.
Rates are the step means returned by the solvers, located at step
midpoints and interpolated linearly in between; the delayed rate enters the
exponential filter, which is integrated exactly for a piecewise-linear
input.  A delayed rate that would be needed before the last completed step
midpoint (delays shorter than 1.5 dt) is held at its last known value.

Filtered input (``tau_syn > 0`` anywhere in a cohort's input, see
:mod:`popdens.network.circuit`): the cohort's Fokker--Planck solver works on
the white-noise problem with threshold and reset moved by the effective
shift ``delta(t) = alpha/2 sum_i sigma_i^2 sqrt(tau_i/tau_m) / sigma`` from the
filtered rates.  The grid is built at ``delta(0)``; later changes
of ``delta`` enter as the mean input ``F'(theta) (delta - delta(0)) - tau_m
d delta/dt`` (the change of variable ``u -> u - delta(t)``, exact for a
linear drift, first order otherwise).

Conductance cohorts (``synapse="conductance"``, :mod:`popdens.network._conductance_input`): the
recurrent input enters through the cohort's conductance channels, whose ``S1 = sum w n`` and ``S2 =
sum w^2 n`` follow the pathways' filtered delayed rates recorded in ``s_rec``
(:class:`~popdens.network._conductance_input.ConductanceFeed`); the cohort's Fokker--Planck solver
combines drift and diffusion from them at every step and moves threshold and reset with the
boundary shifts of the momentary input
(:meth:`~popdens.solvers.fokker_planck.FokkerPlanckSolver.advance_conductance`).  Their ``mu`` is
the cohort's own drive, their ``sigma`` NaN.

Shot-noise cohorts (``synapse="shot"``, :mod:`popdens.network._shot_input`):
the jump-density solver sees the cohort's own drive, and its input rates
``nu_e(t), nu_i(t)`` (Hz) are built at every step boundary from the
pathways' delayed rates (instantaneous synapses: linear between step
midpoints, as above) plus the background; the solver steps with rates that
change every step (:meth:`~popdens.solvers.jump_density.JumpDensitySolver.advance_rates`).
"""

from __future__ import annotations

import logging
import math

import numpy as np

from .. import _validation as v
from .._version import __version__
from ..model._jit import Stopwatch
from ..progress import Progress
from ..result import STATUS_FAILED, STATUS_INTERRUPTED, STATUS_OK
from ..solvers.registry import resolve_method
from ..solvers._recording import BoundarySamples, make_grid
from ..solvers.fokker_planck import LOWER_STDS, FokkerPlanckSolver
from ..solvers.mesoscopic import MesoscopicSolver, seed_kernel_rng
from ..model.effective import conductance_carrier, shifted_neuron
from ..model.noise import Population, WhiteNoise
from ..model.synaptic import ALPHA
from ._conductance_input import ConductanceFeed, conductance_population
from ._inputs import block_inputs, combine
from ._shot_input import ShotStepper
from .circuit import DEFAULT_DT, HZ_TO_PER_MS, STEP_TOL, Circuit, Pathway
from .result import CircuitResult
from .twin import DEFAULT_BURN_IN_MS  # finite cohorts burn in as long as the spiking twin

__all__ = ["simulate_network"]

logger = logging.getLogger(__name__)


#: Extra room below the automatic Fokker--Planck grid, in units of
#: (threshold - reset), because recurrent inhibition may push the drive
#: below its initial value during a run.
EXTRA_LOWER_SPANS = 1.0


#: Steps per block between progress updates.
PROGRESS_BLOCK = 500


#: Mean field: most steps advanced per solver call (the delays set the actual block).
MAX_BLOCK_STEPS = 1000


def _own_spike_drive(circuit: Circuit, k: int, ages: np.ndarray, dt: float) -> np.ndarray:
    """Drive (mV) that a neuron of cohort ``k`` at age ``a`` (ms) would get from its own last spike.

    Each recurrent pathway with in-degree C among the other N - 1 neurons
    gives ``tau_m J C/(N-1) s(a)``: the spike's delayed, filtered trace ``s``
    (1/ms), the exponential kernel after the delay, or for instantaneous
    synapses a unit-area hat of half-width ``dt`` centred on the delay (the
    spiking twin delivers a spike over the step ``delay`` after it).  Spikes
    before the last are not subtracted: exact while the kernel has decayed
    within an inter-spike interval (delay + tau_syn short against 1/rate).
    """
    out = np.zeros(ages.size)
    a = ages.copy()
    a[-1] = max(a[-1], a[-2] + dt)  # the last bin: its youngest age
    for p in circuit.pathways:
        if circuit.index(p.source) != k or circuit.index(p.target) != k:
            continue
        size = circuit.cohorts[k].size
        scale = circuit.cohorts[k].tau_m * p.weight * p.in_degree / (size - 1.0)
        if p.tau_syn > 0:
            late = a >= p.delay
            trace = np.where(late, np.exp(-np.where(late, a - p.delay, 0.0) / p.tau_syn) / p.tau_syn, 0.0)
        else:
            trace = np.maximum(0.0, 1.0 - np.abs(a - p.delay) / dt) / dt
        out += scale * trace
    return out


def _conductance_solver(circuit: Circuit, k: int, rates, mu0: float, dt: float, opts: dict):
    """The Fokker--Planck solver of conductance cohort ``k``, built at the input of the rates ``rates`` (Hz)
    and in its stationary state at drive ``mu0`` (mV); the default lower boundary as for white noise, with
    the conductance noise's amplitude at threshold."""
    a = circuit.cohorts[k]
    pop = conductance_population(circuit, k, rates)
    try:
        _, sigma_ref = conductance_carrier(pop)
    except ValueError:
        raise ValueError(f"cohort {a.name!r}: its conductance input has no fluctuations at threshold at t = 0 "
                         "(no background and zero `initial_rates` of its sources); give it a background or "
                         "`initial_rates` > 0") from None
    nrn = a.population.neuron
    if "u_min" not in opts and "grid" not in opts:
        base = min(float(nrn.reset), float(nrn.rest) + min(mu0, 0.0))
        opts["u_min"] = (base - LOWER_STDS * sigma_ref / math.sqrt(2.0)
                         - EXTRA_LOWER_SPANS * (float(nrn.boundary) - float(nrn.reset)))
    try:
        s = FokkerPlanckSolver(pop, dt, **opts)
    except TypeError as exc:
        raise ValueError(f"cohort {a.name!r}: bad solver option in {sorted(opts)}: {exc}") from None
    s.initialize(mu0, None, "stationary")
    return s


def simulate_network(circuit: Circuit, t_end: float, dt: float | None = None, *, initial_rates=None,
                     record_interval: float | None = None, solver_options: dict | None = None,
                     progress: bool | None = None, finite_size: bool = False, seed=None,
                     burn_in: float | None = None) -> CircuitResult:
    """Integrate the coupled population-density equations of a circuit.

    Every cohort is solved by its density solver (refractory density for
    escape noise, Fokker--Planck for white noise and for conductance
    synapses, jump density for shot-noise synapses); all are stepped
    together, coupled through delayed, filtered rates (module docstring).  With
    ``finite_size=True`` every escape-noise cohort is a population of its
    ``size`` neurons (mesoscopic equations, :mod:`popdens.solvers.mesoscopic`),
    and the cohorts are coupled through their *realised* activities.

    Parameters
    ----------
    circuit : Circuit
        The coupled cohorts.
    t_end : float
        Duration (ms).
    dt : float, optional
        Common step (ms), default 0.1; must divide ``t_end``.  Every delay
        must be >= ``dt``.
    initial_rates : array_like, optional
        Rates (Hz) of the past (t <= 0), one per cohort; default 0.  Each
        solver starts in the stationary state of the input these rates give.
    record_interval : float, optional
        Output interval (ms), a multiple of ``dt``; rates are averaged over it.
    solver_options : dict, optional
        ``{cohort name: {option: value}}`` passed to the solvers (e.g.
        ``n_cells``, ``u_min`` for Fokker--Planck, ``max_age`` for escape).
    progress : bool, optional
        Progress line on stderr (default: only on a terminal, long runs).
    finite_size : bool
        Escape-noise cohorts are finite (their ``size``): one realisation of
        the stochastic activity.  White-noise cohorts stay infinite
        (deterministic); a circuit with none is refused.
    seed : int or numpy.random.Generator, optional
        With ``finite_size``: the same seed gives bit-identical results.
    burn_in : float, optional
        With ``finite_size``: time (ms) integrated before t = 0 at the external
        input of t = 0 and discarded, so that t = 0 finds the network in its
        fluctuating state; default 200 ms (as the spiking twin).

    Returns
    -------
    CircuitResult
        ``rate`` (Hz), ``mu`` (mV) and ``sigma`` (mV) per cohort (for a cohort
        with conductance synapses ``mu`` is its own drive and ``sigma`` NaN: its
        input is conductances, not a current of one amplitude; for one with
        shot-noise synapses the diffusion-equivalent input: its drive plus
        ``tau_m (nu_e a_e - nu_i a_i)`` and ``sqrt(tau_m (nu_e a_e^2 + nu_i a_i^2))``,
        as in its fixed point; its rate comes from the jump-density solver); with
        ``finite_size`` the realised activities (``method`` "mesoscopic") and
        ``sizes``.

    Examples
    --------
    >>> import popdens
    >>> from popdens.network import Cohort, Pathway, Circuit, simulate_network
    >>> pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(5.0))
    >>> c = Circuit([Cohort("E", pop, drive=15.0)], [Pathway("E", "E", 0.1, 40, delay=1.5)])
    >>> res = simulate_network(c, 20.0)
    >>> res.rate.shape
    (1, 201)
    """
    if not isinstance(circuit, Circuit):
        raise ValueError(f"`circuit` must be a popdens.network.Circuit, got {circuit!r}")
    circuit.require_current("simulate_network", allow=("conductance", "shot"))
    dt = DEFAULT_DT if dt is None else dt
    grid = make_grid(t_end, dt, record_interval, None)
    dt = grid.dt
    nk = circuit.n
    for p in circuit.pathways:
        if p.delay < dt * (1.0 - STEP_TOL):
            raise ValueError(f"pathway {p.label}: `delay` = {p.delay!r} ms is shorter than the step "
                             f"`dt` = {dt!r} ms; use a smaller dt or a longer delay")
    r0 = np.zeros(nk) if initial_rates is None else np.asarray(initial_rates, dtype=float)
    if r0.shape != (nk,) or not np.all(np.isfinite(r0)) or np.any(r0 < 0):
        raise ValueError(f"`initial_rates` must be {nk} finite rates >= 0 (Hz), got {initial_rates!r}")
    solver_options = {} if solver_options is None else dict(solver_options)
    for nm in solver_options:
        circuit.index(nm)
    finite = [bool(finite_size) and not a.diffusive for a in circuit.cohorts]
    n_burn = 0
    if finite_size:
        if not any(finite):
            raise ValueError("`finite_size`: the circuit has no escape-noise cohort; finite white-noise "
                             "populations are simulated by montecarlo_network")
        for nm, cohort, fin in zip(circuit.names, circuit.cohorts, finite):
            if fin and cohort.population.neuron.adaptation:
                raise ValueError(f"`finite_size`: cohort {nm!r} has adapting neurons (`adaptation`), which the "
                                 "finite-size integration does not support yet; simulate the finite network with "
                                 "montecarlo_network")
        burn_in = DEFAULT_BURN_IN_MS if burn_in is None else v.non_negative("burn_in", burn_in)
        n_burn = int(round(burn_in / dt))
        rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
        seed_kernel_rng(int(rng.integers(0, 2**31 - 1)))
    else:
        for name, value in (("seed", seed), ("burn_in", burn_in)):
            if value is not None:
                raise ValueError(f"`{name}` = {value!r} applies to finite cohorts: pass `finite_size=True`")

    tgt = [circuit.index(p.target) for p in circuit.pathways]
    src = [circuit.index(p.source) for p in circuit.pathways]
    # shot-noise cohorts take their input as rates of jumps (ShotStepper), not as drive and noise
    shot = [circuit.synapse_kind(k) == "shot" for k in range(nk)]
    cmean = [0.0 if shot[k] else circuit.cohorts[k].tau_m * p.weight * p.in_degree
             for p, k in zip(circuit.pathways, tgt)]
    for q, p in enumerate(circuit.pathways):
        if finite[tgt[q]] and src[q] == tgt[q]:
            # no neuron synapses on itself: the population term counts all N neurons (C/(N-1) of each)
            # and each age bin loses its own last spike's share (set_own_input below)
            size = circuit.cohorts[tgt[q]].size
            cmean[q] *= size / (size - 1.0)
    cvar = [circuit.cohorts[k].tau_m * p.weight ** 2 * p.in_degree if circuit.cohorts[k].diffusive and not shot[k]
            else 0.0
            for p, k in zip(circuit.pathways, tgt)]
    # conductance cohorts: their input enters through their channels (ConductanceFeed), not as mu and sigma
    feeds = {k: ConductanceFeed(circuit, k) for k in range(nk) if circuit.synapse_kind(k) == "conductance"}
    for q, k in enumerate(tgt):
        if k in feeds:
            cmean[q] = cvar[q] = 0.0
    tq = grid.step_times(0, grid.n_steps)
    # a shot cohort's solver sees its own drive only (its background is input spikes, ShotStepper)
    ext_mu = np.array([np.broadcast_to(a.drive(tq) if shot[k] else a.external_mean(tq), tq.shape)
                       for k, a in enumerate(circuit.cohorts)])
    ext_var = np.array([np.broadcast_to(0.0 if shot[k] else a.external_variance(tq), tq.shape)
                        for k, a in enumerate(circuit.cohorts)])
    ext_fw = np.array([np.broadcast_to(a.external_filter_weight(tq), tq.shape) for a in circuit.cohorts])
    # external jumps on step boundaries: the input after the jump at its boundary, the input before
    # it kept apart (`ext_left`) for the end of the block that leads up to it (no response precedes it)
    ext_left: dict[int, tuple[np.ndarray, np.ndarray]] = {}
    for k, a in enumerate(circuit.cohorts):
        sampled = [(BoundarySamples(a.drive, grid), False)]
        if a.diffusive:
            sampled.append((BoundarySamples(a.sigma_ext, grid), True))
        for smp, is_sigma in sampled:
            for j in smp.jumps:
                before, after = smp.sides(j)
                if j not in ext_left:
                    ext_left[j] = (ext_mu[:, j].copy(), ext_var[:, j].copy())
                if is_sigma:
                    ext_var[k, j] += after * after - smp.drive(grid.dt * j) ** 2
                    ext_left[j][1][k] += before * before - smp.drive(grid.dt * j) ** 2
                else:
                    ext_mu[k, j] += after - smp.drive(grid.dt * j)
                    ext_left[j][0][k] += before - smp.drive(grid.dt * j)
    jump_steps = sorted(j for j in ext_left if 0 < j < grid.n_steps)
    if n_burn:  # the burn-in steps come first and see the external input of t = 0
        ext_mu = np.concatenate([np.repeat(ext_mu[:, :1], n_burn, axis=1), ext_mu], axis=1)
        ext_var = np.concatenate([np.repeat(ext_var[:, :1], n_burn, axis=1), ext_var], axis=1)
        ext_fw = np.concatenate([np.repeat(ext_fw[:, :1], n_burn, axis=1), ext_fw], axis=1)
        ext_left = {j + n_burn: val for j, val in ext_left.items()}
        jump_steps = [j + n_burn for j in jump_steps]
    if not (np.all(np.isfinite(ext_mu)) and np.all(np.isfinite(ext_var))):
        raise ValueError("the external drive or noise of a cohort is not finite on [0, t_end]")
    diffusive = [a.diffusive for a in circuit.cohorts]
    # cohorts with filtered input and a hard threshold: moving effective boundary (module docstring)
    filtered = [diffusive[k] and not shot[k] and not a.population.neuron.has_cutoff and k not in feeds
                and (a.ext_tau_syn > 0 or (a.background is not None and a.background.tau_syn > 0)
                     or any(p.tau_syn > 0 for p, t_ in zip(circuit.pathways, tgt) if t_ == k))
                for k, a in enumerate(circuit.cohorts)]
    slope_at_threshold = np.array([float(a.population.neuron.drift_slope(a.population.neuron.threshold))
                                   for a in circuit.cohorts])
    tau_ms = np.array([a.tau_m for a in circuit.cohorts])
    filtered = np.array(filtered, dtype=bool)
    # pathway and cohort constants of the compiled input loop (popdens.network._inputs)
    pw = circuit.pathways
    src_a, tgt_a = np.array(src, dtype=np.int64), np.array(tgt, dtype=np.int64)
    delay_a = np.array([p.delay for p in pw], dtype=float)
    tau_a = np.array([p.tau_syn for p in pw], dtype=float)
    decay_a = np.array([math.exp(-dt / p.tau_syn) if p.tau_syn > 0 else 0.0 for p in pw])
    root_tau = np.array([math.sqrt(p.tau_syn) for p in pw])
    cmean_a, cvar_a = np.array(cmean, dtype=float), np.array(cvar, dtype=float)
    root_tau_m = np.sqrt(tau_ms)
    half_alpha = 0.5 * ALPHA
    r0_q = np.array([r0[k] * HZ_TO_PER_MS for k in src], dtype=float)  # the past's rate of each source (1/ms)
    s_filt = r0_q.copy()  # filtered delayed rates at the current boundary (1/ms)
    scratch = [np.empty(nk) for _ in range(3)]

    def inputs(col: int, ext=(ext_mu, ext_var, ext_fw)) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        mu, sg, shift = (np.empty(nk) for _ in range(3))
        combine(*ext, col, s_filt, tgt_a, cmean_a, cvar_a, root_tau, filtered, root_tau_m, half_alpha, mu, sg, shift)
        return mu, sg, shift

    def inputs_left(col: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        # the input just before an external jump at boundary `col`
        m, var = ext_left[col]
        return inputs(0, tuple(np.ascontiguousarray(x) for x in (m[:, None], var[:, None], ext_fw[:, col:col + 1])))

    watch = Stopwatch()
    mu0, sg0, shift0 = inputs(0)

    def moving(mu, shift, shift_before):
        # the drive seen by the solvers: the moving boundary as mean input (module docstring)
        return mu + slope_at_threshold * (shift - shift0) - tau_ms * (shift - shift_before) / dt
    solvers = []
    steppers = {}  # shot-noise cohorts (popdens.network._shot_input)
    for k, a in enumerate(circuit.cohorts):
        if shot[k]:
            steppers[k] = ShotStepper(circuit, k, dt, r0_q, float(mu0[k]), solver_options.get(a.name), ext_mu[k])
            solvers.append(steppers[k].solver)
            continue
        cls = resolve_method(a.population, None)
        opts = dict(solver_options.get(a.name, {}))
        if k in feeds:
            s = _conductance_solver(circuit, k, r0, float(mu0[k]), dt, opts)
            solvers.append(s)
            continue
        if diffusive[k]:
            if not sg0[k] > 0:
                raise ValueError(f"cohort {a.name!r}: the noise amplitude at t = 0 is {sg0[k]!r} mV; "
                                 "white-noise populations need sigma > 0 (external or recurrent)")
            nrn = a.population.neuron
            if "u_min" not in opts and "grid" not in opts:
                base = min(float(nrn.reset), float(nrn.rest) + min(float(mu0[k]), 0.0))
                opts["u_min"] = (base - LOWER_STDS * sg0[k] / math.sqrt(2.0)
                                 - EXTRA_LOWER_SPANS * (float(nrn.boundary) - float(nrn.reset)))
        pop_k = a.population
        if diffusive[k]:  # the solver's white-noise problem, boundaries at the initial shift
            pop_k = Population(shifted_neuron(a.population.neuron, float(shift0[k])), WhiteNoise(float(sg0[k])))
        if finite[k]:
            cls = MesoscopicSolver
            opts = {"size": a.size, "burn_in": 0.0, **opts}
        try:
            s = cls(pop_k, dt, **opts)
        except TypeError as exc:
            raise ValueError(f"cohort {a.name!r}: bad solver option in {sorted(opts)}: {exc}") from None
        if finite[k]:
            s.set_own_input(_own_spike_drive(circuit, k, s.axis, dt))
        s.initialize(float(mu0[k]), float(sg0[k]) if diffusive[k] else None, "stationary")
        solvers.append(s)

    n = grid.n_steps + n_burn
    rate = np.empty((nk, n))
    mus = np.empty((nk, n + 1))
    sgs = np.empty((nk, n + 1))
    shifts = np.empty((nk, n + 1))
    mus[:, 0], sgs[:, 0], shifts[:, 0] = mu0, sg0, shift0
    mus_eff = mus.copy()  # the drive seen by the solvers: with the moving-boundary term
    s_rec = np.empty((len(pw), n + 1))  # every pathway's filtered delayed rate (1/ms) at each boundary
    s_rec[:, 0] = s_filt
    rate_init = np.array([s.instantaneous_rate(float(mu0[k]), float(sg0[k]) if diffusive[k] else None)
                          for k, s in enumerate(solvers)])  # (conductance solvers set their own sigma)
    # the delayed rate at t = 0 (before it, every source had its initial rate)
    a_prev = np.empty(len(pw))
    for q in range(len(pw)):
        x = -delay_a[q] / dt - 0.5
        if x >= -1:
            a_prev[q] = r0_q[q]
        else:
            w = x - math.floor(x)
            a_prev[q] = (1.0 - w) * r0_q[q] + w * r0_q[q]
    # Block of steps whose delayed input is already known from completed steps: the drive at
    # t_{j+b+1} needs rates up to (t_{j+b+1} - d)/dt - 1/2 <= j - 1 midpoints, i.e. b <= d/dt - 3/2.
    # Advancing such a block in one solver call gives the same numbers as single steps, without
    # the per-call overhead (measured: 53 vs 30 us per Fokker-Planck step of 400 cells).
    block = MAX_BLOCK_STEPS
    for p in circuit.pathways:
        block = min(block, max(1, int(math.floor(p.delay / dt - 0.5 + STEP_TOL))))
    bar = Progress(n, "network mesoscopic" if finite_size else "network mean-field", progress)
    status, message = STATUS_OK, "completed"
    done = 0
    try:
        j = 0
        while j < n:
            nb = min(block, n - j)
            later = [x for x in jump_steps if x > j]
            if later:
                nb = min(nb, later[0] - j)  # a block ends at each external jump
            block_inputs(j, nb, dt, rate, src_a, tgt_a, delay_a, tau_a, decay_a, r0_q, s_filt, a_prev,
                         cmean_a, cvar_a, root_tau, ext_mu, ext_var, ext_fw, filtered, root_tau_m, half_alpha,
                         slope_at_threshold, tau_ms, shift0, mus, sgs, shifts, mus_eff, s_rec, *scratch)
            mu_blk, sg_blk = mus_eff[:, j:j + nb + 1].copy(), sgs[:, j:j + nb + 1].copy()
            if j + nb in ext_left:
                mu_l, sg_blk[:, -1], sh_l = inputs_left(j + nb)
                mu_blk[:, -1] = moving(mu_l, sh_l, shifts[:, j + nb - 1])
            for k, s in enumerate(solvers):
                if k in feeds:
                    r, _, _ = feeds[k].advance(s, mu_blk[k], s_rec[:, j:j + nb + 1])
                elif k in steppers:
                    r = steppers[k].advance(mu_blk[k], s_rec[:, j:j + nb + 1])
                elif diffusive[k]:
                    r, _, _ = s.advance(mu_blk[k], sg_blk[k])
                else:
                    r, _, _ = s.advance(mu_blk[k])
                if s.status != STATUS_OK:
                    status, message = STATUS_FAILED, f"cohort {circuit.names[k]!r}: {s.message}"
                    break
                rate[k, j:j + nb] = r
            if status != STATUS_OK:
                break
            j += nb
            done = j
            if (done // nb) % max(1, PROGRESS_BLOCK // nb) == 0:
                bar.update(done)
    except KeyboardInterrupt:
        status, message = STATUS_INTERRUPTED, f"interrupted by the user at t = {(done - n_burn) * dt:g} ms"
        logger.warning(message)
    finally:
        bar.close()
    e = grid.every
    kept = max(done - n_burn, 0)  # steps after the burn-in
    n_out = kept // e
    if n_burn:
        rate_init = np.array([s_.instantaneous_rate(float(mus[k, n_burn]), float(sgs[k, n_burn]) if diffusive[k] else None)
                              for k, s_ in enumerate(solvers)]) if done >= n_burn else np.full(nk, np.nan)
    body = rate[:, n_burn: n_burn + n_out * e].reshape(nk, n_out, e).mean(axis=2)
    r_out = np.concatenate([rate_init[:, None], body], axis=1)
    idx = np.arange(n_out + 1) * e
    sg_out = np.where(np.array([d and k not in feeds for k, d in enumerate(diffusive)])[:, None],
                      sgs[:, n_burn + idx], np.nan)
    mu_out = mus[:, n_burn + idx]
    for k, stp in steppers.items():  # the diffusion-equivalent input of the jumps (CircuitResult)
        mu_out[k], sg_out[k] = stp.equivalent(mu_out[k], s_rec[:, n_burn + idx])
    mass = [abs(s.mass() - 1.0) for s in solvers]
    return CircuitResult(
        names=circuit.names, t=idx * dt, rate=r_out, mu=mu_out, sigma=sg_out,
        method="mesoscopic" if finite_size else "mean-field",
        status=status, message=message, dt=dt,
        sizes=tuple(a.size for a in circuit.cohorts) if finite_size else None,
        diagnostics={**watch.times(), "version": __version__, "steps": kept,
                     "mass_error": max(mass),
                     **({"finite_size": [nm for nm, f in zip(circuit.names, finite) if f], "burn_in_ms": n_burn * dt,
                         "seed": seed if isinstance(seed, (int, np.integer)) or seed is None else "generator"}
                        if finite_size else {}),
                     "solvers": {nm: s.method_name for nm, s in zip(circuit.names, solvers)},
                     **{f"{nm}:{k}": val for nm, s in zip(circuit.names, solvers)
                        for k, val in s.diagnostics().items()}},
    )
