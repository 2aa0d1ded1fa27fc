"""Two-parameter continuation: folds and oscillation onsets followed as curves in a parameter plane.

:func:`boundary_curves` draws the stability boundaries of a circuit's fixed
points in a rectangle of two parameters (paths, :mod:`.parameters`) as curves
rather than a grid.  It seeds curves with the special points of one-parameter
diagrams (:func:`~.continuation.bifurcation_diagram`) along a few horizontal
and vertical lines of the rectangle, and follows each by pseudo-arclength
continuation (:mod:`._tracing`) of its defining system:

* **oscillation onset**: unknowns ``(x, y, omega)``; the characteristic equation
  on the imaginary axis, ``det(I - M(i omega)) = 0`` (real and imaginary parts),
  at the fixed point of ``(x, y)``, which is solved by Newton's method from
  the neighbouring curve point (a warm start);
* **fold**: unknowns ``(A, x, y)``; the fixed-point equations and
  ``det(dF/dA) = 0`` (central differences inside).

Steps are capped at ``1 / resolution`` of the rectangle (scaled coordinates), so
a curve is as fine as a ``resolution x resolution`` map or finer.  Each curve point
carries the direction in ``(x, y)`` of the unstable side (onsets: the gradient
of the crossing root's real part, ``-Re(dD/dp / dD/dlambda)``; folds: the side
where the two extra states exist, from the second derivative along the null
vector) and whether it is a stability boundary (no other root unstable,
checked by the argument principle every ``CHECK_EVERY`` points and at the
ends, and at every point between two checks that disagree).

Units: parameters in their own units, frequencies Hz.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from .. import _validation as v
from ..progress import Progress
from ._tracing import FD_REL, FixedPointEquations, Tracer
from .circuit import Circuit
from .continuation import CHECK_EVERY, _validated_span, bifurcation_diagram
from .linear_stability import characteristic_matrix, count_unstable
from .parameters import as_parameter
from .states import DEFAULT_RATE_RANGE, _default_gain
from .._display import Displayable, dataframe

__all__ = ["BoundaryCurve", "BoundaryCurves", "boundary_curves"]

#: Default resolution: steps of at most 1/50 of the rectangle.
RESOLUTION = 50
#: Seed lines in each direction (evenly spaced, edges included).
SEED_LINES = 4
#: Largest step of the one-parameter diagrams along the seed lines (coarser than a branch drawn for
#: its own sake: they only need to catch the sign changes).
SEED_STEP = 0.05
#: Residual of det(I - M) accepted on an onset curve (det is O(1)).
DET_TOL = 1e-9
#: Residual of the fixed-point equations (relative to max(1 Hz, rate)) and of det(dF/dA) on a fold curve.
RESIDUAL = 1e-9
#: Smallest step (scaled).
MIN_STEP = 1e-7
#: Most points per curve and direction.
MAX_POINTS = 5000
#: A seed within this distance (scaled, in units of 1/resolution) of a traced curve of the same kind
#: (and, for onsets, within 2 % in frequency) lies on that curve.
SAME_CURVE = 0.25
#: Onset curves end where the frequency falls below this (Hz): the pair has become real.
MIN_FREQUENCY = 0.5


@dataclass(frozen=True, eq=False)
class BoundaryCurve:
    """A fold or oscillation-onset curve in a parameter plane.

    Attributes
    ----------
    kind : str
        ``"fold"`` or ``"onset"``.
    x, y : ndarray, shape (m,)
        Parameter values along the curve.
    frequency : ndarray, shape (m,)
        Oscillation frequency at onset (Hz; 0 on folds).
    rates : ndarray, shape (m, n)
        Rates (Hz) of the fixed point at each curve point.
    boundary : ndarray of bool, shape (m,)
        True where crossing the curve changes the stability of the state: every other root is
        stable (onsets), or one of the two states meeting there is stable (folds).
    normal : ndarray, shape (m, 2)
        Unit vector in scaled ``(x / x-span, y / y-span)`` pointing to the unstable side (onsets:
        where the crossing pair grows; folds: where the two extra states exist).
    closed : bool
    """

    kind: str
    x: np.ndarray
    y: np.ndarray
    frequency: np.ndarray
    rates: np.ndarray
    boundary: np.ndarray
    normal: np.ndarray
    closed: bool = False

    def __len__(self):
        return int(self.x.size)


@dataclass(frozen=True, eq=False)
class BoundaryCurves(Displayable):
    """Fold and onset curves of a circuit in a rectangle of two parameters.

    Attributes
    ----------
    names : tuple of str
    x_parameter, y_parameter : str
    x_label, y_label : str
    x_span, y_span : (float, float)
    curves : list of BoundaryCurve
    complete : bool
        False when interrupted.
    """

    names: tuple
    x_parameter: str
    y_parameter: str
    x_label: str
    y_label: str
    x_span: tuple
    y_span: tuple
    curves: list = field(default_factory=list)
    complete: bool = True

    def _card(self):
        rows = [(self.x_label, f"{self.x_span[0]:g} to {self.x_span[1]:g}"),
                (self.y_label, f"{self.y_span[0]:g} to {self.y_span[1]:g}")]
        for c in self.curves:
            rows.append((f"{c.kind} curve", f"{len(c)} points"))
        return "BoundaryCurves", rows, None if self.complete else "incomplete (interrupted)"

    def to_dataframe(self):
        """The curve points (as ``columns()``, the CSV table) as a pandas DataFrame."""
        return dataframe(self.columns())

    def columns(self) -> dict:
        """Curve points as table columns (for CSV)."""
        cols = {"curve": [], "kind": [], "x": [], "y": [], "frequency_Hz": [], "boundary": []}
        for k in range(len(self.names)):
            cols[f"rate_Hz_{self.names[k]}"] = []
        for i, c in enumerate(self.curves):
            cols["curve"] += [i] * len(c)
            cols["kind"] += [c.kind] * len(c)
            cols["x"] += list(c.x)
            cols["y"] += list(c.y)
            cols["frequency_Hz"] += list(c.frequency)
            cols["boundary"] += [float(b) for b in c.boundary]
            for k, nm in enumerate(self.names):
                cols[f"rate_Hz_{nm}"] += list(c.rates[:, k])
        return cols

    def plot(self, ax=None):
        """The curves: stability boundaries thick, other crossings thin and dashed, onset
        frequencies written along the curves.  Returns ``(fig, ax)``."""
        from ..plotting import plot_boundary_curves

        return plot_boundary_curves(self, ax)

    def __repr__(self):
        kinds = ", ".join(f"{c.kind} ({len(c)} points)" for c in self.curves) or "no curves"
        return f"<BoundaryCurves over {self.x_parameter} x {self.y_parameter}: {kinds}>"


class _Plane:
    """Equations of the curves in the plane of two parameters."""

    def __init__(self, circuit, xp, yp, x_span, y_span, gain, transfer, opts, resolution, rate_range):
        self.eq = FixedPointEquations(circuit, [xp, yp], gain)
        self.n = circuit.n
        self.x_span, self.y_span = x_span, y_span
        self.width = np.array([x_span[1] - x_span[0], y_span[1] - y_span[0]])
        self.transfer = transfer
        self.opts = opts
        self.max_frequency = float(opts.get("max_frequency", 500.0))
        self.max_growth = float(opts.get("max_growth", 200.0))
        self.w_scale = 2 * math.pi * self.max_frequency * 1e-3
        self.resolution = resolution
        self.rate_range = rate_range
        self.rate_scale = 1.0

    def det(self, a, p, lam):
        c = self.eq.circuit_at(p)
        st = self.eq.state(a, p)
        m = characteristic_matrix(c, st, np.atleast_1d(np.asarray(lam, dtype=complex)), self.transfer)
        return np.linalg.det(np.eye(self.n)[None] - m)

    # -- onset curves: u = (A, x, y, omega)
    def onset_fun(self, u):
        n = self.n
        a, p, w = u[:n], u[n:n + 2], u[n + 2]
        f = self.eq.residual(a, p)
        if not np.all(np.isfinite(f)) or w <= 0:
            return np.full(n + 2, np.nan)
        try:
            d = self.det(a, p, 1j * w)[0]
        except ValueError:
            return np.full(n + 2, np.nan)
        return np.concatenate([f, [d.real, d.imag]])

    def onset_jac(self, u, g):
        m = u.size
        out = np.empty((self.n + 2, m))
        scale = self.onset_scale()
        for j in range(m):
            h = FD_REL * (max(abs(u[j]), 1e-2) if j < self.n else scale[j])
            q = u.copy()
            q[j] += h
            out[:, j] = (self.onset_fun(q) - g) / h
        return out

    def onset_tol(self, u):
        return np.concatenate([RESIDUAL * np.maximum(1.0, np.abs(u[:self.n])), [DET_TOL, DET_TOL]])

    def onset_scale(self):
        return np.concatenate([np.full(self.n, self.rate_scale), self.width, [self.w_scale]])

    # -- fold curves: u = (A, x, y)
    def fold_fun(self, u):
        a, p = u[:self.n], u[self.n:]
        f = self.eq.residual(a, p)
        if not np.all(np.isfinite(f)):
            return np.full(self.n + 1, np.nan)
        ja = self._jac_central(a, p)
        return np.concatenate([f, [np.linalg.det(ja)]])

    def _jac_central(self, a, p):
        h = 1e-4 * np.maximum(np.abs(a), 1.0)
        out = np.empty((self.n, self.n))
        for k in range(self.n):
            e1, e2 = a.copy(), a.copy()
            e1[k] += h[k]
            e2[k] -= h[k]
            out[:, k] = (self.eq.residual(e1, p) - self.eq.residual(e2, p)) / (2 * h[k])
        return out

    def fold_jac(self, u, g):
        m = self.n + 2
        out = np.empty((self.n + 1, m))
        scale = self.fold_scale()
        for j in range(m):
            h = FD_REL * max(abs(u[j]), scale[j]) if j < self.n else FD_REL * scale[j]
            q = u.copy()
            q[j] += h
            out[:, j] = (self.fold_fun(q) - g) / h
        return out

    def fold_tol(self, u):
        return np.concatenate([RESIDUAL * np.maximum(1.0, np.abs(u[:self.n])), [1e-7]])

    def fold_scale(self):
        return np.concatenate([np.full(self.n, self.rate_scale), self.width])

    # -- side and label
    def onset_normal(self, jac):
        n = self.n
        f_a, f_p = jac[:n, :n], jac[:n, n:n + 2]
        d_rows = jac[n:n + 2]
        d_a = d_rows[0, :n] + 1j * d_rows[1, :n]
        # total derivative along the parameters, the fixed point following: dA/dp = -F_A^-1 F_p
        try:
            da_dp = -np.linalg.solve(f_a, f_p)
        except np.linalg.LinAlgError:
            return np.full(2, np.nan)
        d_p = (d_rows[0, n:n + 2] + 1j * d_rows[1, n:n + 2]) + d_a @ da_dp
        d_lam = complex(jac[n, n + 2], jac[n + 1, n + 2]) / 1j  # dD/dlambda = dD/d(omega) / i
        grad = np.array([(-d_p[0] / d_lam).real, (-d_p[1] / d_lam).real]) * self.width
        nrm = np.linalg.norm(grad)
        return grad / nrm if nrm > 0 else grad

    def fold_normal(self, u, jac):
        a, p = u[:self.n], u[self.n:]
        ja = self._jac_central(a, p)
        uu, _, vt = np.linalg.svd(ja)
        right, left = vt[-1], uu[:, -1]
        h = 1e-3 * max(1.0, float(np.max(np.abs(a))))
        f0 = self.eq.residual(a, p)
        fvv = (self.eq.residual(a + h * right, p) + self.eq.residual(a - h * right, p) - 2 * f0) / h ** 2
        f_p = jac[:self.n, self.n:] * self.width  # dF/d(scaled x, y)
        grad = -float(left @ fvv) * (left @ f_p)
        nrm = np.linalg.norm(grad)
        return grad / nrm if nrm > 0 else grad

    def others_stable(self, a, p, lam) -> bool | None:
        """No unstable root besides ``lam`` (1/ms, on the imaginary axis); None if the count failed."""
        c = self.eq.circuit_at(p)
        st = self.eq.state(a, p)
        n = count_unstable(c, st, [complex(lam)], transfer=self.transfer, max_frequency=self.max_frequency,
                           max_growth=self.max_growth)
        if n < 0:
            return None
        own = (1 if abs(complex(lam).imag) == 0.0 else 2) if complex(lam).real > 0 else 0
        return n - own == 0

    # -- following a curve
    def follow(self, kind, u0, direction):
        """Points and Jacobians along the curve from ``u0``; ``direction``: a scaled direction, or None
        for the one of increasing ``y``.  Returns ``(points, jacobians, closed, first tangent)``."""
        if kind == "onset":
            scale = self.onset_scale()
            fun, jac, tol = self.onset_fun, self.onset_jac, self.onset_tol
        else:
            scale = self.fold_scale()
            fun, jac, tol = self.fold_fun, self.fold_jac, self.fold_tol
        off = self.n  # (x, y) follow the rates in both systems
        if direction is None:
            direction = np.zeros(scale.size)
            direction[off + 1] = 1.0
            direction[off] = 0.5
        step = 1.0 / self.resolution
        tr = Tracer(fun, jac, u0, np.asarray(direction) * scale, scale, 0.25 * step, step, MIN_STEP, tol)
        first = tr.t.copy()
        pts, jacs = [tr.u.copy()], [tr.last_jac]
        closed = False
        while len(pts) < MAX_POINTS:
            u_prev = tr.u.copy()
            if not tr.step():
                break
            u = tr.u
            xy = u[off:off + 2]
            lo = np.array([self.x_span[0], self.y_span[0]])
            hi = np.array([self.x_span[1], self.y_span[1]])
            if np.any(xy < lo) or np.any(xy > hi):
                edge = self._to_edge(kind, tr, u_prev, u, lo, hi)
                if edge is not None:
                    pts.append(edge[0])
                    jacs.append(edge[1])
                break
            if kind == "onset" and u[off + 2] * 1e3 / (2 * math.pi) < MIN_FREQUENCY:
                break
            a = u[:self.n]
            if np.any(a < self.rate_range[0] - 1e-9) or np.any(a > self.rate_range[1]):
                break
            pts.append(u.copy())
            jacs.append(tr.last_jac)
            if len(pts) > 10 and np.linalg.norm((u - u0) / scale) < 0.75 * tr.last_step:
                closed = True
                break
        return pts, jacs, closed, first

    def _to_edge(self, kind, tr, u_prev, u, lo, hi):
        """The curve point on the edge of the rectangle between ``u_prev`` (inside) and ``u``."""
        off = self.n
        xy0, xy1 = u_prev[off:off + 2], u[off:off + 2]
        fr = []
        for j in range(2):
            for bound in (lo[j], hi[j]):
                if (xy1[j] - bound) * (xy0[j] - bound) < 0:
                    fr.append(((bound - xy0[j]) / (xy1[j] - xy0[j]), j, bound))
        if not fr:
            return None
        w, j, bound = min(fr)
        guess = u_prev + w * (u - u_prev)
        guess[off + j] = bound
        axis = np.zeros(u.size)
        axis[off + j] = 1.0
        res = tr.correct(guess, axis, 0.0)
        if res is None:
            return None
        ue = res[0]
        return ue, tr.jac(ue, tr.fun(ue))


def boundary_curves(circuit: Circuit, x_parameter, y_parameter, x_span, y_span, *,
                    rate_range=DEFAULT_RATE_RANGE, gain: Callable | None = None, transfer: Callable | None = None,
                    resolution: int = RESOLUTION, seed_lines: int = SEED_LINES, progress: bool | None = None,
                    **stability_options) -> BoundaryCurves:
    """Fold and oscillation-onset curves of the fixed points of ``circuit`` in a parameter rectangle.

    Parameters
    ----------
    circuit : Circuit
        The base circuit (external input taken at t = 0).
    x_parameter, y_parameter : str or CircuitParameter
        Paths of the two parameters (:mod:`popdens.network.parameters`).
    x_span, y_span : (float, float)
        The rectangle, in the parameters' units.
    rate_range : (float, float)
        Rate box (Hz), as in :func:`bifurcation_diagram`.
    gain : callable, optional
        As in :func:`bifurcation_diagram`.
    transfer : callable, optional
        As in :func:`bifurcation_diagram`.
    resolution : int
        Steps along a curve are at most ``1/resolution`` of the rectangle (as fine as a
        ``resolution x resolution`` stability map, or finer).
    seed_lines : int
        One-parameter diagrams along this many horizontal and as many vertical lines (evenly
        spaced, edges included) seed the curves.
    progress : bool, optional
        Progress line on stderr.
    **stability_options
        Passed to :func:`stability` (``max_frequency``, ``max_growth``...).

    Returns
    -------
    BoundaryCurves
        The fold and onset curves found in the rectangle.

    Notes
    -----
    A curve that crosses none of the seed lines (a closed curve inside one cell of the seed
    grid) is missed: raise ``seed_lines`` when in doubt.  Onset curves end where their frequency
    falls to 0 (the pair becomes real, e.g. where they meet a fold curve).
    """
    if not isinstance(circuit, Circuit):
        raise ValueError(f"`circuit` must be a popdens.network.Circuit, got {circuit!r}")
    xp, yp = as_parameter(x_parameter), as_parameter(y_parameter)
    xs, ys = _validated_span(x_span), _validated_span(y_span)
    xp.apply(yp.apply(circuit, ys[0]), xs[0])
    resolution = v.positive_int("resolution", resolution)
    lines = v.positive_int("seed_lines", seed_lines)
    gain = _default_gain() if gain is None else gain
    plane = _Plane(circuit, xp, yp, xs, ys, gain, transfer, stability_options, resolution,
                   (float(rate_range[0]), float(rate_range[1])))
    curves: list[BoundaryCurve] = []
    complete = True
    bar = Progress(2 * lines, "boundary curves", progress)
    done = 0
    try:
        for along, fixed, fixed_span, span in ((xp, yp, ys, xs), (yp, xp, xs, ys)):
            for val in np.linspace(fixed_span[0], fixed_span[1], lines) if lines > 1 else [np.mean(fixed_span)]:
                d = bifurcation_diagram(fixed.apply(circuit, float(val)), along, span, rate_range=rate_range,
                                        gain=gain, transfer=transfer, seeds=2, max_step=SEED_STEP, progress=False,
                                        **stability_options)
                for sp in d.points:
                    p = np.array([sp.parameter, val]) if along is xp else np.array([val, sp.parameter])
                    plane.rate_scale = max(plane.rate_scale, float(np.max(sp.rates)))
                    if _on_a_curve(curves, sp.kind, p, sp.frequency, plane.width, resolution):
                        continue
                    curve = _trace_curve(plane, sp.kind, p, sp.rates, sp.frequency)
                    if curve is not None:
                        curves.append(curve)
                done += 1
                bar.update(done)
    except KeyboardInterrupt:
        complete = False
    finally:
        bar.close()
    return BoundaryCurves(circuit.names, xp.path, yp.path, xp.label, yp.label, xs, ys, curves, complete)


def _on_a_curve(curves, kind, p, freq, width, resolution) -> bool:
    for c in curves:
        if c.kind != kind or len(c) == 0:
            continue
        pts = np.column_stack([c.x, c.y]) / width
        q = p / width
        if len(c) == 1:
            dist = np.linalg.norm(pts - q, axis=1)
            seg_t = np.zeros(1)
            idx = np.zeros(1, dtype=int)
        else:
            a, b = pts[:-1], pts[1:]
            ab = b - a
            t = np.clip(np.sum((q - a) * ab, axis=1) / np.maximum(np.sum(ab * ab, axis=1), 1e-300), 0.0, 1.0)
            dist = np.linalg.norm(a + t[:, None] * ab - q, axis=1)
            seg_t, idx = t, np.arange(len(c) - 1)
        k = int(np.argmin(dist))
        if dist[k] > SAME_CURVE / resolution:
            continue
        if kind == "onset":
            i = idx[k]
            f_c = c.frequency[i] + seg_t[k] * (c.frequency[min(i + 1, len(c) - 1)] - c.frequency[i])
            if abs(f_c - freq) > 0.02 * max(freq, 1.0):
                continue
        return True
    return False


def _trace_curve(plane: _Plane, kind, p, rates, freq):
    """Follow the curve through the special point ``p`` in both directions and label its points."""
    if kind == "onset":
        u0 = np.concatenate([rates, p, [2 * math.pi * freq * 1e-3]])
    else:
        u0 = np.concatenate([rates, p])
    fw, fw_j, closed, first = plane.follow(kind, u0, None)
    if closed:
        pts, jacs = fw, fw_j
    else:
        bw, bw_j, _, _ = plane.follow(kind, u0, -first)
        pts, jacs = bw[:0:-1] + fw, bw_j[:0:-1] + fw_j
    if not pts:
        return None
    n = plane.n
    m = len(pts)
    xy = np.array([u[n:n + 2] for u in pts])
    rates_all = np.array([u[:n] for u in pts])
    if kind == "onset":
        freqs = np.array([u[n + 2] * 1e3 / (2 * math.pi) for u in pts])
        normals = np.array([plane.onset_normal(j) for j in jacs])
        lams = [1j * u[n + 2] for u in pts]
    else:
        freqs = np.zeros(m)
        normals = np.array([plane.fold_normal(u, j) for u, j in zip(pts, jacs)])
        lams = [0j] * m
    label = [None] * m

    def check(i):
        if label[i] is None:
            a = rates_all[i]
            label[i] = (plane.others_stable(a, xy[i], lams[i]) if np.all(np.isfinite(a)) else None)
        return label[i]

    checks = sorted(set(list(range(0, m, CHECK_EVERY)) + [m - 1]))
    for i in checks:
        check(i)
    for i0, i1 in zip(checks[:-1], checks[1:]):
        if label[i0] != label[i1]:
            for i in range(i0 + 1, i1):
                check(i)
        else:
            for i in range(i0 + 1, i1):
                label[i] = label[i0]
    boundary = np.array([bool(b) for b in label])
    return BoundaryCurve(kind, xy[:, 0], xy[:, 1], freqs, rates_all, boundary, normals, closed)
