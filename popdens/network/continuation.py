"""One-parameter continuation of the fixed points of a circuit: branches, their stability, folds
and oscillation onsets.

:func:`bifurcation_diagram` follows every branch of stationary states
``A = Phi(A; p)`` (module :mod:`.states`) through a parameter ``p`` named by a
path (:mod:`.parameters`), by pseudo-arclength continuation (:mod:`._tracing`),
so branches are followed round folds.  Branches are started from the
fixed points that :func:`fixed_points` finds at ``seeds`` evenly spaced
parameter values (each new one continued in both directions), so every
branch a scan over the parameter would reveal is found.

Along each branch the roots of the characteristic equation (:mod:`.linear_stability`)
are followed from point to point by the secant iteration started at the previous
roots (a warm start costing a few transfer-function evaluations), and the
full search with its argument-principle count runs every ``CHECK_EVERY``
points and at the ends; where the count disagrees with the followed roots,
the full search runs there and its roots are followed back.  Special points between two
branch points are then located precisely:

* **fold** (saddle-node): the parameter component of the tangent changes sign.
  With the rate ``A_k`` that moves fastest there held fixed, the remaining
  equations give ``p(A_k)``, whose extremum (Brent's bounded minimisation)
  is the fold; ``p`` is then accurate to the square of the tolerance in ``A_k``.
* **oscillation onset** (Hopf: a complex pair crossing the imaginary axis):
  the real part of the crossing root, followed along the branch, is brought
  to zero by Brent's method in the arclength; the frequency is its imaginary
  part over 2 pi.

Units: rates Hz, frequencies Hz, growth rates 1/s, the parameter in its own unit
(:attr:`CircuitParameter.unit`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
from scipy.optimize import brentq, minimize_scalar

from .. import _validation as v
from ..exceptions import ConvergenceError
from ..progress import Progress
from ._tracing import FixedPointEquations, Tracer
from .circuit import Circuit
from .linear_stability import MARGINAL_GROWTH, count_unstable, roots_near, stability as full_stability
from .parameters import as_parameter
from .states import DEFAULT_RATE_RANGE, _default_gain, fixed_points
from .._display import Displayable, dataframe

__all__ = ["Branch", "BifurcationDiagram", "SpecialPoint", "bifurcation_diagram"]

#: Parameter values (evenly spaced over the span, ends included) where branches are seeded.
SEEDS = 5
#: Largest, first and smallest continuation step (arclength in rates / rate scale and parameter / span).
MAX_STEP = 0.02
FIRST_STEP = 0.004
MIN_STEP = 1e-9
#: Most points per branch and direction (a guard; a branch across the span needs ~50-200).
MAX_POINTS = 2000
#: Residual accepted on the branch (relative to max(1 Hz, rate)).
RESIDUAL = 1e-9
#: The full root search with the argument-principle count runs every this many branch points.
CHECK_EVERY = 8
#: Roots followed from point to point (leading first).
TRACKED = 8
#: Roots with a smaller imaginary part (1/ms; 0.5 Hz) count as real.
IM_MIN = 2 * math.pi * 0.5e-3
#: Two states closer than this (relative, plus 1e-6 Hz) are the same.
SAME_STATE = 1e-6
#: Brent tolerance of special points, in scaled arclength (onsets) or relative rate (folds).
LOCATE_TOL = 1e-12


@dataclass(frozen=True, eq=False)
class Branch:
    """A branch of fixed points, ordered along the curve.

    Attributes
    ----------
    parameter : ndarray, shape (m,)
        Parameter values.
    rates : ndarray, shape (m, n)
        Rates (Hz) of the cohorts.
    stable : ndarray of bool, shape (m,)
        Linearly stable (False where not analysed and at special points).
    growth_rate : ndarray, shape (m,)
        Real part of the leading root (1/s; NaN where not analysed).
    frequency : ndarray, shape (m,)
        Its imaginary part / 2 pi (Hz).
    n_unstable : ndarray of int, shape (m,)
        Unstable roots (conjugates counted; -1: unknown).
    certified : ndarray of bool, shape (m,)
        The full search with the argument-principle count ran here.
    special : ndarray of object, shape (m,)
        ``"fold"``, ``"onset"`` or ``""``.
    closed : bool
        The branch is a closed loop (an isola).
    """

    parameter: np.ndarray
    rates: np.ndarray
    stable: np.ndarray
    growth_rate: np.ndarray
    frequency: np.ndarray
    n_unstable: np.ndarray
    certified: np.ndarray
    special: np.ndarray
    closed: bool = False

    def __len__(self):
        return int(self.parameter.size)


@dataclass(frozen=True, eq=False)
class SpecialPoint:
    """A fold or an oscillation onset on a branch.

    Attributes
    ----------
    kind : str
        ``"fold"`` (saddle-node) or ``"onset"`` (a complex pair crossing the imaginary axis).
    parameter : float
    rates : ndarray
        Rates (Hz) at the point.
    frequency : float
        Oscillation frequency at the onset (Hz); 0 at a fold.
    branch : int
        Index of the branch in :attr:`BifurcationDiagram.branches`.
    n_unstable : tuple of int
        Unstable roots just before and just after the point along the branch (-1: unknown).
    located : bool
        False when the precise location failed and the point is interpolated between branch points.
    """

    kind: str
    parameter: float
    rates: np.ndarray
    frequency: float
    branch: int
    n_unstable: tuple = (-1, -1)
    located: bool = True

    @property
    def loses_stability(self) -> bool:
        """The state is stable on one side and unstable on the other (a stability boundary)."""
        return 0 in self.n_unstable and max(self.n_unstable) > 0

    def __repr__(self):
        rates = ", ".join(f"{r:.6g}" for r in self.rates)
        extra = f", {self.frequency:.4g} Hz" if self.kind == "onset" else ""
        return f"<SpecialPoint {self.kind} at {self.parameter:.10g}{extra}; rates [{rates}] Hz>"


@dataclass(frozen=True, eq=False)
class BifurcationDiagram(Displayable):
    """Branches of fixed points over one parameter, with their folds and oscillation onsets.

    Attributes
    ----------
    names : tuple of str
        Cohort names (columns of the rates).
    parameter : str
        Path of the parameter.
    label : str
        Axis label with the unit.
    span : (float, float)
    branches : list of Branch
    points : list of SpecialPoint
        Ordered by branch, then along it.
    analysed : bool
        Whether stability was computed along the branches.
    complete : bool
        False when interrupted (branches traced so far are kept).
    """

    names: tuple
    parameter: str
    label: str
    span: tuple
    branches: list
    points: list = field(default_factory=list)
    analysed: bool = True
    complete: bool = True

    def folds(self) -> list:
        return [p for p in self.points if p.kind == "fold"]

    def onsets(self) -> list:
        return [p for p in self.points if p.kind == "onset"]

    def columns(self) -> dict:
        """The branch points as table columns (for CSV)."""
        cols = {"branch": [], "parameter": [], "special": []}
        for k in range(len(self.names)):
            cols[f"rate_Hz_{self.names[k]}"] = []
        cols.update({"stable": [], "growth_rate_per_s": [], "frequency_Hz": [], "n_unstable": []})
        for i, b in enumerate(self.branches):
            cols["branch"] += [i] * len(b)
            cols["parameter"] += list(b.parameter)
            cols["special"] += list(b.special)
            for k, nm in enumerate(self.names):
                cols[f"rate_Hz_{nm}"] += list(b.rates[:, k])
            cols["stable"] += [float(s) for s in b.stable]
            cols["growth_rate_per_s"] += list(b.growth_rate)
            cols["frequency_Hz"] += list(b.frequency)
            cols["n_unstable"] += list(b.n_unstable)
        return cols

    def plot(self, ax=None):
        """Rates against the parameter (one panel per cohort): stable solid, unstable dashed, folds
        and onsets marked (onsets with their frequency).  Returns ``(fig, axes)``."""
        from ..plotting import plot_bifurcation_diagram

        return plot_bifurcation_diagram(self, ax)

    def _card(self):
        rows = [("parameter", f"{self.label}: {self.span[0]:g} to {self.span[1]:g}"),
                ("branches", f"{len(self.branches)} ({sum(len(b) for b in self.branches)} points)")]
        for p in self.points[:8]:
            rows.append((p.kind, repr(p).strip("<>")))
        return "BifurcationDiagram", rows, None if self.complete else "incomplete (interrupted)"

    def to_dataframe(self):
        """The branch points (as ``columns()``, the CSV table) as a pandas DataFrame."""
        return dataframe(self.columns())

    def __repr__(self):
        kinds = ", ".join(repr(p) for p in self.points) or "no special points"
        return (f"<BifurcationDiagram over {self.parameter} in [{self.span[0]:g}, {self.span[1]:g}]: "
                f"{len(self.branches)} branches; {kinds}>")


# ---------------------------------------------------------------------------------------- tracing
@dataclass
class _Segment:
    """How to reach points between two consecutive branch points: from ``base`` along ``tangent``
    (scaled) by an arclength ``s`` in ``[0, length]``; ``forward``: the base is the earlier point."""

    base: np.ndarray
    tangent: np.ndarray
    length: float
    forward: bool


class _Continuation:
    def __init__(self, circuit, param, span, rate_range, gain, transfer, analyse, max_step, max_points,
                 stability_options):
        self.eq = FixedPointEquations(circuit, [param], gain)
        self.n = circuit.n
        self.lo, self.hi = span
        self.rate_lo, self.rate_hi = rate_range
        self.transfer = transfer
        self.analyse = analyse
        self.max_step = max_step
        self.max_points = max_points
        self.opts = stability_options
        self.max_frequency = float(stability_options.get("max_frequency", 500.0))
        self.max_growth = float(stability_options.get("max_growth", 200.0))
        self.rate_scale = 1.0

    # -- equations in u = (A, p)
    def fun(self, u):
        return self.eq.residual(u[:self.n], u[self.n:])

    def jac(self, u, g):
        a, p = u[:self.n], u[self.n:]
        return np.hstack([self.eq.jac_rates(a, p, g),
                          self.eq.jac_params(a, p, g, scale=[self.hi - self.lo])])

    def tol(self, u):
        return RESIDUAL * np.maximum(1.0, np.abs(u[:self.n]))

    def scale(self):
        return np.concatenate([np.full(self.n, self.rate_scale), [self.hi - self.lo]])

    def tracer(self, u, direction):
        """A tracer at ``u`` heading along ``direction`` (+1/-1: increasing/decreasing parameter, or an
        unscaled direction vector)."""
        if np.ndim(direction) == 0:
            t0 = np.zeros(self.n + 1)
            t0[-1] = direction
        else:
            t0 = np.asarray(direction, dtype=float)
        return Tracer(self.fun, self.jac, u, t0, self.scale(), FIRST_STEP, self.max_step, MIN_STEP, self.tol)

    def point_on(self, seg: _Segment, s: float):
        """Branch point at arclength ``s`` from the segment's base."""
        res = self.corrector.correct(seg.base, seg.tangent, s)
        return None if res is None else res[0]

    # -- one direction
    def _trace_one(self, u0, direction):
        tr = self.tracer(u0, direction)
        pts, tans, segs = [tr.u.copy()], [tr.t.copy()], []
        closed = False
        while len(pts) < self.max_points:
            u_prev, t_prev = tr.u.copy(), tr.t.copy()
            if not tr.step():
                break
            u = tr.u
            p = u[-1]
            if p < self.lo or p > self.hi:
                bound = self.lo if p < self.lo else self.hi
                w = (bound - u_prev[-1]) / (p - u_prev[-1])
                res = self.eq.solve(u_prev[:self.n] + w * (u[:self.n] - u_prev[:self.n]), [bound])
                if res is not None and self._inside(res[0]):
                    ub = np.concatenate([res[0], [bound]])
                    s = float(np.dot(t_prev, (ub - u_prev) / self.scale()))
                    pts.append(ub)
                    tans.append(tr.tangent_at(ub, t_prev))
                    segs.append(_Segment(u_prev, t_prev, s, True))
                break
            if not self._inside(u[:self.n]):
                break
            pts.append(u.copy())
            tans.append(tr.t.copy())
            segs.append(_Segment(u_prev, t_prev, tr.last_step, True))
            if len(pts) > 10 and np.linalg.norm((u - u0) / self.scale()) < 0.75 * tr.last_step:
                closed = True  # back at the start: a closed branch
                break
        return pts, tans, segs, closed

    def _inside(self, a):
        return bool(np.all(a >= self.rate_lo - 1e-9) and np.all(a <= self.rate_hi))

    def trace(self, a0, p0):
        """Both directions from the seed, joined into one branch ordered along the curve."""
        u0 = np.concatenate([a0, [p0]])
        fw, fw_t, fw_s, closed = self._trace_one(u0, +1.0)
        if closed:
            return fw, fw_t, fw_s, True
        bw, bw_t, bw_s, _ = self._trace_one(u0, -fw_t[0] * self.scale())
        # backward part reversed: its tangents flipped, its segments based at the later point
        pts = bw[:0:-1] + fw
        tans = [-t for t in bw_t[:0:-1]] + fw_t
        segs = [_Segment(s.base, s.tangent, s.length, False) for s in bw_s[::-1]] + fw_s
        return pts, tans, segs, False

    def on_branch(self, pts, a, p) -> bool:
        """Whether the state (a, p) lies on the branch through ``pts``."""
        ps = np.array([u[-1] for u in pts])
        for i in range(len(pts) - 1):
            lo, hi = sorted((ps[i], ps[i + 1]))
            if not lo - 1e-12 <= p <= hi + 1e-12:
                continue
            w = 0.0 if hi == lo else (p - ps[i]) / (ps[i + 1] - ps[i])
            guess = pts[i][:self.n] + w * (pts[i + 1][:self.n] - pts[i][:self.n])
            res = self.eq.solve(guess, [p])
            if res is not None and np.all(np.abs(res[0] - a) <= SAME_STATE * np.maximum(1.0, np.abs(a))):
                return True
        return False

    # -- stability along a branch
    def _circuit_state(self, u):
        return self.eq.circuit_at(u[self.n:]), self.eq.state(u[:self.n], u[self.n:])

    def search(self, u):
        """Full root search with its count: ``(roots, n_unstable)``; no roots found in the search
        region (a strongly damped state): an empty root list and the count alone."""
        c, st = self._circuit_state(u)
        try:
            res = full_stability(c, st, transfer=self.transfer, **self.opts)
            return res.roots, res.n_unstable
        except ConvergenceError:
            return np.zeros(0, dtype=complex), self.count(u, ())

    def count(self, u, roots):
        c, st = self._circuit_state(u)
        return count_unstable(c, st, roots, transfer=self.transfer, max_frequency=self.max_frequency,
                              max_growth=self.max_growth)

    def track(self, u, guesses):
        """Roots followed from ``guesses`` (None if there is nothing to follow or all were lost)."""
        if guesses is None or len(guesses) == 0:
            return None
        c, st = self._circuit_state(u)
        r = roots_near(c, st, guesses[:TRACKED], transfer=self.transfer, max_frequency=self.max_frequency)
        return r if r.size else None

    def in_box(self, roots) -> int:
        """Unstable roots among ``roots`` inside the counting box (conjugates counted)."""
        w_max = 2 * math.pi * self.max_frequency * 1e-3
        return int(sum(1 if r.imag == 0.0 else 2 for r in roots
                       if 0.0 < r.real <= self.max_growth * 1e-3 and r.imag <= w_max))

    def stability_along(self, pts):
        """Roots at every branch point: followed from point to point, certified by the argument
        principle every CHECK_EVERY points and at the end; on a disagreement a full search runs there
        and its roots are followed back through the segment since the last certified point."""
        m = len(pts)
        roots = [None] * m
        nun = np.full(m, -1, dtype=int)
        cert = np.zeros(m, dtype=bool)

        def do_search(i):
            roots[i], nun[i] = self.search(pts[i])
            cert[i] = nun[i] >= 0

        do_search(0)
        last = 0
        for i in range(1, m):
            had = roots[i - 1] is not None and len(roots[i - 1]) > 0
            tracked = self.track(pts[i], roots[i - 1]) if had else None
            if had and tracked is None:  # every followed root was lost
                do_search(i)
                last = i
                continue
            check = i - last >= CHECK_EVERY or i == m - 1
            if not check:
                roots[i] = tracked if tracked is not None else np.zeros(0, dtype=complex)
                nun[i] = self.in_box(tracked) if tracked is not None else nun[i - 1]
                continue
            known = tracked if tracked is not None else np.zeros(0, dtype=complex)
            n_count = self.count(pts[i], known)
            if n_count >= 0 and n_count == self.in_box(known):
                roots[i], nun[i], cert[i] = known, n_count, True
            else:
                # a root appeared or vanished unseen: a full search here, and its roots followed back
                # through the segment (a full search only where they are lost)
                do_search(i)
                for j in range(i - 1, last, -1):
                    back = self.track(pts[j], roots[j + 1]) if len(roots[j + 1]) else None
                    if back is None:
                        do_search(j)
                    else:
                        roots[j], nun[j] = back, self.in_box(back)
            last = i
        return roots, nun, cert

    # -- special points
    def locate_fold(self, u_a, u_b, t_a, t_b):
        """The fold between branch points ``u_a`` and ``u_b`` (tangents ``t_a``, ``t_b``): the extremum of
        the parameter with the fastest-moving rate held fixed (module docstring)."""
        t_mid = 0.5 * (t_a + t_b)
        k = int(np.argmax(np.abs(t_mid[:self.n])))
        sign = 1.0 if t_a[-1] > 0 else -1.0  # p rises then falls: a maximum of p(A_k)
        lo_a, hi_a = sorted((u_a[k], u_b[k]))
        if hi_a <= lo_a:
            return None

        def p_of(x):
            w = (x - u_a[k]) / (u_b[k] - u_a[k])
            guess = u_a + w * (u_b - u_a)
            a0 = guess[:self.n].copy()
            a0[k] = x
            res = self.eq.solve(a0, [guess[-1]], fixed=k, free_param=0)
            return (np.nan, None) if res is None else (float(res[1][0]), res[0])

        def obj(x):
            pv, _ = p_of(x)
            return -sign * pv if np.isfinite(pv) else np.inf

        width = hi_a - lo_a
        opt = minimize_scalar(obj, bounds=(lo_a - 0.05 * width, hi_a + 0.05 * width), method="bounded",
                              options={"xatol": LOCATE_TOL * max(1.0, abs(u_a[k]))})
        pv, a = p_of(opt.x)
        if a is None or not np.isfinite(pv):
            return None
        return np.concatenate([a, [pv]])

    def locate_onset(self, seg, r_from, r_to):
        """Onset between the segment's ends; ``r_from``/``r_to``: the crossing root at the base / far end."""
        cache = {}

        def root_at(s):
            if s in cache:
                return cache[s]
            u = self.point_on(seg, s)
            if u is None:
                cache[s] = (None, None)
                return cache[s]
            guess = r_from + (r_to - r_from) * (s / seg.length)
            r = self.track(u, np.array([guess]))
            if r is None:
                cache[s] = (u, None)
                return cache[s]
            cache[s] = (u, r[np.argmin(np.abs(r - guess))])
            return cache[s]

        def g(s):
            _, r = root_at(s)
            if r is None:
                raise ConvergenceError("lost the crossing root")
            return r.real

        try:
            s = brentq(g, 0.0, seg.length, xtol=LOCATE_TOL, rtol=4 * np.finfo(float).eps)
        except (ValueError, ConvergenceError):
            return None
        u, r = root_at(s)
        # a root that jumped between two roots would give a false sign change: the located root
        # must lie on the imaginary axis
        if r is None or abs(r.real) * 1e3 > MARGINAL_GROWTH:
            return None
        return u, r


def _validated_span(span):
    try:
        lo, hi = (float(span[0]), float(span[1]))
    except (TypeError, IndexError, ValueError):
        raise ValueError(f"`span` must be (low, high), got {span!r}") from None
    v.as_finite_float("span[0]", lo)
    v.as_finite_float("span[1]", hi)
    v.less_than("span[0]", lo, "span[1]", hi)
    return lo, hi


def bifurcation_diagram(circuit: Circuit, parameter, span, *, rate_range=DEFAULT_RATE_RANGE,
                        gain: Callable | None = None, transfer: Callable | None = None, stability: bool = True,
                        seeds: int = SEEDS, max_step: float = MAX_STEP, max_points: int = MAX_POINTS,
                        progress: bool | None = None, **stability_options) -> BifurcationDiagram:
    """Branches of fixed points of ``circuit`` over one parameter, their stability, folds and onsets.

    Parameters
    ----------
    circuit : Circuit
        The base circuit (external input taken at t = 0).
    parameter : str or CircuitParameter
        Path of the parameter (see :mod:`popdens.network.parameters`), e.g.
        ``"cohort.E.drive"``, ``"pathway.I->*.weight"``, ``"inhibition"``.
    span : (float, float)
        Parameter interval, in the parameter's unit.
    rate_range : (float, float)
        Rate box (Hz): seeds are searched there and branches stop when they leave it.
    gain : callable, optional
        See :func:`fixed_points` (default: ``popdens.gain``).
    transfer : callable, optional
        See :func:`characteristic_matrix` (default: ``popdens.transfer``).
    stability : bool
        Analyse the stability along the branches and locate oscillation onsets (default True);
        False: geometry and folds only (no transfer functions needed).
    seeds : int
        Parameter values (evenly spaced, ends included) where :func:`fixed_points` seeds branches.
    max_step : float
        Largest continuation step in scaled arclength (rates over their largest seed value,
        parameter over the span); 0.02 gives at least 50 points across the span.
    max_points : int
        Most points per branch and direction.
    progress : bool, optional
        Progress line on stderr.
    **stability_options
        Passed to :func:`stability` (``max_frequency``, ``min_growth``, ...).

    Returns
    -------
    BifurcationDiagram
        The branches with their stability, folds and oscillation onsets.

    Notes
    -----
    Branches seeded at none of the ``seeds`` parameter values and never reached by continuation
    (an isolated closed branch lying between two seeds) are missed; raise ``seeds`` when in doubt.
    Between two full root searches a root that enters from outside the search box and leaves
    again unseen would be missed, as in a scan.

    Examples
    --------
    >>> import popdens
    >>> from popdens.network import Cohort, Circuit, Pathway
    >>> pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(3.0))
    >>> c = Circuit([Cohort("E", pop, drive=12.0)], [Pathway("E", "E", 0.1, 150, 1.5)])
    >>> d = bifurcation_diagram(c, "cohort.E.drive", (6.0, 18.0), rate_range=(0.0, 400.0), stability=False)
    >>> sorted(round(p.parameter, 4) for p in d.folds())
    [10.0507, 14.5326]
    """
    if not isinstance(circuit, Circuit):
        raise ValueError(f"`circuit` must be a popdens.network.Circuit, got {circuit!r}")
    param = as_parameter(parameter)
    lo, hi = _validated_span(span)
    param.apply(circuit, lo)  # a clear error now for a path that does not fit the circuit
    r_lo = v.non_negative("rate_range[0]", rate_range[0])
    r_hi = v.positive("rate_range[1]", rate_range[1])
    v.less_than("rate_range[0]", r_lo, "rate_range[1]", r_hi)
    n_seeds = v.positive_int("seeds", seeds)
    max_step = v.positive("max_step", max_step)
    max_points = v.positive_int("max_points", max_points)
    gain = _default_gain() if gain is None else gain
    job = _Continuation(circuit, param, (lo, hi), (r_lo, r_hi), gain, transfer, bool(stability), max_step,
                        max_points, stability_options)
    seed_ps = np.linspace(lo, hi, n_seeds) if n_seeds > 1 else np.array([0.5 * (lo + hi)])
    traced = []  # (pts, tans, segs, closed)
    complete = True
    bar = Progress(2 * n_seeds, "continuation", progress)
    try:
        seeds_found = []
        for i, p in enumerate(seed_ps):
            for fp in fixed_points(job.eq.circuit_at([p]), (r_lo, r_hi), gain=gain):
                seeds_found.append((float(p), fp.rates))
            bar.update(i + 1)
        if seeds_found:
            job.rate_scale = max(1.0, max(float(np.max(r)) for _, r in seeds_found))
            job.corrector = job.tracer(np.concatenate([seeds_found[0][1], [seeds_found[0][0]]]), 1.0)
        for i, (p, a) in enumerate(seeds_found):
            if not any(job.on_branch(b[0], a, p) for b in traced):
                traced.append(job.trace(np.asarray(a, dtype=float), p))
            bar.update(n_seeds + int(n_seeds * (i + 1) / len(seeds_found)))
        branches, points = [], []
        for bi, (pts, tans, segs, closed) in enumerate(traced):
            b, sp = _analyse_branch(job, bi, pts, tans, segs, closed)
            branches.append(b)
            points += sp
    except KeyboardInterrupt:
        complete = False
        branches, points = [], []
        for bi, (pts, tans, segs, closed) in enumerate(traced):
            branches.append(_plain_branch(job, pts, closed))
    finally:
        bar.close()
    return BifurcationDiagram(circuit.names, param.path, param.label, (lo, hi), branches, points,
                              analysed=bool(stability), complete=complete)


def _plain_branch(job, pts, closed):
    """A branch without its stability (what an interrupted run keeps)."""
    m = len(pts)
    arr = np.array(pts)
    return Branch(parameter=arr[:, -1], rates=arr[:, :job.n], stable=np.zeros(m, dtype=bool),
                  growth_rate=np.full(m, np.nan), frequency=np.full(m, np.nan), n_unstable=np.full(m, -1),
                  certified=np.zeros(m, dtype=bool),
                  special=np.array([""] * m, dtype=object), closed=closed)


def _analyse_branch(job: _Continuation, bi, pts, tans, segs, closed):
    """Stability along the branch, then folds and onsets between its points, inserted in order."""
    n = job.n
    m = len(pts)
    if job.analyse:
        roots, nun, cert = job.stability_along(pts)
    else:
        roots, nun, cert = [None] * m, np.full(m, -1), np.zeros(m, dtype=bool)
    inserts = []  # (after index i-1, position in segment, u, kind, frequency, root)
    for i in range(1, m):
        seg = segs[i - 1]
        ta, tb = tans[i - 1], tans[i]
        if ta[-1] * tb[-1] < 0:
            u = job.locate_fold(pts[i - 1], pts[i], ta, tb)
            located = u is not None
            if u is None:
                u = pts[i - 1] if abs(ta[-1]) < abs(tb[-1]) else pts[i]
            pos = float(np.dot(seg.tangent, (u - seg.base) / job.scale()))
            inserts.append((i, pos if seg.forward else seg.length - pos, u, "fold", 0.0, located))
        if roots[i - 1] is None or roots[i] is None:
            continue
        if len(roots[i - 1]) == 0 or len(roots[i]) == 0:
            continue
        # the roots stability() accepts: up to 1.5 max_frequency (those above it are not certified)
        w_max = 1.5 * 2 * math.pi * job.max_frequency * 1e-3
        for r in roots[i - 1]:
            if abs(r.imag) < IM_MIN or r.imag > w_max:
                continue
            partner = roots[i][np.argmin(np.abs(roots[i] - r))]
            if abs(partner.imag) < IM_MIN or partner.imag > w_max or (r.real > 0) == (partner.real > 0):
                continue
            r_base, r_far = (r, partner) if seg.forward else (partner, r)
            res = job.locate_onset(seg, r_base, r_far)
            if res is None:
                continue  # not confirmed: the followed roots were matched across two different roots
            u, root = res
            pos = float(np.dot(seg.tangent, (u - seg.base) / job.scale()))
            pos = pos if seg.forward else seg.length - pos
            inserts.append((i, pos, u, "onset", root.imag * 1e3 / (2 * math.pi), True))
    inserts.sort(key=lambda x: (x[0], x[1]))
    out_u, out_roots, out_nun, out_cert, out_kind, specials = [], [], [], [], [], []
    j = 0
    for i in range(m):
        while j < len(inserts) and inserts[j][0] == i:
            _, _, u, kind, freq, located = inserts[j]
            out_u.append(u)
            out_roots.append(np.array([complex(0.0, freq * 2 * math.pi * 1e-3)]))
            out_nun.append(-1)
            out_cert.append(False)
            out_kind.append(kind)
            specials.append(SpecialPoint(kind, float(u[-1]), np.array(u[:n]), float(freq), bi,
                                         (int(nun[i - 1]), int(nun[i])), bool(located)))
            j += 1
        out_u.append(pts[i])
        out_roots.append(roots[i])
        out_nun.append(int(nun[i]))
        out_cert.append(bool(cert[i]))
        out_kind.append("")
    k = len(out_u)
    arr = np.array(out_u)
    growth = np.full(k, np.nan)
    freq = np.full(k, np.nan)
    stable = np.zeros(k, dtype=bool)
    for idx, r in enumerate(out_roots):
        if r is None or not job.analyse:
            continue
        if len(r):
            lead = r[0]
            growth[idx] = 0.0 if out_kind[idx] else lead.real * 1e3
            freq[idx] = lead.imag * 1e3 / (2 * math.pi)
        # as stability(): the leading root found is stable and the count finds no unstable root
        stable[idx] = (not out_kind[idx]) and out_nun[idx] == 0 and (len(r) == 0 or r[0].real < 0)
    branch = Branch(parameter=arr[:, -1], rates=arr[:, :n], stable=stable, growth_rate=growth, frequency=freq,
                    n_unstable=np.array(out_nun), certified=np.array(out_cert),
                    special=np.array(out_kind, dtype=object), closed=closed)
    return branch, specials
