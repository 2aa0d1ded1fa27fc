"""Benchmark: each time-domain hot loop against a minimal compiled loop of the same scheme.

These machines differ by up to 8x in raw speed and are shared, so a time alone means little; what
is printed is the ratio of popdens's cost per step to that of a hand-written loop of the same
numerical scheme, compiled with numba and timed in the same run, on the same inputs.  Each minimal
loop is written here, for one common model only (LIF, exponential escape, constant drive unless
said otherwise), with nothing a solver needs for generality: no dispatch on the model or the escape
function, no causality bookkeeping, no accuracy guards.  Its outputs are compared with popdens's
(the largest relative difference is printed), which shows it is the same scheme.

For every pair: wall time and CPU time of the best of ``REPEATS`` runs (CPU time of this thread,
which runs the compiled code), the cost per step, and the ratio popdens / minimal (wall and CPU).

* Fokker--Planck, TR-BDF2 with Scharfetter--Gummel fluxes, refractory buffer, on popdens's own
  automatic grid: constant drive (the minimal loop computes the face coefficients once) and a
  200 Hz sinusoidal drive (both compute them at every stage);
* refractory density, LIF with exponential escape, 2 ms refractory period, default age span;
* escape-noise Monte Carlo (cumulative hazard against an exponential threshold per neuron);
* white-noise Monte Carlo (exact Ornstein--Uhlenbeck step, Brownian-bridge crossing test), and
  the cost of its normal numbers alone: numba's generator against numpy's ziggurat generator
  (``numpy.random.Generator.standard_normal``) filling the same count;
* the network mean field of a two-cohort excitatory-inhibitory circuit (white noise, 1 s), with
  instantaneous and with filtered synapses: the share of its CPU time spent outside compiled code
  (the compiled Fokker--Planck loops and recurrent-input loop are timed apart; the rest is the
  interpreted work per block of steps).

Monte Carlo pairs draw different random numbers, so their outputs are compared statistically
(mean rates, with the standard error of the mean printed).

Run:  popdens bench kernels
"""

from __future__ import annotations

import math
import time

import numba
import numpy as np

import popdens
from popdens import hazard
from popdens.solvers import FokkerPlanckSolver, RefractoryDensitySolver

REPEATS = 5
DT = 0.1  # ms
TAU_M, THETA, RESET, T_REF = 10.0, 20.0, 10.0, 2.0  # ms, mV, mV, ms
MU = 22.0  # mV
SIGMA = 4.0  # mV (white noise)
RATE0, WIDTH = 20.0, 2.0  # Hz, mV (exponential escape)
G = 2.0 - math.sqrt(2.0)  # TR-BDF2 stage fraction (Hosea & Shampine 1996)


# ---------------------------------------------------------------- minimal loops
@numba.njit(cache=True, inline="always")
def sg_face(a, dd, dx):  # pragma: no cover - compiled
    """Scharfetter--Gummel coefficients ``(alpha, beta)`` of one face: drift ``a`` (mV/ms), diffusion ``dd``
    (mV^2/ms), centre distance ``dx`` (mV)."""
    x = abs(a) * dx / dd
    bx = 1.0 - 0.5 * x + x * x / 12.0 if x < 1e-5 else x / math.expm1(x)
    b = dd / dx * bx
    if a >= 0.0:
        return b + a, b
    return b, b - a


@numba.njit(cache=True)
def _sg_coefficients(ff, dist, mu, sigma, tau_m, alpha, beta):  # pragma: no cover - compiled
    dd = sigma * sigma / (2.0 * tau_m)
    for i in range(ff.shape[0]):
        alpha[i], beta[i] = sg_face((ff[i] + mu) / tau_m, dd, dist[i])


@numba.njit(cache=True)
def _thomas(h, inv, alpha, beta, rhs, out, cp):  # pragma: no cover - compiled
    n = h.shape[0]
    diag = h[0] * inv + alpha[0]
    cp[0] = -beta[0] / diag
    out[0] = rhs[0] / diag
    for i in range(1, n):
        diag = h[i] * inv + alpha[i] + beta[i - 1] + alpha[i - 1] * cp[i - 1]
        cp[i] = -beta[i] / diag
        out[i] = (rhs[i] + alpha[i - 1] * out[i - 1]) / diag
    for i in range(n - 2, -1, -1):
        out[i] -= cp[i] * out[i + 1]


@numba.njit(cache=True)
def fp_minimal(ff, dist, h, c, r, tau_m, reset, n_delay, dt, mu, sigma, p, buf, rate, mean_u, refr):  # pragma: no cover
    """TR-BDF2 Fokker--Planck steps (reinjection after exactly ``n_delay`` steps from the ring ``buf``,
    head at 0); coefficients are recomputed only when the drive changes."""
    n = h.shape[0]
    nb = buf.shape[0]
    head = 0
    a0, b0, a1, b1 = np.empty(n), np.empty(n), np.empty(n), np.empty(n)
    rhs, pg, cp = np.empty(n), np.empty(n), np.empty(n)
    wa = 1.0 / (G * (2.0 - G))
    wb = (1.0 - G) * (1.0 - G) / (G * (2.0 - G))
    wc = (1.0 - G) / (2.0 - G)
    _sg_coefficients(ff, dist, mu[0], sigma, tau_m, a0, b0)
    for k in range(mu.shape[0] - 1):
        q = buf[head] / dt
        buf[head] = 0.0
        const = mu[k + 1] == mu[k]
        if not const:
            _sg_coefficients(ff, dist, mu[k] + G * (mu[k + 1] - mu[k]), sigma, tau_m, a1, b1)
        ag, bg = (a0, b0) if const else (a1, b1)
        d1 = 0.5 * G * dt
        j_n = a0[n - 1] * p[n - 1]
        for i in range(n):
            kp = a0[i] * p[i]
            if i < n - 1:
                kp -= b0[i] * p[i + 1]
            if i > 0:
                kp -= a0[i - 1] * p[i - 1] - b0[i - 1] * p[i]
            rhs[i] = h[i] * p[i] / d1 - kp
        rhs[r] += 2.0 * q
        _thomas(h, 1.0 / d1, ag, bg, rhs, pg, cp)
        j_g = ag[n - 1] * pg[n - 1]
        if not const:
            _sg_coefficients(ff, dist, mu[k + 1], sigma, tau_m, a0, b0)
        inv = 1.0 / (wc * dt)
        for i in range(n):
            rhs[i] = h[i] * (wa * pg[i] - wb * p[i]) * inv
        rhs[r] += q
        _thomas(h, inv, a0, b0, rhs, p, cp)
        outflow = dt * ((j_n + j_g) * (0.5 / (2.0 - G)) + wc * a0[n - 1] * p[n - 1])
        buf[(head + n_delay) % nb] += outflow
        head = (head + 1) % nb
        s = 0.0
        for j in range(nb):
            s += buf[j]
        su = 0.0
        for i in range(n):
            su += h[i] * p[i] * c[i]
        rate[k] = outflow / (dt * 1e-3)
        mean_u[k] = su + s * reset
        refr[k] = s
    return p


@numba.njit(cache=True)
def rd_minimal(m, u, hz, old, head, tau_m, theta, reset, tau_ref, rate0, width, dt, mu, rate, mean_u, refr):  # pragma: no cover
    """Refractory-density steps for a LIF with exponential escape (Lagrangian age bins of width dt,
    ages (j + 1/2) dt, trapezoidal integrated hazard, merged oldest bin), constant drive ``mu``."""
    n = m.shape[0]
    e_dt = math.exp(-dt / tau_m)
    base = mu  # the LIF's resting potential is 0 mV here
    j_part = int(math.floor(tau_ref / dt - 0.5 + 1e-9))  # the bin whose refractoriness ends inside the step
    free_part = (j_part + 1.5) * dt - tau_ref
    e_part = math.exp(-free_part / tau_m)
    u_part = base + (reset - base) * e_part
    h_reset = rate0 * math.exp((reset - theta) / width)
    h_part = rate0 * math.exp((u_part - theta) / width)
    big_part = 0.5 * (h_reset + h_part) * free_part * 1e-3
    s_part = math.exp(-big_part)
    for k in range(rate.shape[0]):
        fired = 0.0
        su = 0.0
        rf = 0.0
        for j in range(n):
            p = head + j
            if p >= n:
                p -= n
            mj = m[p]
            if j < j_part:
                su += mj * reset
                rf += mj
                continue
            if j == j_part:
                un, hn, s = u_part, h_part, s_part
            else:
                un = base + (u[p] - base) * e_dt
                hn = rate0 * math.exp((un - theta) / width)
                s = math.exp(-0.5 * (hz[p] + hn) * dt * 1e-3)
            fired += mj * (1.0 - s)
            if j == n - 1:
                u_last, ms_last = un, mj * s
            else:
                m[p] = mj * s
                u[p] = un
                hz[p] = hn
                su += mj * s * un
        uo = base + (old[1] - base) * e_dt
        ho = rate0 * math.exp((uo - theta) / width)
        so = math.exp(-0.5 * (old[2] + ho) * dt * 1e-3)
        fired += old[0] * (1.0 - so)
        m_old = old[0] * so + ms_last
        u_old = (old[0] * so * uo + ms_last * u_last) / m_old if m_old > 0.0 else uo
        old[0] = m_old
        old[1] = u_old
        old[2] = rate0 * math.exp((u_old - theta) / width)
        su += m_old * u_old
        head -= 1
        if head < 0:
            head += n
        m[head] = fired
        u[head] = reset
        hz[head] = 0.0
        rate[k] = fired / (dt * 1e-3)
        mean_u[k] = su + fired * reset
        refr[k] = rf + fired
    return head


@numba.njit(cache=True)
def escape_mc_minimal(rng, u, age, lam, thr, tau_m, theta, reset, tau_ref, rate0, width, dt, mu, n_steps, counts):  # pragma: no cover
    """Escape-noise neurons: cumulative trapezoidal hazard against an Exp(1) threshold each, drawn
    from numpy's ziggurat generator (``rng``, a ``numpy.random.Generator``)."""
    n = u.shape[0]
    e_dt = math.exp(-dt / tau_m)
    base = mu  # the LIF's resting potential is 0 mV here
    for k in range(n_steps):
        cnt = 0
        for i in range(n):
            a0 = age[i]
            free = a0 + dt - tau_ref
            if free <= 0.0:
                age[i] = a0 + dt
                continue
            if free >= dt:
                un = base + (u[i] - base) * e_dt
                h0 = rate0 * math.exp((u[i] - theta) / width)
            else:
                un = base + (reset - base) * math.exp(-free / tau_m)
                h0 = rate0 * math.exp((reset - theta) / width)
            hn = rate0 * math.exp((un - theta) / width)
            lam[i] += 0.5 * (h0 + hn) * min(free, dt) * 1e-3
            if lam[i] >= thr[i]:
                cnt += 1
                u[i] = reset
                age[i] = 0.5 * dt
                lam[i] = 0.0
                thr[i] = rng.standard_exponential()
            else:
                u[i] = un
                age[i] = a0 + dt
        counts[k] = cnt


@numba.njit(cache=True)
def white_mc_minimal(rng, u, ref, tau_m, theta, reset, tau_ref, dt, mu, sigma, n_steps, counts):  # pragma: no cover
    """White-noise LIF neurons: exact OU step, Brownian-bridge crossing test, refractory countdown;
    normal numbers from numpy's ziggurat generator (``rng``, a ``numpy.random.Generator``)."""
    n = u.shape[0]
    e = math.exp(-dt / tau_m)
    sd = math.sqrt(0.5 * sigma * sigma * (1.0 - e * e))
    base = mu  # the LIF's resting potential is 0 mV here
    s2 = sigma * sigma / tau_m
    for k in range(n_steps):
        cnt = 0
        for i in range(n):
            if ref[i] > 0.0:
                ref[i] -= dt
                if ref[i] > 1e-9:
                    continue
                ref[i] = 0.0
            u0 = u[i]
            u1 = base + (u0 - base) * e + sd * rng.standard_normal()
            fired = u1 >= theta
            if not fired:
                x = 2.0 * (theta - u0) * (theta - u1) / (s2 * dt)
                if x < 40.0:
                    fired = rng.random() < math.exp(-x)
            if fired:
                cnt += 1
                u1 = reset
                ref[i] = tau_ref - 0.5 * dt
            u[i] = u1
        counts[k] = cnt


@numba.njit(cache=True)
def _normals_numba(out):  # pragma: no cover - compiled
    for i in range(out.shape[0]):
        out[i] = np.random.standard_normal()


@numba.njit(cache=True)
def _normals_ziggurat(rng, out):  # pragma: no cover - compiled
    for i in range(out.shape[0]):
        out[i] = rng.standard_normal()


# ---------------------------------------------------------------- timing
def _best(fn, repeats=REPEATS):
    """(wall s, CPU s of this thread) of the fastest of ``repeats`` calls, and its result."""
    best = None
    for _ in range(repeats):
        w0, c0 = time.perf_counter(), time.thread_time()
        out = fn()
        w, c = time.perf_counter() - w0, time.thread_time() - c0
        if best is None or w < best[0]:
            best = (w, c, out)
    return best


def _row(label, steps, ours, minimal, agree):
    (w1, c1), (w2, c2) = ours[:2], minimal[:2]
    print(f"  {label}")
    print(f"    popdens : {w1 * 1e6 / steps:9.2f} us/step wall, {c1 * 1e6 / steps:9.2f} us/step CPU")
    print(f"    minimal : {w2 * 1e6 / steps:9.2f} us/step wall, {c2 * 1e6 / steps:9.2f} us/step CPU")
    print(f"    ratio popdens/minimal: {w1 / w2:.2f} wall, {c1 / max(c2, 1e-9):.2f} CPU   ({agree})")
    return w1 / w2, c1 / max(c2, 1e-9)


def _second_half(rate_ours, counts_minimal, n):
    """Mean rates (Hz) of the second half of both runs, with the Poisson standard error of each."""
    half = counts_minimal[counts_minimal.size // 2:]
    r_min = float(half.mean()) / (n * DT * 1e-3)
    r_ours = float(rate_ours[-1])
    se = math.sqrt(max(r_min, 1e-9) / (n * half.size * DT * 1e-3))
    return f"second-half rates {r_ours:.2f} and {r_min:.2f} Hz, standard error {se:.2f} Hz each"


def bench_fokker_planck(drive: str):
    pop = popdens.Population(popdens.LIF(TAU_M, THETA, RESET, T_REF), popdens.WhiteNoise(SIGMA))
    n_steps = 5000
    if drive == "constant":
        mu = np.full(n_steps + 1, MU)
    else:
        mu = MU + 2.0 * np.sin(2.0 * np.pi * 0.2 * DT * np.arange(n_steps + 1))  # 200 Hz
    sg = np.full(n_steps + 1, SIGMA)
    solver = FokkerPlanckSolver(pop, DT)
    solver.plan(mu, sg)
    solver.initialize(MU, SIGMA, "synchronous")
    p0, buf0 = solver.p.copy(), solver.buf.copy()
    assert solver.head == 0 and solver.frac == 0.0 and solver.n_delay == int(round(T_REF / DT))

    def ours():
        solver.p[:] = p0
        solver.buf[:] = buf0
        solver.head = 0
        return solver.advance(mu, sg)[0]

    def minimal():
        p, buf = p0.copy(), buf0.copy()
        rate, mean_u, refr = np.empty(n_steps), np.empty(n_steps), np.empty(n_steps)
        fp_minimal(solver._ff, solver._dist, solver._h, solver._c, solver._r, TAU_M, RESET, solver.n_delay, DT,
                   mu, SIGMA, p, buf, rate, mean_u, refr)
        return rate

    ours(), minimal()  # compile / load
    a, b = _best(ours), _best(minimal)
    diff = float(np.max(np.abs(a[2] - b[2])) / np.max(np.abs(b[2])))
    return _row(f"Fokker-Planck TR-BDF2, {solver.p.size} cells, {drive} drive, {n_steps} steps", n_steps,
                a, b, f"rates agree to {diff:.1e} of the peak")


def bench_refractory():
    pop = popdens.Population(popdens.LIF(TAU_M, THETA, RESET, T_REF),
                             popdens.EscapeNoise(hazard.Exponential(RATE0, WIDTH)))
    n_steps = 5000
    mu = np.full(n_steps + 1, MU)
    solver = RefractoryDensitySolver(pop, DT)
    solver.initialize(MU, None, "synchronous")
    state0 = (solver.m.copy(), solver.u.copy(), solver.h.copy(), solver.old.copy(), solver.head)

    def ours():
        solver.m[:], solver.u[:], solver.h[:], solver.old[:] = state0[:4]
        solver.head = state0[4]
        return solver.advance(mu)[0]

    def minimal():
        m, u, hz, old = (x.copy() for x in state0[:4])
        rate, mean_u, refr = np.empty(n_steps), np.empty(n_steps), np.empty(n_steps)
        rd_minimal(m, u, hz, old, state0[4], TAU_M, THETA, RESET, T_REF, RATE0, WIDTH, DT, MU, rate, mean_u, refr)
        return rate

    ours(), minimal()
    a, b = _best(ours), _best(minimal)
    diff = float(np.max(np.abs(a[2] - b[2])) / np.max(np.abs(b[2])))
    return _row(f"refractory density, {solver.n_bins} age bins, constant drive, {n_steps} steps", n_steps,
                a, b, f"rates agree to {diff:.1e} of the peak")


def bench_escape_mc():
    pop = popdens.Population(popdens.LIF(TAU_M, THETA, RESET, T_REF),
                             popdens.EscapeNoise(hazard.Exponential(RATE0, WIDTH)))
    n, t_end = 20_000, 200.0
    n_steps = int(round(t_end / DT))

    def ours():
        return popdens.montecarlo(pop, MU, t_end, n=n, dt=DT, seed=1, record_interval=t_end / 2,
                                  initial="synchronous").rate

    def minimal():
        rng = np.random.default_rng(2)
        u, age = np.full(n, RESET), np.full(n, 0.5 * DT)  # all fired at t = 0
        lam, thr = np.zeros(n), rng.exponential(size=n)
        counts = np.zeros(n_steps, dtype=np.int64)
        escape_mc_minimal(rng, u, age, lam, thr, TAU_M, THETA, RESET, T_REF, RATE0, WIDTH, DT, MU, n_steps, counts)
        return counts

    ours(), minimal()
    a, b = _best(ours), _best(minimal)
    return _row(f"escape-noise Monte Carlo, {n} neurons, {n_steps} steps", n_steps, a, b, _second_half(a[2], b[2], n))


def bench_white_mc():
    pop = popdens.Population(popdens.LIF(TAU_M, THETA, RESET, T_REF), popdens.WhiteNoise(SIGMA))
    n, t_end = 20_000, 200.0
    n_steps = int(round(t_end / DT))

    def ours():
        return popdens.montecarlo(pop, MU, t_end, n=n, dt=DT, seed=1, record_interval=t_end / 2,
                                  initial="synchronous").rate

    def minimal():
        u, ref = np.full(n, RESET), np.full(n, T_REF - 0.5 * DT)  # all fired at t = 0
        counts = np.zeros(n_steps, dtype=np.int64)
        white_mc_minimal(np.random.default_rng(2), u, ref, TAU_M, THETA, RESET, T_REF, DT, MU, SIGMA, n_steps, counts)
        return counts

    ours(), minimal()
    a, b = _best(ours), _best(minimal)
    out = _row(f"white-noise Monte Carlo, {n} neurons, {n_steps} steps", n_steps, a, b, _second_half(a[2], b[2], n))
    draws = np.empty(n * n_steps // 10)
    rng = np.random.default_rng(3)
    _normals_numba(draws[:10]), _normals_ziggurat(rng, draws[:10])
    wn = _best(lambda: _normals_numba(draws))
    wz = _best(lambda: _normals_ziggurat(rng, draws))
    print(f"    normal numbers alone, {draws.size} draws in a compiled loop: np.random.standard_normal "
          f"{wn[0] * 1e9 / draws.size:.1f} ns (CPU {wn[1] * 1e9 / draws.size:.1f} ns), Generator.standard_normal "
          f"(ziggurat) {wz[0] * 1e9 / draws.size:.1f} ns (CPU {wz[1] * 1e9 / draws.size:.1f} ns) per draw, "
          f"ratio {wn[0] / wz[0]:.1f} wall, {wn[1] / max(wz[1], 1e-12):.1f} CPU")
    return out


def bench_network(tau_syn: float = 0.0):
    """Share of :func:`popdens.network.simulate_network`'s CPU time outside compiled code.

    Compiled code: the Fokker--Planck loops and the recurrent-input loop (delayed, filtered rates
    to drive, noise and boundary shift); what remains is the interpreted work per block of steps.
    """
    from popdens.network import Cohort, Circuit, Pathway, integrate, simulate_network
    from popdens.solvers import fokker_planck

    pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(5.0))
    circuit = Circuit([Cohort("E", pop, size=2000, drive=18.0), Cohort("I", pop, size=500, drive=18.0)],
                      [Pathway("E", "E", 0.1, 200, 1.5, tau_syn), Pathway("E", "I", 0.1, 200, 1.5, tau_syn),
                       Pathway("I", "E", -0.4, 50, 1.5, tau_syn), Pathway("I", "I", -0.4, 50, 1.5, tau_syn)])
    kernels = {"fp": (fokker_planck, "_advance"), "inputs": (integrate, "block_inputs")}
    originals = {key: getattr(mod, name) for key, (mod, name) in kernels.items()}
    inside = dict.fromkeys(kernels, 0.0)

    def timer(key):
        kernel = originals[key]

        def timed(*args):
            c0 = time.thread_time()
            try:
                return kernel(*args)
            finally:
                inside[key] += time.thread_time() - c0
        return timed

    t_end = 1000.0
    simulate_network(circuit, 10.0, dt=DT, progress=False)  # compile / load
    for key, (mod, name) in kernels.items():
        setattr(mod, name, timer(key))
    try:
        best = None
        for _ in range(REPEATS):
            inside.update(dict.fromkeys(kernels, 0.0))
            w0, c0 = time.perf_counter(), time.thread_time()
            simulate_network(circuit, t_end, dt=DT, progress=False)
            w, c = time.perf_counter() - w0, time.thread_time() - c0
            if best is None or c < best[1]:
                best = (w, c, dict(inside))
    finally:
        for key, (mod, name) in kernels.items():
            setattr(mod, name, originals[key])
    w, c, comp = best
    n_steps = int(round(t_end / DT))
    outside = c - comp["fp"] - comp["inputs"]
    print(f"  network mean field, 2 cohorts x Fokker-Planck, 4 pathways (tau_syn = {tau_syn:g} ms), {n_steps} steps")
    print(f"    whole run: {w * 1e6 / n_steps:.1f} us/step wall, {c * 1e6 / n_steps:.1f} us/step CPU; compiled: "
          f"solver loops {comp['fp'] * 1e6 / n_steps:.1f}, input loop {comp['inputs'] * 1e6 / n_steps:.2f} us/step CPU")
    print(f"    outside compiled code: {outside * 1e6 / n_steps:.2f} us/step CPU, {100.0 * outside / c:.1f} % of the "
          f"CPU time (ratio whole run / compiled loops {c / (c - outside):.2f} CPU)")
    return outside / c


def main() -> None:
    import os

    print(f"load average at start: {' '.join(f'{x:.2f}' for x in os.getloadavg())} on {os.cpu_count()} cores; "
          f"best of {REPEATS}")
    bench_fokker_planck("constant")
    bench_fokker_planck("sinusoidal")
    bench_refractory()
    bench_escape_mc()
    bench_white_mc()
    bench_network(0.0)
    bench_network(2.0)
    print(f"load average at end: {' '.join(f'{x:.2f}' for x in os.getloadavg())}")


if __name__ == "__main__":
    main()
