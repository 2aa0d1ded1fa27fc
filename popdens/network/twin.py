"""Front end of the spiking twin of a circuit: connectivity, flattened parameters, the compiled run.

The step itself is in :mod:`popdens.twins._network`.
"""

from __future__ import annotations

import itertools
import logging
import math

import numpy as np

from .._version import __version__
from ..model._jit import Stopwatch
from .. import _validation as v
from ..model.adaptation import step_args
from ..twins.population import BURN_IN_ADAPTATION_TAUS
from ..progress import Progress
from ..result import STATUS_FAILED, STATUS_INTERRUPTED, STATUS_OK
from ..solvers._recording import BoundarySamples, make_grid, split_at_jumps, steps_per_call
from ._conductance_twin import conductance_kernel
from .circuit import DEFAULT_DT, STEP_TOL, Circuit, Pathway
from .result import CircuitResult

__all__ = ["montecarlo_network"]

logger = logging.getLogger(__name__)


#: Monte Carlo: steps per compiled call (progress, interruption, spike-buffer growth).
MC_BLOCK = 1000


#: Monte Carlo: default burn-in (ms) before t = 0, discarded.
DEFAULT_BURN_IN_MS = 200.0


#: Monte Carlo: initial capacity of the spike buffer, spikes per neuron.
SPIKES_PER_NEURON_GUESS = 8


def _flat(arrays, dtype):
    ptr = np.zeros(len(arrays) + 1, dtype=np.int64)
    for i, a in enumerate(arrays):
        ptr[i + 1] = ptr[i] + np.asarray(a).size
    flat = np.concatenate([np.asarray(a, dtype=dtype).ravel() for a in arrays]) if arrays else np.zeros(0, dtype)
    return np.ascontiguousarray(flat, dtype=dtype), ptr


def _delay_steps(p: Pathway, dt: float) -> int:
    m = int(round(p.delay / dt))
    if m < 1 or abs(p.delay / dt - m) > STEP_TOL * max(1.0, m):
        raise ValueError(f"pathway {p.label}: `delay` = {p.delay!r} ms must be a whole number (>= 1) of "
                         f"steps `dt` = {dt!r} ms in the Monte Carlo twin")
    return m


class _Feeds:
    """Filtered external inputs of the spiking twin, delivered as pseudo-pathways.

    A Poisson background with ``tau_syn > 0`` and the external noise of a
    cohort with :class:`~popdens.ColouredNoise` are exponential currents.  Each
    becomes a pathway without presynaptic neurons whose ring buffer (``MC_BLOCK
    + 1`` slots) the front end fills before every compiled call with the
    coming steps' input: Poisson counts, delivered exactly like recurrent
    spikes through an exponential synapse; or standard normal numbers, for
    which the filter update ``x <- x e^{-dt/tau} + c z`` with ``c = sigma
    sqrt(tau_m (1 - e^{-2 dt/tau}) / (2 tau))`` is the exact
    Ornstein--Uhlenbeck step of the current (mV; Gillespie 1996).  The current
    is linear within a step in the compiled code.
    """

    def __init__(self, circuit, dt):
        self.targets, self.decay, self.drive, self.kinds, self.cohorts = [], [], [], [], []
        for k, a in enumerate(circuit.cohorts):
            bg = a.background
            if bg is not None and bg.tau_syn > 0.0:
                e = math.exp(-dt / bg.tau_syn)
                self._add(k, a, e, a.tau_m * bg.weight * (1.0 - e) / dt, "poisson")
            if a.diffusive and a.ext_tau_syn > 0.0:
                tau = a.ext_tau_syn
                e = math.exp(-dt / tau)
                self._add(k, a, e, math.sqrt(a.tau_m * -math.expm1(-2.0 * dt / tau) / (2.0 * tau)), "gauss")
        self.dt = dt

    def _add(self, k, a, decay, drive, kind):
        self.targets.append(k)
        self.decay.append(decay)
        self.drive.append(drive)
        self.kinds.append(kind)
        self.cohorts.append(a)

    def fill(self, buf, q_head, q_buf_off, n_real, sizes, n_steps, t0, rng):
        """Write the input of the next ``n_steps`` (<= MC_BLOCK) steps into the pseudo-pathways' slots."""
        for j, (k, kind, a) in enumerate(zip(self.targets, self.kinds, self.cohorts)):
            q = n_real + j
            n_k = int(sizes[k])
            slots = (q_head[q] + np.arange(n_steps)) % (MC_BLOCK + 1)
            view = buf[q_buf_off[q]:q_buf_off[q] + (MC_BLOCK + 1) * n_k].reshape(MC_BLOCK + 1, n_k)
            if kind == "poisson":
                lam = a.background.count * a.background.rate * self.dt * 1e-3
                view[slots] = rng.poisson(lam, size=(n_steps, n_k))
            else:
                # amplitude at the step ends (the value entering the filter at the end of step i)
                sig = np.broadcast_to(a.sigma_ext(t0 + self.dt * (np.arange(n_steps) + 1.0)), (n_steps,))
                view[slots] = rng.standard_normal((n_steps, n_k)) * sig[:, None]


def montecarlo_network(circuit: Circuit, t_end: float, dt: float | None = None, seed=None, *,
                       burn_in: float | None = None, record_interval: float | None = None,
                       record_spikes: bool = False, bridge: bool = True,
                       progress: bool | None = None) -> CircuitResult:
    """Direct simulation of the spiking network a circuit describes.

    Each cohort has ``size`` neurons; each pathway gives every target
    neuron ``in_degree`` distinct, randomly chosen presynaptic neurons
    (fixed in-degree, no self-connections), with the pathway's PSP jump,
    delay and synaptic kernel.  External input: the drive, white noise of
    amplitude ``sigma_ext`` (white-noise cohorts) and, if given,
    independent Poisson spike trains (:class:`PoissonBackground`).  See
    :mod:`popdens.twins._network` for the step.

    Parameters
    ----------
    circuit : Circuit
        The coupled cohorts (sizes and in-degrees are used as given).
    t_end : float
        Duration (ms) after the burn-in.
    dt : float, optional
        Step (ms), default 0.1; every delay must be a whole number (>= 1) of steps.
    seed : int or numpy.random.Generator, optional
        The same seed gives bit-identical results (connectivity included).
    burn_in : float, optional
        Time (ms) simulated before t = 0 at the external input of t = 0 and
        discarded; default 200 ms, and at least 8 time constants of the
        slowest adaptation component.  Neurons start at potentials drawn
        uniformly between reset and threshold, without adaptation.
    record_interval : float, optional
        Bin width (ms) of the rates; default ``dt``.
    record_spikes : bool
        Keep spike times (ms) and neuron ids.
    bridge : bool
        Brownian-bridge crossing detection for white noise (default True).
    progress : bool, optional
        Progress line on stderr (default: only on a terminal, long runs).

    Returns
    -------
    CircuitResult
        ``rate`` (Hz; spike count per bin / (size * bin width)), ``mean_u``
        (mV); ``rate[:, 0]`` is NaN (a finite network has no instantaneous
        rate).  ``diagnostics`` holds the numbers of synapses, spikes and
        synaptic events and the wall time.
    """
    from ..twins._escape import seed_compiled_rng
    from ..twins._network import NOISE_ESCAPE, NOISE_WHITE, csr_by_source, draw_in_degree, run_network

    if not isinstance(circuit, Circuit):
        raise ValueError(f"`circuit` must be a popdens.network.Circuit, got {circuit!r}")
    circuit.require_current("montecarlo_network", allow=("conductance", "shot"))
    builder = conductance_kernel(circuit)  # None unless the cohorts receive conductance synapses
    dt = DEFAULT_DT if dt is None else dt
    grid = make_grid(t_end, dt, record_interval, None)
    dt = grid.dt
    if burn_in is None:
        slowest = max([ad.tau for a in circuit.cohorts for ad in a.population.neuron.adaptation] + [0.0])
        burn_in = max(DEFAULT_BURN_IN_MS, BURN_IN_ADAPTATION_TAUS * slowest)
    burn_in = v.non_negative("burn_in", burn_in)
    n_burn = int(round(burn_in / dt))
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    asm = circuit.cohorts
    npop = circuit.n
    sizes = np.array([a.size for a in asm], dtype=np.int64)
    start = np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)
    n_total = int(start[-1])
    n_syn_planned = sum(p.in_degree * int(asm[circuit.names.index(p.target)].size) for p in circuit.pathways)
    # two int64 lists per synapse (incoming, outgoing) and about ten numbers per neuron
    v.check_memory("size", n_total, 16.0 * n_syn_planned + 80.0 * n_total,
                   f"a network of {n_total} neurons with {n_syn_planned} synapses")
    watch = Stopwatch()

    # -- per-cohort parameters
    nrns = [a.population.neuron for a in asm]
    noise = np.array([NOISE_WHITE if a.diffusive else NOISE_ESCAPE for a in asm], dtype=np.int64)
    ncode = np.array([n_.code for n_ in nrns], dtype=np.int64)
    tau_m = np.array([n_.tau_m for n_ in nrns], dtype=float)
    reset = np.array([n_.reset for n_ in nrns], dtype=float)
    boundary = np.array([n_.boundary for n_ in nrns], dtype=float)
    has_cutoff = np.array([bool(n_.has_cutoff) for n_ in nrns])
    tau_ref = np.array([n_.refractory for n_ in nrns], dtype=float)
    theta = np.array([n_.threshold for n_ in nrns], dtype=float)
    hzs = [a.population.noise.hazard if not a.diffusive else None for a in asm]
    hcode = np.array([h.code if h is not None else 0 for h in hzs], dtype=np.int64)
    uses_slope = np.array([bool(h.uses_slope) if h is not None else False for h in hzs])
    npar_flat, npar_ptr = _flat([n_.kernel_params for n_ in nrns], float)
    nops_flat, nprog_ptr = _flat([n_.program[0] for n_ in nrns], np.int64)
    nargs_flat, _ = _flat([n_.program[1] for n_ in nrns], float)
    hpar_flat, hpar_ptr = _flat([h.kernel_params if h is not None else np.zeros(1) for h in hzs], float)
    hops_flat, hprog_ptr = _flat([h.program[0] if h is not None else np.zeros(1, np.int64) for h in hzs], np.int64)
    hargs_flat, _ = _flat([h.program[1] if h is not None else np.zeros(1) for h in hzs], float)
    size = max([n_.program[0].size for n_ in nrns] + [h.program[0].size for h in hzs if h is not None]) + 2
    stack = np.empty(size)
    xbuf = np.zeros(3)
    # instantaneous background: drawn inside the compiled step; filtered background and filtered
    # external noise: pseudo-pathways whose ring buffers the front end fills (see _Feeds)
    bg_lam = np.array([a.background.count * a.background.rate * dt * 1e-3
                       if a.background and a.background.tau_syn == 0.0 else 0.0 for a in asm])
    # shot-noise synapses deliver their jumps (mV) at once (popdens.twins._network)
    shot = np.array([circuit.synapse_kind(k) == "shot" for k in range(npop)])
    bg_drive = np.array([(a.background.weight if shot[k] else a.tau_m * a.background.weight / dt)
                         if a.background else 0.0 for k, a in enumerate(asm)])
    feeds = _Feeds(circuit, dt)
    # adaptation: per-cohort components, flattened; every neuron carries its own state
    ad = [step_args(n_, dt) for n_ in nrns]
    ad_kinds, ad_ptr = _flat([x[0] for x in ad], np.int64)
    ad_decay, _ = _flat([x[1] for x in ad], float)
    ad_coup, _ = _flat([x[2] for x in ad], float)
    ad_kick, _ = _flat([x[3] for x in ad], float)
    ad_rest = np.array([x[4] for x in ad])
    st = np.zeros((max([len(n_.adaptation) for n_ in nrns] + [1]), n_total))

    # -- pathways: delays, drives, ring buffers, connectivity
    pws = circuit.pathways
    n_real = len(pws)
    nq = n_real + len(feeds.targets)
    q_src = np.array([circuit.index(p.source) for p in pws] + feeds.targets, dtype=np.int64)
    q_tgt = np.array([circuit.index(p.target) for p in pws] + feeds.targets, dtype=np.int64)
    q_m = np.array([_delay_steps(p, dt) for p in pws] + [MC_BLOCK] * len(feeds.targets), dtype=np.int64)
    q_head = np.zeros(nq, dtype=np.int64)
    q_decay = np.array([math.exp(-dt / p.tau_syn) if p.tau_syn > 0 else 0.0 for p in pws] + feeds.decay)
    q_drive = np.array([
        p.weight if shot[q_tgt[q]] else
        asm[q_tgt[q]].tau_m * p.weight * ((-math.expm1(-dt / p.tau_syn)) if p.tau_syn > 0 else 1.0) / dt
        for q, p in enumerate(pws)] + feeds.drive)
    buf_len = [(q_m[q] + 1) * sizes[q_tgt[q]] for q in range(nq)]
    q_buf_off = np.concatenate([[0], np.cumsum(buf_len)]).astype(np.int64)[:nq]
    x_len = [sizes[q_tgt[q]] for q in range(nq)]
    q_x_off = np.concatenate([[0], np.cumsum(x_len)]).astype(np.int64)[:nq]
    buf = np.zeros(int(sum(buf_len)) if nq else 1, dtype=np.float32)  # spike counts: exact up to 2**24
    xs = np.zeros(int(sum(x_len)) if nq else 1)
    seed_compiled_rng(int(rng.integers(0, 2**31 - 1)))
    ptrs, idxs = [], []
    for q, p in enumerate(pws):
        ns = int(sizes[q_src[q]])
        perm = np.arange(ns, dtype=np.int32)
        sources = draw_in_degree(int(sizes[q_tgt[q]]), ns, p.in_degree, p.source == p.target, perm)
        ptr, tg = csr_by_source(sources, p.in_degree, ns)
        ptrs.append(ptr)
        idxs.append(tg)
    for _ in feeds.targets:  # pseudo-pathways have no presynaptic neurons
        ptrs.append(np.zeros(1, np.int64))
        idxs.append(np.zeros(0, np.int32))
    ptr_flat, q_ptr_off = _flat(ptrs, np.int64) if nq else (np.zeros(1, np.int64), np.zeros(1, np.int64))
    idx_flat, q_idx_off = _flat(idxs, np.int32) if nq else (np.zeros(1, np.int32), np.zeros(1, np.int64))
    in_lists = [[q for q in range(nq) if q_tgt[q] == k] for k in range(npop)]
    out_lists = [[q for q in range(n_real) if q_src[q] == k] for k in range(npop)]
    in_list, in_ptr = _flat([np.array(x, dtype=np.int64) for x in in_lists], np.int64)
    out_list, out_ptr = _flat([np.array(x, dtype=np.int64) for x in out_lists], np.int64)
    if in_list.size == 0:
        in_list = np.zeros(1, np.int64)
    if out_list.size == 0:
        out_list = np.zeros(1, np.int64)
    n_synapses = int(sum(p.in_degree * sizes[q_tgt[q]] for q, p in enumerate(pws)))
    kernel = run_network if builder is None else builder(feeds, dt)

    # -- neuron state
    u = np.empty(n_total)
    for k, n_ in enumerate(nrns):
        hi = n_.threshold if n_.threshold > n_.reset else n_.boundary
        u[start[k]:start[k + 1]] = rng.uniform(n_.reset, hi, size=int(sizes[k]))
    ref = np.zeros(n_total)
    age = np.repeat(tau_ref + 0.0, sizes)
    lam = np.zeros(n_total)
    thr = rng.exponential(1.0, size=n_total)
    hz = np.zeros(n_total)

    mu_at = [BoundarySamples(a.drive, grid) for a in asm]
    # coloured external noise is a pseudo-pathway (_Feeds): no white noise for those cohorts
    sg_at = [BoundarySamples(a.sigma_ext, grid) if a.diffusive and a.ext_tau_syn == 0.0 else None for a in asm]

    def ext(k0, k1):
        # the Poisson background is drawn as spikes, so only the drive and the white noise enter here;
        # one-sided at jumps on the block's ends (blocks end at every jump: no response precedes it)
        times = grid.step_times(k0, k1)
        mu = np.array([s.values(k0, k1) for s in mu_at], dtype=float)
        var = np.array([s.values(k0, k1) ** 2 if s is not None else 0.0 * times for s in sg_at], dtype=float)
        if not (np.all(np.isfinite(mu)) and np.all(np.isfinite(var)) and np.all(var >= 0)):
            raise FloatingPointError("the external drive or noise is not finite (or negative variance)")
        return np.ascontiguousarray(mu), np.ascontiguousarray(np.sqrt(var))

    fixed = (start, noise, ncode, tau_m, reset, boundary, has_cutoff, tau_ref, hcode, theta, uses_slope,
             npar_flat, npar_ptr, nops_flat, nargs_flat, nprog_ptr, hpar_flat, hpar_ptr, hops_flat, hargs_flat,
             hprog_ptr, bg_lam, bg_drive, ad_ptr, ad_kinds, ad_decay, ad_coup, ad_kick, ad_rest, st)
    if builder is None:  # the current kernel also takes the cohorts' shot-noise flags
        fixed = fixed + (shot,)
    net = (q_src, q_tgt, q_m, q_head, q_buf_off, q_x_off, q_drive, q_decay, q_ptr_off, q_idx_off,
           in_ptr, in_list, out_ptr, out_list, buf, xs, ptr_flat, idx_flat, u, ref, age, lam, thr, hz)
    no_spk = (np.zeros(1), np.zeros(1, dtype=np.int64))
    mu_b, sg_b = ext(0, 0)
    n_burn_spikes = 0
    # neuron updates plus synaptic events (~1 per 2000 synapses and step at ~20 Hz, dt = 0.1 ms; an
    # event costs about a quarter of an update): steps per compiled call for a bounded Ctrl-C latency
    per_call = steps_per_call(n_total + n_synapses // 2000, MC_BLOCK)
    for b0 in range(0, n_burn, per_call):
        b1 = min(n_burn, b0 + per_call)
        m_ = np.ascontiguousarray(np.repeat(mu_b, b1 - b0 + 1, axis=1))
        s_ = np.ascontiguousarray(np.repeat(sg_b, b1 - b0 + 1, axis=1))
        cnt = np.zeros((b1 - b0, npop), dtype=np.int64)
        mu_out = np.zeros((b1 - b0, npop))
        feeds.fill(buf, q_head, q_buf_off, n_real, sizes, b1 - b0, 0.0, rng)
        kernel(*fixed, m_, s_, dt, bool(bridge), *net, 0.0, False, *no_spk, 0, cnt, mu_out, stack, xbuf)
        n_burn_spikes += int(cnt.sum())

    n = grid.n_steps
    counts = np.zeros((n, npop), dtype=np.int64)
    mean_u = np.zeros((n, npop))
    cap = n_total * SPIKES_PER_NEURON_GUESS if record_spikes else 1
    spk_t = np.empty(cap)
    spk_i = np.empty(cap, dtype=np.int64)
    n_spk = 0
    bar = Progress(n, "network Monte Carlo", progress)
    k = 0
    status, message = STATUS_OK, "completed"
    try:
        for end in split_at_jumps(itertools.chain(range(per_call, n, per_call), [n]), *mu_at, *sg_at):
            while k < end:
                m_, s_ = ext(k, end)
                feeds.fill(buf, q_head, q_buf_off, n_real, sizes, end - k, k * dt, rng)
                done, n_spk, full = kernel(*fixed, m_, s_, dt, bool(bridge), *net, k * dt, bool(record_spikes),
                                           spk_t, spk_i, n_spk, counts[k:end], mean_u[k:end], stack, xbuf)
                k += done
                if full:
                    grow = max(cap, n_spk + n_total)
                    spk_t = np.concatenate([spk_t[:n_spk], np.empty(grow)])
                    spk_i = np.concatenate([spk_i[:n_spk], np.empty(grow, dtype=np.int64)])
                    cap = spk_t.size
            bar.update(k)
    except FloatingPointError as exc:
        status, message = STATUS_FAILED, str(exc)
    except KeyboardInterrupt:
        status, message = STATUS_INTERRUPTED, f"interrupted by the user at t = {k * dt:g} ms"
        logger.warning(message)
    finally:
        bar.close()
    e = grid.every
    n_out = k // e
    c_out = counts[: n_out * e].reshape(n_out, e, npop).sum(axis=1).T
    rate = c_out / (sizes[:, None] * e * dt * 1e-3)
    rate = np.concatenate([np.full((npop, 1), np.nan), rate], axis=1)
    idx = np.arange(n_out + 1) * e
    mu_rec = np.concatenate([np.full((npop, 1), np.nan), mean_u[e - 1: n_out * e: e].T], axis=1)
    n_spikes = int(counts[:k].sum())
    out_deg = {p.label: p.in_degree * int(sizes[q_tgt[q]]) / int(sizes[q_src[q]]) for q, p in enumerate(pws)}
    events = int(sum(counts[:k, q_src[q]].sum() * out_deg[p.label] for q, p in enumerate(pws)))
    return CircuitResult(
        names=circuit.names, t=idx * dt, rate=rate, method="montecarlo", mean_u=mu_rec,
        status=status, message=message, dt=dt, sizes=tuple(int(x) for x in sizes),
        spike_times=spk_t[:n_spk].copy() if record_spikes else None,
        spike_ids=spk_i[:n_spk].copy() if record_spikes else None,
        diagnostics={**watch.times(), "version": __version__, "steps": k,
                     "burn_in_ms": n_burn * dt, "burn_in_spikes": n_burn_spikes, "n_neurons": n_total,
                     "n_synapses": n_synapses, "n_spikes": n_spikes, "synaptic_events": events},
    )
