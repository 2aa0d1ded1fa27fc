"""Front end for time-domain density solutions: :func:`simulate`."""

from __future__ import annotations

import inspect
import logging
import warnings

import numpy as np

from .._version import __version__
from .. import _validation as v
from ..model._jit import Stopwatch
from ._recording import BoundarySamples, block_ends, downsample, make_grid, split_at_jumps, steps_per_call
from ..model.drive import as_drive
from ..model.noise import Population, WhiteNoise
from ..progress import Progress
from ..exceptions import AccuracyWarning
from ..result import STATUS_FAILED, STATUS_INTERRUPTED, STATUS_OK, Result
from .registry import resolve_method

__all__ = ["simulate"]

logger = logging.getLogger(__name__)

#: Default internal time step (ms) when the solver does not define one.
DEFAULT_DT = 0.1
#: Drive samples over the run handed to the solver's ``plan`` (resolution chosen for their range).
PLAN_SAMPLES = 20_001
#: Tolerance on total probability before a run is flagged as failed.
MASS_TOLERANCE = 1e-9


class _AccuracyGuard:
    """Turns a solver's ``accuracy_issues`` into one AccuracyWarning per setting."""

    def __init__(self, solver):
        self.solver = solver
        self.seen: set[str] = set()
        self.messages: list[str] = []

    def check(self, mu, sigma) -> None:
        for setting, msg in self.solver.accuracy_issues(mu, sigma):
            if setting not in self.seen:
                self.seen.add(setting)
                self.messages.append(msg)
                warnings.warn(msg, AccuracyWarning, stacklevel=3)


def simulate(population, drive, t_end, dt=None, *, method=None, initial="stationary",
             record_interval=None, snapshot_interval=None, progress=None, **options) -> Result:
    """Solve the population-density equation of ``population`` under ``drive``.

    Parameters
    ----------
    population : Population
        Neuron model and noise model.  Escape noise is solved by the
        refractory-density method, white noise by the Fokker--Planck method.
    drive : Drive or float
        Input drive ``mu(t)`` in mV (a number means a constant drive).
    t_end : float
        Duration (ms); the run covers ``[0, t_end]``.
    dt : float, optional
        Internal time step (ms); must divide ``t_end``.  Default: the
        solver's default (0.1 ms for the refractory-density solver).
    method : str or type, optional
        Solver name from ``popdens.solvers.METHODS`` or a solver class.
    initial : str or array_like, optional
        ``"stationary"`` (default): the stationary state of the initial
        drive; ``"synchronous"``: all neurons have just fired; or a density
        on the solver's axis.
    record_interval : float, optional
        Output interval (ms), a multiple of ``dt`` dividing ``t_end``; the
        rate is averaged over each interval.  Default: every step.
    snapshot_interval : float, optional
        Interval (ms) between density snapshots (multiple of ``dt``).
    progress : bool, optional
        Show a progress line on stderr (default: only on a terminal, for
        long runs).
    **options
        Solver options (e.g. ``max_age`` for the refractory-density solver).

    Returns
    -------
    Result
        ``t`` (ms), ``rate`` (Hz), ``mean_u`` (mV), ``refractory_fraction``,
        the drive (mV), optional snapshots, ``status``/``message`` and
        diagnostics.  ``rate[0]`` is the instantaneous rate of the initial
        state; ``rate[k]`` the mean over ``(t[k-1], t[k]]``.

    Raises
    ------
    ValueError
        For invalid arguments (the message names the argument).

    Warns
    -----
    AccuracyWarning
        Once per setting (``dt``, ``n_cells``, ``u_min``...) that is too coarse
        for the state reached, checked at the start and after every block of
        steps; the messages are also kept in ``diagnostics["accuracy_warnings"]``.

    Examples
    --------
    >>> import popdens
    >>> pop = popdens.Population(popdens.LIF(10.0, 20.0, 0.0, 2.0),
    ...                          popdens.EscapeNoise(popdens.hazard.Exponential(20.0, 2.0)))
    >>> res = popdens.simulate(pop, 15.0, t_end=10.0)
    >>> res.t[-1], res.rate.shape
    (10.0, (101,))
    """
    if not isinstance(population, Population):
        raise ValueError(f"`population` must be a popdens.Population, got {population!r}")
    drive = as_drive(drive)
    cls = resolve_method(population, method)
    if dt is None:
        dt = getattr(cls, "default_dt", DEFAULT_DT)
    grid = make_grid(t_end, dt, record_interval, snapshot_interval)
    sig = inspect.signature(cls.__init__)
    allowed = [p for p in sig.parameters if p not in ("self", "population", "dt")]
    unknown = sorted(set(options) - set(allowed))
    if unknown:
        raise ValueError(f"unknown option(s) {unknown} for method {cls.method_name!r}; allowed: {allowed}")
    solver = cls(population, grid.dt, **options)
    sigma_drive = population.noise.sigma_drive if isinstance(population.noise, WhiteNoise) else None

    watch = Stopwatch()
    mu_at = BoundarySamples(drive, grid)
    sigma_at = BoundarySamples(sigma_drive, grid) if sigma_drive is not None else None
    mu0 = mu_at.start()
    sigma0 = sigma_at.start() if sigma_at is not None else None
    if not np.isfinite(mu0) or (sigma0 is not None and not np.isfinite(sigma0)):
        raise ValueError("the drive is not finite at t = 0")
    # the drive over the run (sampled), so that solvers can choose a resolution that suits all of it
    ks = np.unique(np.linspace(0, grid.n_steps, min(grid.n_steps + 1, PLAN_SAMPLES)).astype(np.int64))
    jt = np.asarray(list(mu_at.jumps.values()) + list(sigma_at.jumps.values() if sigma_at else []), dtype=float)
    ts = np.concatenate([ks * grid.dt, jt])
    with np.errstate(all="ignore"):  # non-finite values are reported by the run itself
        solver.plan(np.concatenate([drive(ts), drive.left_limit(jt)]),
                    None if sigma_drive is None else np.concatenate([sigma_drive(ts), sigma_drive.left_limit(jt)]))
    solver.initialize(mu0, sigma0, initial)
    n_snap = grid.n_steps // grid.snap_every + 1 if grid.snap_every else 0
    v.check_memory("t_end", t_end, 8.0 * (3 * grid.n_steps + n_snap * (solver.axis.size + 1)),
                   f"recording {grid.n_steps} steps" + (f" and {n_snap} density snapshots" if n_snap else ""))
    guard = _AccuracyGuard(solver)
    guard.check(np.array([mu0]), None if sigma0 is None else np.array([sigma0]))
    rate0 = solver.instantaneous_rate(mu0, sigma0)
    meanu0 = solver.mean_potential()
    refr0 = solver.refractory_fraction()

    rate = np.empty(grid.n_steps)
    mean_u = np.empty(grid.n_steps)
    refr = np.empty(grid.n_steps)
    snaps_t, snaps = [], []
    if grid.snap_every:
        snaps_t.append(0.0)
        snaps.append(solver.density().copy())
    bar = Progress(grid.n_steps, f"{cls.method_name}", progress)
    k = 0
    status, message = STATUS_OK, "completed"
    try:
        for end in split_at_jumps(block_ends(grid, steps_per_call(solver.axis.size)), mu_at, sigma_at):
            tk = grid.step_times(k, end)
            mu = mu_at.values(k, end)
            sg = sigma_at.values(k, end) if sigma_at is not None else None
            if not np.all(np.isfinite(mu)) or (sg is not None and not np.all(np.isfinite(sg))):
                bad = tk[~np.isfinite(mu)] if not np.all(np.isfinite(mu)) else tk
                status, message = STATUS_FAILED, f"the drive is not finite at t = {bad[0]:g} ms"
                break
            r, mu_out, rf = solver.advance(mu, sg)
            n_done = r.size
            rate[k:k + n_done] = r
            mean_u[k:k + n_done] = mu_out
            refr[k:k + n_done] = rf
            k += n_done
            if solver.status != STATUS_OK:
                status, message = solver.status, solver.message
                break
            guard.check(mu, sg)
            if grid.snap_every and k % grid.snap_every == 0:
                snaps_t.append(k * grid.dt)
                snaps.append(solver.density().copy())
            bar.update(k)
    except KeyboardInterrupt:
        status, message = STATUS_INTERRUPTED, f"interrupted by the user at t = {k * grid.dt:g} ms"
        logger.warning(message)
    finally:
        bar.close()
    mass_error = abs(solver.mass() - 1.0)
    if status == STATUS_OK and not mass_error <= MASS_TOLERANCE:
        status, message = STATUS_FAILED, f"probability mass drifted by {mass_error:.3g}"
    t, r_out, mu_o, rf_o = downsample(grid, rate0, rate, meanu0, mean_u, refr0, refr, k)
    diagnostics = {
        **watch.times(),
        "version": __version__,
        "mass_error": mass_error,
        "method": cls.method_name,
        "dt_ms": grid.dt,
        **solver.diagnostics(),
        "accuracy_warnings": guard.messages,
    }
    return Result(
        t=t, rate=r_out, mean_u=mu_o, refractory_fraction=rf_o, drive=drive(t),
        method=cls.method_name, population=population, status=status, message=message,
        dt=grid.dt, n_steps=k,
        snapshot_t=np.asarray(snaps_t) if grid.snap_every else None,
        snapshots=np.asarray(snaps) if grid.snap_every else None,
        axis=solver.axis.copy() if grid.snap_every else None,
        axis_name=cls.axis_name, diagnostics=diagnostics,
    )
