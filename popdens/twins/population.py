"""Monte Carlo twins: direct simulation of N independent neurons.

Every density prediction can be checked against a direct simulation of the
neurons it describes.  :func:`montecarlo` simulates ``n`` independent
neurons with the same model, noise and drive and returns the same
:class:`~popdens.Result` as :func:`~popdens.simulate`.
"""

from __future__ import annotations

import copy
import logging
import math

import numpy as np

from .._version import __version__
from ..model._jit import Stopwatch
from .. import _validation as v
from ._escape import run_escape, run_escape_adapting, seed_compiled_rng
from ..model.adaptation import KIND_CURRENT, step_args
from ..solvers._age_step import _newborn
from ..solvers._recording import (WORK_PER_CALL, BoundarySamples, block_ends, downsample, make_grid, split_at_jumps,
                                  steps_per_call)
from ..model.drive import as_drive
from ..model.noise import EscapeNoise, Population, WhiteNoise
from ..model.shot import ShotNoise
from ..model.conductance import ConductanceNoise
from ..model.synaptic import ColouredNoise
from ..progress import Progress
from ..result import STATUS_FAILED, STATUS_INTERRUPTED, STATUS_OK, Result

__all__ = ["montecarlo"]

logger = logging.getLogger(__name__)

#: Default time step (ms).
DEFAULT_DT = 0.1
#: Coloured noise: default steps per synaptic time constant, at least (the default step is
#: ``DEFAULT_DT`` divided by a whole number, so it still divides run lengths in 0.1 ms).
COLOURED_STEPS_PER_TAU = 20
#: Conductance input: the same steps per (shorter) synaptic time constant, and a step of at most this
#: (ms): the step-averaged conductances make a bias of order dt (measured in the tests).
CONDUCTANCE_MAX_DT = 0.02
#: Default burn-in (ms) at the initial drive for ``initial="stationary"``,
#: in membrane time constants beyond the refractory period, plus a floor.
BURN_IN_TAUS = 20.0
BURN_IN_MIN_MS = 500.0
#: ... and in time constants of the slowest adaptation component: the mean adaptation relaxes
#: at least this fast, so its distance to the stationary state falls below exp(-8) ~ 3e-4.
BURN_IN_ADAPTATION_TAUS = 8.0
#: Most steps per compiled call (fewer for large ensembles: ``steps_per_call``).
MC_BLOCK_STEPS = 2000
#: Initial capacity of the spike buffer, per neuron.
SPIKES_PER_NEURON_GUESS = 16


def default_burn_in(neuron) -> float:
    """Default burn-in (ms): long enough for the membrane and every adaptation component to settle."""
    out = max(BURN_IN_MIN_MS, neuron.refractory + BURN_IN_TAUS * neuron.tau_m)
    if neuron.adaptation:
        out = max(out, BURN_IN_ADAPTATION_TAUS * max(a.tau for a in neuron.adaptation))
    return out


def _escape_args(population, dt):
    nrn = population.neuron
    hz = population.noise.hazard
    return (
        nrn.code, np.ascontiguousarray(nrn.kernel_params, dtype=float), nrn.program[0], nrn.program[1],
        float(nrn.tau_m), float(nrn.reset), float(nrn.boundary), bool(nrn.has_cutoff),
        hz.code, np.ascontiguousarray(hz.kernel_params, dtype=float), hz.program[0], hz.program[1],
        float(nrn.threshold), bool(hz.uses_slope), float(nrn.refractory), float(dt),
    )


class _EscapeEnsemble:
    """State of N escape-noise neurons (see :mod:`popdens.twins._escape`)."""

    def __init__(self, population, n, dt, rng):
        nrn = population.neuron
        self.args = _escape_args(population, dt)
        self.dt = dt
        self.u = np.full(n, float(nrn.reset))
        # start free (age = refractory) so the burn-in begins with a spike-free reset state
        self.age = np.full(n, float(nrn.refractory))
        self.lam = np.zeros(n)
        self.thr = rng.exponential(1.0, size=n)
        self.h = np.zeros(n)
        size = max(nrn.program[0].size, population.noise.hazard.program[0].size) + 2
        self.stack = np.empty(size)
        self.xbuf = np.zeros(3)
        self.refractory = nrn.refractory
        self.adapt = step_args(nrn, dt) if nrn.adapting else None
        self.st = np.zeros((len(nrn.adaptation), n))  # adaptation of each neuron (mV)

    def run(self, mu, sig, t0, record, spk_t, spk_i, n_spk):
        n = mu.size - 1
        count = np.empty(n, dtype=np.int64)
        mean_u = np.empty(n)
        refr = np.empty(n)
        if self.adapt is None:
            done, n_spk, full = run_escape(*self.args, self.u, self.age, self.lam, self.thr, self.h, mu, t0,
                                           record, spk_t, spk_i, n_spk, count, mean_u, refr,
                                           self.stack, self.xbuf)
        else:
            done, n_spk, full = run_escape_adapting(*self.args, *self.adapt, self.st, self.u, self.age, self.lam,
                                                    self.thr, self.h, mu, t0, record, spk_t, spk_i, n_spk, count,
                                                    mean_u, refr, self.stack, self.xbuf)
        return done, n_spk, full, count[:done], mean_u[:done], refr[:done]

    def _sums(self):
        """Summed adaptation currents and threshold shifts (mV) of every neuron."""
        if self.adapt is None:
            return 0.0, 0.0
        current = self.adapt[0] == KIND_CURRENT
        return self.st[current].sum(axis=0), self.st[~current].sum(axis=0)

    def instantaneous_rate(self, population, mu):
        nrn, hz = population.neuron, population.noise.hazard
        free = self.age >= nrn.refractory
        w, th = self._sums()
        return float(np.mean(hz.rate(self.u, nrn.threshold + th, nrn.velocity(self.u, mu - w)) * free))

    def start_synchronous(self, population, mu0):
        """All neurons fire at t = 0 (with no earlier spikes): reset, age 0, fresh integrated hazard."""
        w0 = th0 = 0.0
        if self.adapt is not None:
            self.st[:] = self.adapt[3][:, None]
            w, th = self._sums()
            w0, th0 = float(w[0]), float(th[0])
        args = list(self.args)
        args[12] += th0
        u0, h0 = _newborn(*args[:6], *args[8:14], args[14], self.dt, float(mu0) - w0, self.stack, self.xbuf)
        self.u[:] = u0
        self.h[:] = h0
        self.age[:] = 0.5 * self.dt  # as the density solver: fired within the step before t = 0
        self.lam[:] = 0.0

    def mean_potential(self):
        return float(self.u.mean())

    def refractory_fraction(self):
        return float(np.mean(self.age < self.refractory - 1e-9 * self.dt))


def _default_dt(population) -> float:
    """``DEFAULT_DT``, divided for coloured noise so that ``tau_syn / dt >= COLOURED_STEPS_PER_TAU``."""
    if isinstance(population.noise, ColouredNoise):
        return DEFAULT_DT / math.ceil(COLOURED_STEPS_PER_TAU * DEFAULT_DT / population.noise.tau_syn - 1e-9)
    if isinstance(population.noise, ConductanceNoise):
        taus = [tau for _, _, tau, _ in population.noise.channels()]
        parts = max(COLOURED_STEPS_PER_TAU * DEFAULT_DT / min(taus), DEFAULT_DT / CONDUCTANCE_MAX_DT)
        return DEFAULT_DT / math.ceil(parts - 1e-9)
    return DEFAULT_DT


def _make_ensemble(population, n, dt, rng, options):
    if isinstance(population.noise, EscapeNoise):
        if options:
            raise ValueError(f"unknown option(s) {sorted(options)} for escape-noise Monte Carlo")
        return _EscapeEnsemble(population, n, dt, rng)
    if isinstance(population.noise, WhiteNoise):
        from ._diffusive import DiffusiveEnsemble  # noqa: PLC0415 - optional until available

        return DiffusiveEnsemble(population, n, dt, rng, **options)
    if isinstance(population.noise, ColouredNoise):
        if options:
            raise ValueError(f"unknown option(s) {sorted(options)} for coloured-noise Monte Carlo")
        from ._coloured import ColouredEnsemble  # noqa: PLC0415 - compiled kernel loaded on first use

        return ColouredEnsemble(population, n, dt, rng)
    if isinstance(population.noise, ShotNoise):
        if options:
            raise ValueError(f"unknown option(s) {sorted(options)} for shot-noise Monte Carlo")
        from ._shot import ShotEnsemble  # noqa: PLC0415 - compiled kernel loaded on first use

        return ShotEnsemble(population, n, dt, rng)
    if isinstance(population.noise, ConductanceNoise):
        if options:
            raise ValueError(f"unknown option(s) {sorted(options)} for conductance Monte Carlo")
        from ._conductance import ConductanceEnsemble  # noqa: PLC0415 - compiled kernel loaded on first use

        return ConductanceEnsemble(population, n, dt, rng)
    raise ValueError(f"unsupported noise {population.noise!r}")  # pragma: no cover


def _part(ens, n: int, i0: int, i1: int):
    """The neurons ``i0:i1`` of an ensemble as an ensemble of their own (views of the per-neuron
    arrays; 2-D per-neuron arrays such as the adaptation state are copied, see :func:`_commit`)."""
    part = copy.copy(ens)
    for name, value in vars(ens).items():
        if isinstance(value, np.ndarray) and value.ndim >= 1 and value.shape[-1] == n:
            piece = value[..., i0:i1]
            setattr(part, name, piece if value.ndim == 1 else np.ascontiguousarray(piece))
    return part


def _commit(ens, part, n: int, i0: int, i1: int) -> None:
    for name, value in vars(ens).items():
        if isinstance(value, np.ndarray) and value.ndim >= 2 and value.shape[-1] == n:
            value[..., i0:i1] = getattr(part, name)


def _run(ens, n, mu, sg, t0, record, spk_t, spk_i, n_spk):
    """``ens.run`` for one step, in compiled calls of at most WORK_PER_CALL neurons each, so that
    Ctrl-C (handled between calls) acts within a second however large the ensemble.  Each part
    draws its random numbers in turn: the results depend on ``n`` and the seed only."""
    if n <= WORK_PER_CALL:
        return ens.run(mu, sg, t0, record, spk_t, spk_i, n_spk)
    if mu.size != 2:
        raise AssertionError("an ensemble this large advances one step per call")  # pragma: no cover
    if record and spk_t.shape[0] - n_spk < n:
        return 0, n_spk, True, np.zeros(0), np.zeros(0), np.zeros(0)
    count = mean_u = refr = 0.0
    for i0 in range(0, n, WORK_PER_CALL):
        i1 = min(n, i0 + WORK_PER_CALL)
        part = _part(ens, n, i0, i1)
        before = n_spk
        _, n_spk, _, c, m, r = part.run(mu, sg, t0, record, spk_t, spk_i, n_spk)
        spk_i[before:n_spk] += i0  # ids within the part -> ids in the ensemble (time order kept)
        _commit(ens, part, n, i0, i1)
        count += float(c[0])
        mean_u += float(m[0]) * (i1 - i0)
        refr += float(r[0]) * (i1 - i0)
    return 1, n_spk, False, np.array([count]), np.array([mean_u / n]), np.array([refr / n])


def montecarlo(population, drive, t_end, n, dt=None, seed=None, *, initial="stationary",
               burn_in=None, record_interval=None, record_spikes=False, progress=None,
               **options) -> Result:
    """Simulate ``n`` independent neurons directly.

    Parameters
    ----------
    population : Population
        Neuron model and noise model (the same object the density solvers take).
    drive : Drive or float
        Input drive ``mu(t)`` (mV); a number means a constant drive.
    t_end : float
        Duration (ms).
    n : int
        Number of neurons.
    dt : float, optional
        Time step (ms), must divide ``t_end``; default 0.1 ms (coloured noise:
        0.1 ms divided by the smallest whole number giving at least
        ``COLOURED_STEPS_PER_TAU`` steps per ``tau_syn``; conductance input:
        the same per shorter conductance time constant, and at most
        ``CONDUCTANCE_MAX_DT`` = 0.02 ms).
    seed : int or numpy.random.Generator, optional
        Seed or generator; the same seed gives bit-identical results.
    initial : {"stationary", "synchronous"}
        ``"stationary"``: neurons first run for ``burn_in`` ms at the drive
        of t = 0, so that t = 0 finds them in the stationary state;
        ``"synchronous"``: all neurons fire at t = 0.
    burn_in : float, optional
        Burn-in (ms) for ``initial="stationary"``; default
        ``max(500, refractory + 20 tau_m)``, and at least 8 time constants of
        the slowest adaptation component.
    record_interval : float, optional
        Bin width (ms) of the population rate; default ``dt``.
    record_spikes : bool
        Keep spike times and neuron indices (``Result.spike_times``,
        ``Result.spike_ids``, ``Result.isis()``).
    progress : bool, optional
        Show progress on stderr (default: only on a terminal, long runs).
    **options
        Noise-specific options (diffusive noise: see ``popdens.twins._diffusive``).

    Returns
    -------
    Result
        Same fields as :func:`popdens.simulate`; ``rate`` is the spike count
        per bin divided by ``n`` and the bin width (Hz); ``n_neurons`` is set
        and ``rate_standard_error()`` gives the Poisson standard error.

    Examples
    --------
    >>> import popdens
    >>> pop = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0),
    ...                          popdens.EscapeNoise(popdens.hazard.Exponential(20.0, 2.0)))
    >>> res = popdens.montecarlo(pop, 15.0, t_end=10.0, n=1000, seed=1)
    >>> res.n_neurons
    1000
    """
    if not isinstance(population, Population):
        raise ValueError(f"`population` must be a popdens.Population, got {population!r}")
    drive = as_drive(drive)
    n = v.positive_int("n", n)
    dt = _default_dt(population) if dt is None else dt
    grid = make_grid(t_end, dt, record_interval, None)
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    if initial not in ("stationary", "synchronous"):
        raise ValueError(f"`initial` must be 'stationary' or 'synchronous', got {initial!r}")
    nrn = population.neuron
    per_neuron = 8.0 * (6 + len(nrn.adaptation)) + (16.0 * SPIKES_PER_NEURON_GUESS if record_spikes else 0.0)
    v.check_memory("n", n, n * per_neuron + 24.0 * grid.n_steps, f"the state of {n} neurons")
    watch = Stopwatch()
    seed_compiled_rng(int(rng.integers(0, 2**31 - 1)))
    ens = _make_ensemble(population, n, grid.dt, rng, options)
    mu_at = BoundarySamples(drive, grid)
    sigma_drive = getattr(population.noise, "sigma_drive", None)  # white or coloured noise
    sigma_at = BoundarySamples(sigma_drive, grid) if sigma_drive is not None else None
    mu0 = mu_at.start()
    if not np.isfinite(mu0):
        raise ValueError("the drive is not finite at t = 0")
    sigma0 = sigma_at.start() if sigma_at is not None else None
    no_spikes = (np.zeros(1), np.zeros(1, dtype=np.int64))
    n_burn = 0
    if initial == "stationary":
        if burn_in is None:
            burn_in = default_burn_in(nrn)
        burn_in = v.non_negative("burn_in", burn_in)
        n_burn = int(round(burn_in / grid.dt))
    elif burn_in is not None:
        v.warn_ignored("burn_in", "initial='synchronous' starts all neurons at a spike")
    per_call = steps_per_call(n, MC_BLOCK_STEPS)
    bar = Progress(n_burn + grid.n_steps, "montecarlo", progress)
    try:
        for k0 in range(0, n_burn, per_call):
            k1 = min(n_burn, k0 + per_call)
            _run(ens, n, np.full(k1 - k0 + 1, mu0), None if sigma0 is None else np.full(k1 - k0 + 1, sigma0),
                 0.0, False, *no_spikes, 0)
            bar.update(k1)
    except KeyboardInterrupt:
        bar.close()
        message = f"interrupted by the user during the burn-in ({k0 * grid.dt:g} of {burn_in:g} ms)"
        logger.warning(message)
        return Result(t=np.zeros(1), rate=np.full(1, np.nan), mean_u=np.full(1, np.nan),
                      refractory_fraction=np.full(1, np.nan), drive=drive(np.zeros(1)), method="montecarlo",
                      population=population, status=STATUS_INTERRUPTED, message=message, dt=grid.dt, n_steps=0,
                      n_neurons=n, diagnostics={**watch.times(), "version": __version__})
    if initial == "synchronous":
        ens.start_synchronous(population, mu0)
    rate0 = ens.instantaneous_rate(population, mu0)
    meanu0, refr0 = ens.mean_potential(), ens.refractory_fraction()

    counts = np.zeros(grid.n_steps)
    mean_u = np.empty(grid.n_steps)
    refr = np.empty(grid.n_steps)
    cap = n * SPIKES_PER_NEURON_GUESS if record_spikes else 1
    spk_t = np.empty(cap)
    spk_i = np.empty(cap, dtype=np.int64)
    n_spk = 0
    k = 0
    status, message = STATUS_OK, "completed"
    try:
        for end in split_at_jumps(block_ends(grid, per_call), mu_at, sigma_at):
            while k < end:
                tk = grid.step_times(k, end)
                mu = mu_at.values(k, end)
                if not np.all(np.isfinite(mu)):
                    raise FloatingPointError(f"the drive is not finite at t = {tk[~np.isfinite(mu)][0]:g} ms")
                sg = sigma_at.values(k, end) if sigma_at is not None else None
                done, n_spk, full, c, mu_out, rf = _run(ens, n, mu, sg, k * grid.dt, record_spikes, spk_t, spk_i,
                                                        n_spk)
                counts[k:k + done] = c
                mean_u[k:k + done] = mu_out
                refr[k:k + done] = rf
                k += done
                if full:
                    spk_t = np.concatenate([spk_t[:n_spk], np.empty(max(cap, n_spk + n))])
                    spk_i = np.concatenate([spk_i[:n_spk], np.empty(max(cap, n_spk + n), dtype=np.int64)])
                    cap = spk_t.size
            bar.update(n_burn + k)
    except FloatingPointError as exc:
        status, message = STATUS_FAILED, str(exc)
    except KeyboardInterrupt:
        status, message = STATUS_INTERRUPTED, f"interrupted by the user at t = {k * grid.dt:g} ms"
        logger.warning(message)
    finally:
        bar.close()
    rate = counts / (n * grid.dt * 1e-3)
    t, r_out, mu_o, rf_o = downsample(grid, rate0, rate, meanu0, mean_u, refr0, refr, k)
    return Result(
        t=t, rate=r_out, mean_u=mu_o, refractory_fraction=rf_o, drive=drive(t),
        method="montecarlo", population=population, status=status, message=message,
        dt=grid.dt, n_steps=k, n_neurons=n,
        spike_times=spk_t[:n_spk].copy() if record_spikes else None,
        spike_ids=spk_i[:n_spk].copy() if record_spikes else None,
        diagnostics={**watch.times(), "version": __version__,
                     "burn_in_ms": burn_in if initial == "stationary" else 0.0,
                     "n_spikes": int(counts[:k].sum()), "dt_ms": grid.dt, "initial": initial,
                     "seed": seed if isinstance(seed, (int, np.integer)) or seed is None else "generator"},
    )

