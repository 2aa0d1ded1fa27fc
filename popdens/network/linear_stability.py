"""Linear stability of a stationary state of a circuit.

Around a fixed point, a rate perturbation ``delta A_l exp(lam t)`` changes
the drive of ``k`` by ``tau_m,k J_kl C_kl K_kl(lam) exp(-lam d_kl) delta A_l``
and (white noise) its variance by ``tau_m,k J_kl^2 C_kl K_kl(lam)
exp(-lam d_kl) delta A_l``; the rate answers through the transfer functions
for mean and variance modulation.  Self-consistency gives the characteristic
equation (Brunel & Hakim 1999, Neural Comput. 11:1621; Brunel 2000)

.. math:: \\det\\big(I - M(\\lambda)\\big) = 0,\\qquad
          M_{kl}(\\lambda) = \\sum_{\\text{pathways } l\\to k}
          \\big[\\chi^{\\mu}_k(\\lambda)\\,\\tau_{m,k} J_{kl}
          + \\chi^{\\sigma^2}_k(\\lambda)\\,\\tau_{m,k} J_{kl}^2\\big]\\,C_{kl}\\,
          \\hat K_{kl}(\\lambda)\\,e^{-\\lambda d_{kl}} / 1000,

with ``chi^mu`` in Hz/mV, ``chi^sigma2`` in Hz/mV^2, ``lam`` in 1/ms and the
rates in Hz.  Roots are found by a damped complex secant iteration from a grid of
starting points; the leading root (largest real
part) decides stability and its imaginary part the oscillation frequency.
An independent count of the unstable roots by the argument principle checks
that none was missed.

Units at the boundary: rates Hz, eigenvalues reported as growth rate (1/s)
and frequency (Hz).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

from .. import _validation as v
from .._display import Displayable, fmt
from ..exceptions import ConvergenceError
from ..model.synaptic import ColouredNoise
from ._conductance_input import add_conductance_terms
from ._shot_input import add_shot_terms
from .circuit import HZ_TO_PER_MS, Circuit
from .states import FixedPoint

__all__ = ["Stability", "characteristic_matrix", "count_roots", "count_unstable", "roots_near", "stability"]

#: Secant iteration for characteristic roots: iterations, step / residual tolerance, and the
#: residual |det| (relative to 1 + its value at the start) accepted for a root.
ROOT_MAX_ITER = 60
ROOT_TOL = 1e-10
ROOT_ACCEPT = 1e-8
#: Step halvings tried when an iterate leaves the region where the transfer functions exist.
BACKTRACK = 6
#: Iterations without a smaller residual after which a start is stopped.
STALL = 4
#: Relative step of the numerical derivative of det(I - M).
DERIV_STEP = 1e-6
#: Two roots closer than this (1/ms) are the same.
SAME_ROOT = 1e-6
#: A leading root with |growth rate| at most this (1/s) is marginal: the point lies on a stability
#: boundary (continuation locates boundaries to ~1e-7 1/s; the secant iteration resolves ~1e-7 1/ms).
MARGINAL_GROWTH = 1e-3
#: Roots closer than this (1/ms) to the imaginary axis move the left edge of the counting contour
#: to their right (the phase of det cannot be resolved on a contour through a root).
MARGIN_NEAR = 2e-3
#: Attempts with the counting contour's left edge moved further right.
MARGIN_TRIES = 4
#: When no root is found, the starting grid's lowest growth rate is multiplied by this, up to
#: WIDEN_TRIES times (strongly damped states have their leading root at -1e3 .. -1e4 1/s).
WIDEN_FACTOR = 5.0
WIDEN_TRIES = 3
#: When every start has ``|det(I - M) - 1|`` below this, the coupling is negligible: roots can lie only
#: where the transfer functions are about 1/WEAK_COUPLING times larger, at their own poles (a nearly
#: silent population); moving the starting grid left is then not tried.
WEAK_COUPLING = 1e-6
#: Bisection steps locating, on the real axis, the left edge of the region where the transfer
#: functions exist (escape noise: minus the decay rate of the stationary ISI density's tail).
EDGE_BISECTIONS = 40


def _default_transfer() -> Callable:
    """``popdens.transfer``, with coloured-noise cohorts on the effective boundary shift (white noise for
    cut-off models): the characteristic equation is solved at thousands of complex frequencies, and the
    (potential, current) plane, the default mean response of hard thresholds beyond ``tau_syn = 0.1
    tau_m``, costs ~0.1 s per frequency and has no noise response (contributor guide, "Synaptic
    filtering")."""
    from ..theory.linear_response import transfer  # noqa: PLC0415

    def shifted(population, mu, freqs, modulate):
        if isinstance(population.noise, ColouredNoise):
            return transfer(population, mu, freqs, modulate, method="threshold-integration")
        return transfer(population, mu, freqs, modulate)

    return shifted


def _freq_of(lam_per_ms):
    """Complex frequency (Hz) of exp(lam t): lam = 2 pi i f, lam in 1/ms."""
    return np.asarray(lam_per_ms, dtype=complex) * 1000.0 / (2j * math.pi)


def characteristic_matrix(circuit: Circuit, state: FixedPoint, lam, transfer: Callable | None = None):
    """``M(lam)`` of the characteristic equation ``det(I - M) = 0`` (module docstring).

    Parameters
    ----------
    circuit : Circuit
    state : FixedPoint
    lam : complex or array_like of complex
        Eigenvalue candidates (1/ms).
    transfer : callable, optional
        ``transfer(population, mu, freqs, modulate)`` with complex ``freqs``
        (Hz, ``lam = 2 pi i f``) returning the rate response in Hz/mV for
        ``modulate="mean"`` and Hz/mV^2 (per unit variance ``sigma**2``) for
        ``modulate="noise"``.  Default: ``popdens.transfer``.  Cohorts with conductance
        synapses use its mean response and the stationary rate of ``popdens.gain``
        (:mod:`popdens.network._conductance_input`); cohorts with shot-noise synapses the
        response of their rate to their input spike rates (jump-density theory,
        :mod:`popdens.network._shot_input`).

    Returns
    -------
    ndarray of complex, shape ``lam.shape + (n, n)``
    """
    circuit.require_current("characteristic_matrix", allow=("conductance", "shot"))
    transfer = _default_transfer() if transfer is None else transfer
    lam = np.asarray(lam, dtype=complex)
    f = _freq_of(lam).ravel()
    n = circuit.n
    out = np.zeros((f.size, n, n), dtype=complex)
    chi_m, chi_v, moving = {}, {}, {}
    same = {}  # cohorts with equal population and input share their transfer functions
    conductance = [k for k in range(n) if circuit.synapse_kind(k) == "conductance"]
    if conductance:
        from ..theory.steady_state import gain  # noqa: PLC0415 - scipy-heavy, loaded on first use

        add_conductance_terms(out, circuit, state, lam.ravel(), transfer, gain, conductance)
    shot = [k for k in range(n) if circuit.synapse_kind(k) == "shot"]
    if shot:
        add_shot_terms(out, circuit, state, lam.ravel(), shot)
    for p in circuit.pathways:
        if p.synapse in ("conductance", "shot"):
            continue
        k, l = circuit.index(p.target), circuit.index(p.source)
        a = circuit.cohorts[k]
        if k not in chi_m:
            tau_k = float(state.tau_syn[k]) if state.tau_syn is not None else 0.0
            pop = circuit.population_at(k, state.sigma[k], tau_k)
            try:
                key = (pop, float(state.mu[k]))
                hash(key)
            except TypeError:  # pragma: no cover - unhashable custom parameters
                key = (id(pop), k)
            if key in same:
                chi_m[k], chi_v[k], moving[k] = chi_m[same[key]], chi_v[same[key]], moving[same[key]]
            else:
                same[key] = k
                chi_m[k] = np.asarray(transfer(pop, float(state.mu[k]), f, "mean"), dtype=complex)
                chi_v[k] = (np.asarray(transfer(pop, float(state.mu[k]), f, "noise"), dtype=complex)
                            if a.diffusive else np.zeros(f.size, dtype=complex))
                moving[k] = _moving_boundary(pop, lam.ravel(), chi_m[k], float(state.sigma[k]), tau_k)
        kern = p.kernel_laplace(lam.ravel())
        chi_var = chi_v[k]
        if moving[k] is not None:
            # the noise transfer above moves the boundary as for noise of the cohort's effective time
            # constant; this pathway's variance moves it according to its own tau_syn
            chi_var = chi_var + moving[k] * 2.0 * (1.0 - math.sqrt(p.tau_syn / float(state.tau_syn[k])))
        out[:, k, l] += (chi_m[k] * a.tau_m * p.weight + chi_var * a.tau_m * p.weight ** 2) \
            * p.in_degree * kern * HZ_TO_PER_MS
    return out.reshape(lam.shape + (n, n))


def _moving_boundary(population, lam, chi_mean, sigma: float, tau_eff: float):
    """Rate response (Hz/mV^2) carried by the boundary shift per unit variance, or None.

    The effective threshold and reset sit ``delta = alpha/2 W / (sigma sqrt(tau_m))`` above the true
    ones, ``W = sum_i sigma_i^2 sqrt(tau_i) = sigma^2 sqrt(tau_eff)`` (:mod:`popdens.network.circuit`).
    Moving both by ``d delta`` is, for a linear drift, a mean modulation ``-(1 + lam tau_m) d delta``
    (the change of variable ``u -> u - delta(t)``; :func:`popdens.transfer` uses it for coloured noise).
    The noise transfer of a coloured population assumes ``d delta / d sigma^2 = delta / (2 sigma^2)``;
    a variance ``d v`` of time constant ``tau_q`` moves the boundary by
    ``delta (sqrt(tau_q/tau_eff) - 1/2) d v / sigma^2`` instead: the returned term (the rate response
    to ``delta / (2 sigma^2)``) times ``2 (1 - sqrt(tau_q/tau_eff))`` is the difference.
    """
    from ..model.effective import white_equivalent  # noqa: PLC0415

    if tau_eff <= 0.0:
        return None
    nrn = population.neuron
    shift = float(white_equivalent(population).neuron.reset - nrn.reset)
    if shift == 0.0:
        return None
    leak = -float(nrn.drift_slope(nrn.threshold))
    return chi_mean * (leak + lam * nrn.tau_m) * shift / (2.0 * sigma * sigma)


@dataclass(frozen=True, eq=False)
class Stability(Displayable):
    """Linear stability of a fixed point.

    Attributes
    ----------
    state : FixedPoint
    roots : ndarray of complex
        Roots ``lam`` of ``det(I - M(lam))`` found (1/ms), leading first;
        only ``Im lam >= 0`` (roots come in conjugate pairs).
    growth_rate : float
        Real part of the leading root (1/s); > 0: unstable.
    frequency : float
        Imaginary part of the leading root / 2 pi (Hz): the oscillation
        frequency at onset (0 for a real root).
    stable : bool
    n_unstable : int
        Number of roots (conjugates counted) with ``0 < Re lam <= max_growth``
        and ``|Im lam| <= 2 pi max_frequency`` counted independently by the
        argument principle (winding number of ``det(I - M)`` round that box).
    complete : bool
        True when the secant search found as many unstable roots as counted.
    marginal : bool
        True when the leading root lies on the imaginary axis (``|growth_rate| <=``
        MARGINAL_GROWTH): the fixed point sits on a stability boundary; ``stable`` is False.
    bounded : bool
        True when no root was found, yet the argument principle shows none with ``Re > 0``
        (``stable`` True, ``roots`` empty, ``frequency`` NaN).  ``growth_rate`` is then an upper
        bound: the left edge (1/s) of the region where the transfer functions exist, when that
        edge lies in the search region (escape noise at low rates: minus the decay rate of the
        stationary ISI density's tail, which sets the slowest decay of perturbations), else NaN.
    """

    state: FixedPoint
    roots: np.ndarray
    growth_rate: float
    frequency: float
    stable: bool
    n_unstable: int = -1
    complete: bool = True
    marginal: bool = False
    bounded: bool = False

    def _card(self):
        word = "marginal" if self.marginal else ("stable" if self.stable else "UNSTABLE")
        if self.bounded:
            word += (" (no root found; growth rate at most the value below)" if np.isfinite(self.growth_rate)
                     else " (no root found; none unstable by the argument principle)")
        rows = [("verdict", word),
                ("leading root", f"growth rate {self.growth_rate:.4g} 1/s, frequency {self.frequency:.4g} Hz"),
                ("roots found (Im >= 0)", ", ".join(f"{1000 * r.real:.4g}/s at {1000 * r.imag / (2 * math.pi):.4g} Hz"
                                                    for r in self.roots[:4]) or "none"),
                ("unstable roots counted", fmt(self.n_unstable))]
        return "Stability of the fixed point", rows, None

    def __repr__(self):
        word = "marginal" if self.marginal else ("stable" if self.stable else "unstable")
        if self.bounded:
            return (f"<Stability stable: no root found, leading growth rate <= {self.growth_rate:.4g} 1/s; "
                    f"{self.n_unstable} unstable by the argument principle>")
        return (f"<Stability {word}: leading root {self.growth_rate:.4g} 1/s, {self.frequency:.4g} Hz; "
                f"{self.roots.size} roots, {self.n_unstable} unstable by the argument principle>")


def _det_fn(circuit, state, transfer):
    n = circuit.n
    eye = np.eye(n)

    def det(lam_arr):
        lam_arr = np.asarray(lam_arr, dtype=complex)
        flat = lam_arr.ravel()
        out = np.full(flat.shape, np.nan + 0j)

        def fill(lo, hi):
            # an escape-noise transfer function is defined only for growth rates above the decay rate
            # of the ISI density: where it raises, bisect and leave NaN at the offending points
            try:
                m = characteristic_matrix(circuit, state, flat[lo:hi], transfer)
                out[lo:hi] = np.linalg.det(eye - m)
            except ValueError:
                if hi - lo > 1:
                    mid = (lo + hi) // 2
                    fill(lo, mid)
                    fill(mid, hi)

        if flat.size:
            fill(0, flat.size)
        return out.reshape(lam_arr.shape)

    return det


def _secant_roots(det: Callable, z: np.ndarray, lim: float):
    """Damped complex secant iteration on ``det`` from the starts ``z`` (1/ms), all starts advanced together.

    Returns the end points, their residuals and the residuals at the starts (NaN end points: the
    iteration left the region where the transfer functions exist).  ``lim`` caps every step (1/ms).
    """
    z = np.array(z, dtype=complex)
    # secant iteration (one evaluation of det per iteration and start; order 1.6)
    zp = z + DERIV_STEP * np.maximum(1e-3, np.abs(z))
    both = det(np.concatenate([z, zp]))  # one call: the transfer functions are set up once for all
    f, fp = both[:z.size].copy(), both[z.size:].copy()
    f_start = np.abs(f)
    active = np.isfinite(f) & np.isfinite(fp)
    best = np.where(np.isfinite(f), np.abs(f), np.inf)
    stall = np.zeros(z.size, dtype=np.int64)
    z[~active] = np.nan
    for _ in range(ROOT_MAX_ITER):
        idx = np.flatnonzero(active)
        if idx.size == 0:
            break
        with np.errstate(divide="ignore", invalid="ignore"):
            step = f[idx] * (z[idx] - zp[idx]) / (f[idx] - fp[idx])
        step = np.where(np.isfinite(step), step, 0.0)
        big = np.abs(step) > lim
        step[big] *= lim / np.abs(step[big])
        z_new = z[idx] - step
        f_new = det(z_new)
        for _ in range(BACKTRACK):
            # outside the region where the transfer functions are defined: shorten the step
            out = ~np.isfinite(f_new)
            if not np.any(out):
                break
            step[out] *= 0.5
            z_new[out] = z[idx[out]] - step[out]
            f_new[out] = det(z_new[out])
        zp[idx], fp[idx] = z[idx], f[idx]
        z[idx], f[idx] = z_new, f_new
        bad = ~np.isfinite(f_new)  # left the region where the transfer functions are defined
        # stalled: the residual has not fallen for STALL iterations (quadrature noise of the transfer
        # functions sets a floor); stop those starts, the acceptance test decides
        better = np.abs(f_new) < best[idx]
        best[idx] = np.where(better, np.abs(f_new), best[idx])
        stall[idx] = np.where(better, 0, stall[idx] + 1)
        conv = ((np.abs(step) < ROOT_TOL * np.maximum(1.0, np.abs(z_new)))
                | (stall[idx] > STALL) | (f_new == 0.0)) & ~bad
        active[idx[conv | bad]] = False
        z[idx[bad]] = np.nan
    return z, f, f_start


def _accepted_roots(z, f, f_start, im_limit: float) -> np.ndarray:
    """Distinct accepted roots with ``Im >= 0``, leading (largest real part) first.

    The transfer functions carry quadrature noise, so the iteration may stall just short of
    ROOT_TOL; a residual below ROOT_ACCEPT (relative to 1 + its value at the start) suffices.
    Roots with ``Im`` above ``im_limit`` (1/ms) lie outside what was searched and are dropped.
    """
    roots = []
    for zi, fi, f0 in zip(z, f, f_start):
        if not (np.isfinite(zi) and abs(fi) < ROOT_ACCEPT * (1.0 + f0)):
            continue
        zi = complex(zi.real, abs(zi.imag)) if abs(zi.imag) > 1e-9 else complex(zi.real, 0.0)
        # genuine roots at any growth rate are kept (a strongly damped system has its leading root left
        # of the box); frequencies far above the box are outside what was searched
        if zi.imag > im_limit:
            continue
        if any(abs(zi - r) < SAME_ROOT * max(1.0, abs(zi)) for r in roots):
            continue
        roots.append(zi)
    return np.array(sorted(roots, key=lambda r: -r.real), dtype=complex)


def roots_near(circuit: Circuit, state: FixedPoint, guesses, *, transfer: Callable | None = None,
               max_frequency: float = 500.0, step_limit: float | None = None) -> np.ndarray:
    """Roots of the characteristic equation found from given first guesses (warm start).

    Parameters
    ----------
    circuit, state, transfer : see :func:`stability`
    guesses : array_like of complex
        Starting points (1/ms), e.g. the roots of a nearby fixed point.
    max_frequency : float
        Roots above 1.5 times this frequency (Hz) are dropped.
    step_limit : float, optional
        Largest secant step (1/ms); default a tenth of ``2 pi max_frequency``.

    Returns
    -------
    ndarray of complex
        Distinct roots (``Im >= 0``), leading first; possibly fewer than the guesses.  Unlike
        :func:`stability` nothing certifies that no root was missed.
    """
    det = _det_fn(circuit, state, transfer)
    w_max = 2 * math.pi * max_frequency * 1e-3
    g = np.asarray(guesses, dtype=complex).ravel()
    g = np.where(np.abs(g.imag) < 1e-6, g.real + 1e-6j, g)  # real roots are approached from just above
    lim = 0.1 * w_max if step_limit is None else float(step_limit)
    return _accepted_roots(*_secant_roots(det, g, lim), 1.5 * w_max)


def _count_unstable(det: Callable, roots: np.ndarray, max_growth: float, w_max: float) -> tuple[int, float]:
    """Argument-principle count of the unstable roots, robust to roots on or near the imaginary axis.

    The counting box is ``re_lo < Re <= max_growth``, ``|Im| <= w_max`` (1/ms) with ``re_lo = 0``
    unless a root found by the secant search lies within MARGIN_NEAR of the axis: then the left
    edge moves to the right of it (a contour through a root cannot be counted on), and the roots
    found with ``0 < Re <= re_lo`` are added to the count.  If the count still fails, the edge is
    moved further (MARGIN_TRIES times).  Returns ``(count, re_lo)``; ``(-1, nan)`` if every try failed.
    """
    near = [abs(r.real) for r in roots if abs(r.real) < MARGIN_NEAR and r.imag <= w_max]
    re_lo = 0.0 if not near else max(near) + MARGIN_NEAR
    for _ in range(MARGIN_TRIES):
        try:
            n = count_roots(det, re_lo, max_growth, w_max)
        except ConvergenceError:
            re_lo = re_lo + MARGIN_NEAR if re_lo > 0 else MARGIN_NEAR
            continue
        extra = sum(1 if r.imag == 0.0 else 2 for r in roots
                    if 0.0 < r.real <= re_lo and r.imag <= w_max)
        return n + extra, re_lo
    return -1, math.nan


def count_unstable(circuit: Circuit, state: FixedPoint, roots=(), *, transfer: Callable | None = None,
                   max_frequency: float = 500.0, max_growth: float = 200.0) -> int:
    """Number of unstable roots (conjugates counted) in ``0 < Re <= max_growth`` (1/s),
    ``|f| <= max_frequency`` (Hz), by the argument principle alone (no root search).

    ``roots`` (1/ms), known roots near the imaginary axis, move the counting contour off them
    (see :func:`stability`).  Returns -1 if the count failed.
    """
    det = _det_fn(circuit, state, transfer)
    w_max = 2 * math.pi * max_frequency * 1e-3
    return _count_unstable(det, np.asarray(roots, dtype=complex), max_growth * 1e-3, w_max)[0]


def _existence_edge(det: Callable, lo: float) -> float | None:
    """Left edge (1/ms), on the real axis in ``(lo, 0)``, of the region where ``det`` is finite (the
    transfer functions exist); None when ``det`` is finite at ``lo`` or not at 0."""
    def ok(x):
        return bool(np.isfinite(det(np.array([complex(x, 1e-6)]))[0]))

    if ok(lo) or not ok(0.0):
        return None
    a, b = lo, 0.0
    for _ in range(EDGE_BISECTIONS):
        mid = 0.5 * (a + b)
        a, b = (a, mid) if ok(mid) else (mid, b)
    return b


def _without_roots(det: Callable, state: FixedPoint, lo: float, max_growth: float, w_max: float) -> Stability:
    """Verdict when the secant search found no root (growth rates in 1/ms; see :func:`stability`).

    Where the transfer functions cease to exist inside the search region (escape noise at low rates:
    the decay rate of the ISI density's tail), the argument principle is applied right of that edge,
    so that no root with a larger growth rate exists and the edge bounds the leading growth rate;
    otherwise it shows that no root has ``Re > 0``.  Unstable roots that the search missed raise.
    """
    edge = _existence_edge(det, lo)
    bound = math.nan
    n = -1
    if edge is not None:
        left = edge + 0.01 * abs(edge)
        try:
            n = count_roots(det, left, max_growth, w_max)
            bound = left * 1e3
        except ConvergenceError:
            n = -1
    if n != 0:
        n, _ = _count_unstable(det, np.empty(0, dtype=complex), max_growth, w_max)
        bound = math.nan
    if n != 0:
        raise ConvergenceError("no root of the characteristic equation was found in the search region, "
                               + ("and the count of unstable roots failed" if n < 0 else
                                  f"but {n} unstable root(s) are counted there")
                               + "; widen `min_growth`/`max_frequency` or refine the starting grid")
    return Stability(state=state, roots=np.empty(0, dtype=complex), growth_rate=float(bound), frequency=math.nan,
                     stable=True, n_unstable=0, complete=True, marginal=False, bounded=True)


def stability(circuit: Circuit, state: FixedPoint, *, transfer: Callable | None = None,
              max_frequency: float = 500.0, min_growth: float = -200.0, max_growth: float = 200.0,
              n_frequency: int = 24, n_growth: int = 4) -> Stability:
    """Leading roots of the characteristic equation at a fixed point.

    Parameters
    ----------
    circuit : Circuit
        The coupled cohorts.
    state : FixedPoint
        From :func:`fixed_points`.
    transfer : callable, optional
        See :func:`characteristic_matrix`.
    max_frequency : float
        Highest oscillation frequency searched (Hz).
    min_growth, max_growth : float
        Range of growth rates (1/s) of the starting grid.
    n_frequency, n_growth : int
        Starting grid size.

    Returns
    -------
    Stability
        With ``marginal`` True (and ``stable`` False) when the leading root lies on the
        imaginary axis within MARGINAL_GROWTH: exactly at a stability boundary.  With
        ``bounded`` True when no root is found from any start (also after moving the starting
        grid's left edge WIDEN_TRIES times further left, unless the coupling is negligible,
        WEAK_COUPLING) but the argument principle shows that none is unstable: a nearly silent
        state, or an escape-noise state firing so slowly (about 1 Hz) that its transfer function
        exists only for growth rates above minus the decay rate of its ISI density's tail, with
        every root left of that edge; ``growth_rate`` is then that edge (an upper bound) or NaN.

    Raises
    ------
    ConvergenceError
        When no root is found and the argument principle counts unstable roots (or fails).

    Notes
    -----
    Starts on a grid in ``[min_growth, max_growth] x [0, 2 pi max_frequency]``
    (1/s x rad/s);
    each start runs a damped secant iteration on ``det(I - M(lam))`` with
    all starts advanced together (one transfer-function call per
    iteration and point).  The leading root is the one with the largest real
    part among the roots found; that no unstable root was missed in
    ``0 < Re <= max_growth``, ``|f| <= max_frequency`` is checked by the
    argument principle (``n_unstable``, ``complete``), and ``stable`` needs
    both.  A root on (or within MARGIN_NEAR of) the imaginary axis would lie on
    the counting contour: the contour then passes just to its right and the
    roots found between the axis and the contour are counted directly.
    Escape-noise transfer functions exist only above the decay rate of
    the ISI density: iterates that leave that region are pulled back.
    """
    det = _det_fn(circuit, state, transfer)
    g = np.linspace(min_growth, max_growth, v.positive_int("n_growth", n_growth)) * 1e-3
    w = 2 * math.pi * np.linspace(0.0, max_frequency, v.positive_int("n_frequency", n_frequency)) * 1e-3
    w[0] = 1e-6  # off the real axis (real roots are approached from just above)
    z = (g[:, None] + 1j * w[None, :]).ravel()
    # damping: never move further than a tenth of the search box per iteration
    lim = 0.1 * max(abs(max_growth - min_growth) * 1e-3, 2 * math.pi * max_frequency * 1e-3)
    w_max = 2 * math.pi * max_frequency * 1e-3
    roots = _accepted_roots(*_secant_roots(det, z, lim), 1.5 * w_max)
    lo = min_growth
    weak = False
    if not roots.size:  # negligible coupling: no root anywhere but at the transfer functions' poles
        at_starts = det(z)
        weak = bool(np.all(np.abs(at_starts[np.isfinite(at_starts)] - 1.0) < WEAK_COUPLING))
    for _ in range(WIDEN_TRIES if not roots.size and not weak else 0):
        # a strongly damped state: its roots lie left of the box; start further left
        lo = lo * WIDEN_FACTOR if lo < 0 else lo - 1000.0
        g = np.linspace(lo, max_growth, v.positive_int("n_growth", n_growth)) * 1e-3
        z = (g[:, None] + 1j * w[None, :]).ravel()
        roots = _accepted_roots(*_secant_roots(det, z, 0.1 * max(abs(max_growth - lo) * 1e-3, w_max)),
                                1.5 * w_max)
        if roots.size:
            break
    if not roots.size:
        return _without_roots(det, state, lo * 1e-3, max_growth * 1e-3, w_max)
    lead = roots[0]
    n_count, re_lo = _count_unstable(det, roots, max_growth * 1e-3, w_max)
    inside = [r for r in roots if 0.0 < r.real <= max_growth * 1e-3 and r.imag <= w_max]
    n_found = sum(1 if r.imag == 0.0 else 2 for r in inside)
    marginal = bool(abs(lead.real) * 1e3 <= MARGINAL_GROWTH)
    stable = bool(lead.real < 0.0) and n_count == 0 and not marginal
    return Stability(state=state, roots=roots, growth_rate=float(lead.real * 1e3),
                     frequency=float(lead.imag * 1e3 / (2 * math.pi)), stable=stable,
                     n_unstable=int(n_count), complete=bool(n_found == n_count), marginal=marginal)


def count_roots(det: Callable, re_lo: float, re_hi: float, im_max: float, n0: int = 400,
                max_points: int = 200_000) -> int:
    """Number of zeros of ``det`` in the box ``re_lo < Re < re_hi``, ``|Im| < im_max`` (1/ms).

    Argument principle: the winding number of ``det`` along the box boundary
    (counter-clockwise), valid when ``det`` has no poles inside (true for
    stable uncoupled populations; the synaptic poles lie at ``-1/tau_syn``).
    The boundary starts with ``n0`` points and is refined where a phase step
    exceeds pi/4 (midpoints inserted there only, so a root close to one edge
    costs points on that stretch alone) until none does.

    Raises
    ------
    ConvergenceError
        If ``det`` vanishes on the boundary or the phase cannot be resolved.
    """
    corners = [complex(re_lo, -im_max), complex(re_hi, -im_max), complex(re_hi, im_max),
               complex(re_lo, im_max), complex(re_lo, -im_max)]
    lengths = [abs(b - a) for a, b in zip(corners[:-1], corners[1:])]
    total = sum(lengths)
    pts = []
    for (a, b), ln in zip(zip(corners[:-1], corners[1:]), lengths):
        m = max(8, int(math.ceil(n0 * ln / total)))
        pts.append(a + (b - a) * np.arange(m) / m)
    z = np.concatenate(pts + [np.array([corners[0]])])
    val = det(z)
    new = val
    while True:
        if np.any(~np.isfinite(new)) or np.any(np.abs(new) == 0.0):
            raise ConvergenceError("det(I - M) is not finite or vanishes on the counting contour")
        dphi = np.angle(val[1:] / val[:-1])
        bad = np.flatnonzero(np.abs(dphi) >= math.pi / 4)
        if bad.size == 0:
            return int(round(np.sum(dphi) / (2 * math.pi)))
        if z.size + bad.size > max_points or np.min(np.abs(z[bad + 1] - z[bad])) < 1e-13 * (1.0 + total):
            raise ConvergenceError("the phase of det(I - M) could not be resolved on the counting contour")
        mid = 0.5 * (z[bad] + z[bad + 1])
        new = det(mid)
        z = np.insert(z, bad + 1, mid)
        val = np.insert(val, bad + 1, new)
