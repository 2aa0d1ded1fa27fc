"""Front end for time-domain density solutions: :func:`simulate`."""

from __future__ import annotations

import dataclasses
import inspect
import logging
import math
import warnings

import numpy as np

from .._version import __version__
from .. import _validation as v
from ..model._jit import Stopwatch
from ._recording import BoundarySamples, TimeGrid, block_ends, downsample, make_grid, split_at_jumps, steps_per_call
from ..model.drive import as_drive
from ..model.noise import Population
from ..progress import Progress
from ..exceptions import AccuracyWarning
from ..result import STATUS_FAILED, STATUS_INTERRUPTED, STATUS_OK, Result
from .mesoscopic import seed_kernel_rng
from .registry import resolve_finite_method, resolve_method

__all__ = ["simulate"]

logger = logging.getLogger(__name__)

#: Error control modes of :func:`simulate`.
ERROR_CONTROL = ("auto", "refine", "warn", "off")
#: Default tolerance of the time-step error control: relative, and absolute (Hz), per recorded rate.
RATE_RTOL = 1e-3
RATE_ATOL = 0.1
#: Most halvings of dt by the error control.
MAX_HALVINGS = 3
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

    def check(self, mu, sigma, depth: int = 0) -> None:
        """Warn once per setting; ``depth`` = calls between the public function and here."""
        for setting, msg in self.solver.accuracy_issues(mu, sigma):
            if setting not in self.seen:
                self.seen.add(setting)
                self.messages.append(msg)
                warnings.warn(msg, AccuracyWarning, stacklevel=3 + depth)


def _integrate(solver, mu_at, sigma_at, grid, guard, bar, offset: int = 0):
    """Advance an initialised solver over ``grid`` in compiled blocks.

    Returns the per-step ``rate``, ``mean_u``, ``refr`` arrays, the steps done,
    ``status``, ``message`` and the snapshots (times, densities).  Ctrl-C ends
    the run with the interrupted status; ``bar`` is updated at ``offset + k``.
    """
    rate = np.empty(grid.n_steps)
    mean_u = np.empty(grid.n_steps)
    refr = np.empty(grid.n_steps)
    snaps_t, snaps = [], []
    if grid.snap_every:
        snaps_t.append(0.0)
        snaps.append(solver.density().copy())
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
            guard.check(mu, sg, depth=2)
            if grid.snap_every and k % grid.snap_every == 0:
                snaps_t.append(k * grid.dt)
                snaps.append(solver.density().copy())
            bar.update(offset + k)
    except KeyboardInterrupt:
        status, message = STATUS_INTERRUPTED, f"interrupted by the user at t = {k * grid.dt:g} ms"
        logger.warning(message)
    return rate, mean_u, refr, k, status, message, snaps_t, snaps


def simulate(population, drive, t_end, dt=None, *, n=None, seed=None, trials=None, method=None,
             initial="stationary", record_interval=None, snapshot_interval=None, progress=None,
             error_control="auto", rtol=RATE_RTOL, atol=RATE_ATOL, **options) -> Result:
    """Solve the population-density equation of ``population`` under ``drive``.

    With ``n`` neurons the finite population is integrated instead: the
    mesoscopic equations (Schwalger, Deger & Gerstner 2017) draw the number of
    spikes of each step and return one realisation of the activity, at a cost
    independent of ``n`` (escape noise; :mod:`popdens.solvers.mesoscopic`).

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
    n : int, optional
        Number of neurons.  Default None: the infinite population
        (deterministic solvers).  Escape noise only.
    seed : int or numpy.random.Generator, optional
        With ``n``: seed of the random spike counts; the same seed gives
        bit-identical results.
    trials : int, optional
        With ``n``: number of independent realisations (default 1), kept in
        ``Result.trial_rates``; ``Result.rate`` is the first.
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
    error_control : {"auto", "refine", "warn", "off"}, optional
        A-posteriori control of the time-step error.  A companion run at
        twice (or, when that grid cannot hold the drive's jumps or the record
        interval, half) the step estimates the error of the rate in every
        record bin (Richardson: difference / (2^order - 1)).  ``"refine"``
        halves ``dt`` (at most three times) until the estimate is within
        ``max(rtol * rate, atol)`` and returns the first run that meets it;
        ``"warn"`` issues an :class:`~popdens.exceptions.AccuracyWarning`
        (setting ``dt``) instead; ``"auto"`` (default) refines when ``dt`` was
        not given and warns when it was.  The estimate is kept in
        ``diagnostics["error_control"]``.  Costs the companion run (a quarter
        of the run for the refractory density, half for Fokker--Planck) plus
        any refinement.
    rtol, atol : float, optional
        Tolerance of the error control: relative (default 1e-3) and absolute
        (Hz, default 0.1) on each recorded rate.
    **options
        Solver options (e.g. ``max_age`` for the refractory-density solver;
        with ``n`` also ``counts`` = "binomial" (default) or "poisson", the
        distribution of the spike count per step, and ``burn_in`` (ms), the
        time run at the initial drive before t = 0 so that a stationary start
        is a sample of the finite population's fluctuations).

    Returns
    -------
    Result
        ``t`` (ms), ``rate`` (Hz), ``mean_u`` (mV), ``refractory_fraction``,
        the drive (mV), optional snapshots, ``status``/``message`` and
        diagnostics.  ``rate[0]`` is the instantaneous rate of the initial
        state; ``rate[k]`` the mean over ``(t[k-1], t[k]]``.  With ``n``:
        ``rate[k]`` is the realised activity (spike count / (n x interval),
        Hz), ``rate[0]`` the expected rate of the initial state, ``n_neurons``
        is ``n`` and ``trial_rates`` holds every realisation (``trial_mean()``,
        ``trial_variance()``, ``spectrum()``).

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
    if error_control not in ERROR_CONTROL:
        raise ValueError(f"`error_control` must be one of {list(ERROR_CONTROL)}, got {error_control!r}")
    if n is not None:
        if error_control not in ("auto", "off"):
            raise ValueError(f"`error_control` = {error_control!r} applies to the deterministic solvers; a finite "
                             "population (`n` given) is a random realisation whose time-step error a companion "
                             "run cannot estimate: use 'auto' or 'off'")
        return _simulate_finite(population, drive, t_end, dt, n, seed, trials, method, initial,
                                record_interval, snapshot_interval, progress, options)
    for name, value in (("seed", seed), ("trials", trials)):
        if value is not None:
            raise ValueError(f"`{name}` = {value!r} applies to a finite population: give the number of "
                             "neurons `n` (the infinite population is deterministic)")
    drive = as_drive(drive)
    cls = resolve_method(population, method)
    rtol = v.positive("rtol", rtol)
    atol = v.positive("atol", atol)
    refine = error_control == "refine" or (error_control == "auto" and dt is None)
    if dt is None:
        dt = getattr(cls, "default_dt", DEFAULT_DT)
    grid = make_grid(t_end, dt, record_interval, snapshot_interval)
    _check_options(cls, options, ("self", "population", "dt"))
    watch = Stopwatch()
    solver, res = _run(population, drive, grid, cls, options, initial, progress)
    if error_control == "off" or res.status != STATUS_OK or not isinstance(initial, str):
        return res
    try:
        res = _control_error(population, drive, grid, cls, options, initial, solver, res, refine, rtol, atol,
                             progress)
    except KeyboardInterrupt:
        res = dataclasses.replace(res, status=STATUS_INTERRUPTED,
                                  message="interrupted by the user during the time-step error check")
        logger.warning(res.message)
    res.diagnostics.update(watch.times())  # every run, the error control's included
    return res


def _companion_grid(grid):
    """The grid of a run at twice the step, recording every bin (``every`` even) or every two bins
    (odd), or None when the steps do not pair up."""
    if grid.n_steps % 2:
        return None
    every = grid.every // 2 if grid.every % 2 == 0 else grid.every
    return TimeGrid(grid.t_end, 2.0 * grid.dt, grid.n_steps // 2, every, 0)


def _halved(grid):
    return TimeGrid(grid.t_end, 0.5 * grid.dt, 2 * grid.n_steps, 2 * grid.every, 2 * grid.snap_every)


def _estimate(fine, coarse, pairs: bool, order: int, rtol: float, atol: float):
    """Error (Hz) of the rates of ``fine`` per bin of ``coarse`` (Richardson: difference / (2^order - 1),
    ``fine``'s bins averaged in pairs when ``pairs``) and the worst ratio to max(rtol rate, atol)."""
    a = np.asarray(fine.rate[1:], dtype=float)
    if pairs:
        a = a[: a.size // 2 * 2].reshape(-1, 2).mean(axis=1)
    b = np.asarray(coarse.rate[1:], dtype=float)
    n = min(a.size, b.size)
    err = np.abs(a[:n] - b[:n]) / (2.0 ** order - 1.0)
    ratio = float(np.max(err / np.maximum(rtol * np.abs(a[:n]), atol))) if n else 0.0
    return (float(np.max(err)) if n else 0.0), ratio


def _control_error(population, drive, grid, cls, options, initial, solver, res, refine, rtol, atol, progress):
    """Time-step error of ``res`` from a companion run; refinement of dt (see :func:`simulate`)."""
    order = solver.order
    pinned = {**options, **solver.resolution_options()}  # the same potential grid / age span

    def run(g, label):
        with warnings.catch_warnings():  # a companion's own accuracy warnings are not the user's
            warnings.simplefilter("ignore", AccuracyWarning)
            out = _run(population, drive, g, cls, pinned, initial, progress, label)[1]
        if out.status == STATUS_INTERRUPTED:  # the user's Ctrl-C or SIGTERM, not a failed companion
            raise KeyboardInterrupt(out.message)
        return out

    jumps = dict(BoundarySamples(drive, grid).jumps)
    sigma_drive = getattr(population.noise, "sigma_drive", None)  # white or coloured noise
    if sigma_drive is not None:
        jumps.update(BoundarySamples(sigma_drive, grid).jumps)
    coarse_grid = _companion_grid(grid)
    tried = [grid.dt]
    if coarse_grid is not None and all(j % 2 == 0 for j in jumps):
        coarse = run(coarse_grid, "error check")
        if coarse.status != STATUS_OK:
            res.diagnostics["error_control"] = {"note": "the companion run failed; no estimate"}
            return res
        est, ratio = _estimate(res, coarse, grid.every % 2 == 1, order, rtol, atol)
        best, last, last_grid = (res, est, ratio), res, grid
        tried.append(coarse_grid.dt)
    else:  # jumps on odd steps: the companion is the finer run
        fine_grid = _halved(grid)
        fine = run(fine_grid, "error check")
        if fine.status != STATUS_OK:
            res.diagnostics["error_control"] = {"note": "the companion run failed; no estimate"}
            return res
        est, ratio = _estimate(fine, res, False, order, rtol, atol)
        tried.append(fine_grid.dt)
        scale = 2.0 ** order  # the given run's error is 2^order times the finer one's
        best = (res, est * scale, ratio * scale)
        if refine and best[2] > 1.0:
            best = (fine, est, ratio)
        last, last_grid = fine, fine_grid
    halvings = 0
    while refine and best[2] > 1.0 and halvings < MAX_HALVINGS:
        halvings += 1
        g = _halved(last_grid)
        new = run(g, f"refining dt to {g.dt:g} ms")
        tried.append(g.dt)
        if new.status != STATUS_OK:
            break
        est, ratio = _estimate(new, last, False, order, rtol, atol)
        best, last, last_grid = (new, est, ratio), new, g
    out, est, ratio = best
    info = {"estimate_hz": est, "ratio_to_tolerance": ratio, "rtol": rtol, "atol_hz": atol, "order": order,
            "dt_ms": float(out.dt), "dt_requested_ms": grid.dt, "steps_run_ms": tried}
    out.diagnostics["error_control"] = info
    if ratio > 1.0:
        k = 2 ** int(math.ceil(math.log2(ratio) / order))
        msg = (f"`dt` = {out.dt:g} ms: the estimated time-step error of the rate, {est:.3g} Hz, exceeds "
               f"max({rtol:g} x rate, {atol:g} Hz) {ratio:.3g} times; use dt = {out.dt / k:.4g} ms or smaller")
        out.diagnostics["accuracy_warnings"] = list(out.diagnostics.get("accuracy_warnings", [])) + [msg]
        warnings.warn(msg, AccuracyWarning, stacklevel=3)
    return out


def _run(population, drive, grid, cls, options, initial, progress, label=None):
    """One run of solver ``cls`` on ``grid``; returns the solver and the Result."""
    solver = cls(population, grid.dt, **options)
    sigma_drive = getattr(population.noise, "sigma_drive", None)  # white or coloured noise
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
    v.check_memory("t_end", grid.t_end, 8.0 * (3 * grid.n_steps + n_snap * (solver.axis.size + 1)),
                   f"recording {grid.n_steps} steps" + (f" and {n_snap} density snapshots" if n_snap else ""))
    guard = _AccuracyGuard(solver)
    guard.check(np.array([mu0]), None if sigma0 is None else np.array([sigma0]), depth=1)
    rate0 = solver.instantaneous_rate(mu0, sigma0)
    meanu0 = solver.mean_potential()
    refr0 = solver.refractory_fraction()

    bar = Progress(grid.n_steps, label or f"{cls.method_name}", progress)
    try:
        rate, mean_u, refr, k, status, message, snaps_t, snaps = _integrate(solver, mu_at, sigma_at, grid,
                                                                            guard, bar)
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
    return solver, Result(
        t=t, rate=r_out, mean_u=mu_o, refractory_fraction=rf_o, drive=drive(t),
        method=cls.method_name, population=population, status=status, message=message,
        dt=grid.dt, n_steps=k,
        snapshot_t=np.asarray(snaps_t) if grid.snap_every else None,
        snapshots=np.asarray(snaps) if grid.snap_every else None,
        axis=solver.axis.copy() if grid.snap_every else None,
        axis_name=cls.axis_name, diagnostics=diagnostics,
    )


def _check_options(cls, options, fixed) -> None:
    allowed = [p for p in inspect.signature(cls.__init__).parameters if p not in fixed]
    unknown = sorted(set(options) - set(allowed))
    if unknown:
        raise ValueError(f"unknown option(s) {unknown} for method {cls.method_name!r}; allowed: {allowed}")


def _simulate_finite(population, drive, t_end, dt, n, seed, trials, method, initial, record_interval,
                     snapshot_interval, progress, options) -> Result:
    """``simulate`` for a population of ``n`` neurons: ``trials`` realisations of the mesoscopic equations."""
    n = v.positive_int("n", n)
    n_trials = 1 if trials is None else v.positive_int("trials", trials)
    drive = as_drive(drive)
    cls = resolve_finite_method(population, method)
    grid = make_grid(t_end, DEFAULT_DT if dt is None else dt, record_interval, snapshot_interval)
    _check_options(cls, options, ("self", "population", "dt", "size"))
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    watch = Stopwatch()
    mu_at = BoundarySamples(drive, grid)
    mu0 = mu_at.start()
    if not np.isfinite(mu0):
        raise ValueError("the drive is not finite at t = 0")
    v.check_memory("trials" if trials is not None else "t_end", trials if trials is not None else t_end,
                   8.0 * (3 * grid.n_steps + n_trials * (grid.n_steps // grid.every + 1)),
                   f"recording {n_trials} trial(s) of {grid.n_steps} steps")
    trial_rates = np.full((n_trials, grid.n_steps // grid.every + 1), np.nan)
    bar = Progress(grid.n_steps * n_trials, f"{cls.method_name} ({n} neurons)", progress)
    status, message = STATUS_OK, "completed"
    first = None
    clipped = 0
    solver = cls(population, grid.dt, n, **options)
    guard = _AccuracyGuard(solver)
    try:
        for trial in range(n_trials):
            seed_kernel_rng(int(rng.integers(0, 2**31 - 1)))
            try:
                if trial == 0:
                    solver.initialize(mu0, None, initial)  # includes the burn-in
                else:
                    solver.new_trial()
            except KeyboardInterrupt:
                if first is None:
                    raise
                status, message = STATUS_INTERRUPTED, f"interrupted by the user before trial {trial + 1}"
                logger.warning(message)
                break
            guard.check(np.array([mu0]), None, depth=1)
            start = (solver.instantaneous_rate(mu0, None), solver.mean_potential(), solver.refractory_fraction())
            rate, mean_u, refr, k, status, message, snaps_t, snaps = _integrate(
                solver, mu_at, None, grid, guard, bar, offset=trial * grid.n_steps)
            t, r_out, mu_o, rf_o = downsample(grid, start[0], rate, start[1], mean_u, start[2], refr, k)
            trial_rates[trial, : r_out.size] = r_out
            clipped += solver.clipped
            if first is None:
                first = (t, r_out, mu_o, rf_o, k, snaps_t, snaps, solver.diagnostics(), solver.axis.copy())
            if status != STATUS_OK:
                if n_trials > 1:
                    message = f"trial {trial + 1} of {n_trials}: {message}"
                trial_rates = trial_rates[: max(trial, 1)]  # completed trials (and always the first)
                break
    finally:
        bar.close()
    t, r_out, mu_o, rf_o, k, snaps_t, snaps, solver_diag, axis = first
    trial_rates = trial_rates[:, : r_out.size]
    diagnostics = {
        **watch.times(),
        "version": __version__,
        "method": cls.method_name,
        "dt_ms": grid.dt,
        **solver_diag,
        "clipped_steps": clipped,
        "trials": int(trial_rates.shape[0]),
        "initial": initial if isinstance(initial, str) else "array",
        "seed": seed if isinstance(seed, (int, np.integer)) or seed is None else "generator",
        "accuracy_warnings": guard.messages,
    }
    return Result(
        t=t, rate=r_out, mean_u=mu_o, refractory_fraction=rf_o, drive=drive(t),
        method=cls.method_name, population=population, status=status, message=message,
        dt=grid.dt, n_steps=k, n_neurons=n,
        snapshot_t=np.asarray(snaps_t) if grid.snap_every else None,
        snapshots=np.asarray(snaps) if grid.snap_every else None,
        axis=axis if grid.snap_every else None,
        axis_name=cls.axis_name, diagnostics=diagnostics,
        trial_rates=trial_rates if trials is not None else None,
    )
