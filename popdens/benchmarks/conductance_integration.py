"""Benchmark: the Fokker--Planck step with conductance input that varies in time.

``FokkerPlanckSolver.advance_conductance`` combines the face drifts and diffusion coefficients of
each step from per-step weights (rows ``F, F', 1, u`` and ``1, u, u^2``), moves the threshold by a
change of variable and the reset by a two-cell reinjection.  Timed, in one run, on popdens's own
automatic grid (LIF, ``tau_m`` 20 ms, excitatory and inhibitory conductances 0.5 / 1 ms, 1 s at
dt 0.1 ms, channel rates modulated at 20 Hz):

* popdens's solver at constant conductances with a drive modulated at 20 Hz (its own step: the face
  coefficients recomputed at every stage), the reference cost of a Fokker--Planck step;
* ``advance_conductance`` with the channel rates modulated (the same drive);
* a minimal compiled loop of the same scheme written here (TR-BDF2, Scharfetter--Gummel fluxes with
  per-face diffusion, the faces combined at every stage, reinjection into one fixed cell, no moving
  boundaries, guards or bookkeeping); its rates are compared with popdens's (largest difference
  relative to the peak rate): with the channels held and the drive modulated they agree to round-off
  (the same scheme); with the channels modulated they differ by what the moving boundaries do;
* the mean field of the E-I conductance network of the contributor guide (two cohorts, 1 s): wall and
  CPU time, cost per step.

Printed: wall and CPU time (best of ``REPEATS``), cost per step, and the ratios.

Run:  popdens bench conductance_integration
"""

from __future__ import annotations

import math

import numba
import numpy as np

import popdens
from popdens.benchmarks._timing import best_of
from popdens.benchmarks.kernels import G, _thomas, sg_face
from popdens.solvers import FokkerPlanckSolver

REPEATS = 5
DT = 0.1  # ms
T_END = 1000.0  # ms
F_MOD = 20.0  # Hz
LIF = popdens.LIF(20.0, 20.0, 10.0, 2.0)
NOISE = popdens.ConductanceNoise(exc_rate=1.6e4, exc_weight=0.1, exc_tau=0.5, exc_reversal=70.0,
                                 inh_rate=5000.0, inh_weight=0.25, inh_tau=1.0, inh_reversal=-10.0)


@numba.njit(cache=True)
def _mixed_coefficients(rows_f, rows_d, w, v, dist, tau_m, alpha, beta):  # pragma: no cover - compiled
    for i in range(dist.shape[0]):
        a = (w[0] * rows_f[0, i] + w[1] + w[2] * rows_f[1, i]) / tau_m
        dd = max(v[0] + v[1] * rows_d[0, i] + v[2] * rows_d[1, i], 1e-300)
        alpha[i], beta[i] = sg_face(a, dd, dist[i])


@numba.njit(cache=True)
def fp_mixed_minimal(rows_f, rows_d, wf, wd, dist, h, r, tau_m, n_delay, dt, p, buf, rate):  # pragma: no cover
    """TR-BDF2 steps whose face coefficients come from weights ``wf`` (rows F, 1, u) and ``wd`` (1, u, u^2)
    per boundary, linear in between; reinjection after exactly ``n_delay`` steps into cell ``r``."""
    n = h.shape[0]
    nb = buf.shape[0]
    head = 0
    a0, b0, a1, b1 = np.empty(n), np.empty(n), np.empty(n), np.empty(n)
    rhs, pg, cp = np.empty(n), np.empty(n), np.empty(n)
    w, v = np.empty(3), np.empty(3)
    wa = 1.0 / (G * (2.0 - G))
    wb = (1.0 - G) * (1.0 - G) / (G * (2.0 - G))
    wc = (1.0 - G) / (2.0 - G)
    _mixed_coefficients(rows_f, rows_d, wf[:, 0], wd[:, 0], dist, tau_m, a0, b0)
    for k in range(wf.shape[1] - 1):
        q = buf[head] / dt
        buf[head] = 0.0
        for j in range(3):
            w[j] = wf[j, k] + G * (wf[j, k + 1] - wf[j, k])
            v[j] = wd[j, k] + G * (wd[j, k + 1] - wd[j, k])
        _mixed_coefficients(rows_f, rows_d, w, v, dist, tau_m, a1, b1)
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
        _thomas(h, 1.0 / d1, a1, b1, rhs, pg, cp)
        j_g = a1[n - 1] * pg[n - 1]
        _mixed_coefficients(rows_f, rows_d, wf[:, k + 1], wd[:, k + 1], dist, tau_m, a0, b0)
        inv = 1.0 / (wc * dt)
        for i in range(n):
            rhs[i] = h[i] * (wa * pg[i] - wb * p[i]) * inv
        rhs[r] += q
        _thomas(h, inv, a0, b0, rhs, p, cp)
        outflow = dt * ((j_n + j_g) * (0.5 / (2.0 - G)) + wc * a0[n - 1] * p[n - 1])
        buf[(head + n_delay) % nb] += outflow
        head = (head + 1) % nb
        rate[k] = outflow / (dt * 1e-3)
    return p


def _inputs(n):
    t = np.arange(n + 1) * DT
    mod = 1.0 + 0.3 * np.sin(2.0 * math.pi * F_MOD * t * 1e-3)
    chans = [(rev, tau) for _, _, tau, rev in NOISE.channels()]
    first = np.array([w * nu * 1e3 * mod for nu, w, _, _ in NOISE.channels()])
    second = np.array([w * w * nu * 1e3 * mod for nu, w, _, _ in NOISE.channels()])
    mu = 5.0 + 2.0 * np.sin(2.0 * math.pi * F_MOD * t * 1e-3)
    return mu, chans, first, second


def _weights(chans, first, second, mu, tau_m):
    """Drift weights (rows F, 1, u) and diffusion weights (1, u, u^2) without the moving boundaries."""
    rev = np.array([c[0] for c in chans])[:, None]
    tau = np.array([c[1] for c in chans])[:, None]
    q = second * 1e-3 * tau * tau / (2.0 * tau_m * tau_m)
    c = first * 1e-3 * tau + tau_m * q
    wf = np.array([np.ones(mu.size), mu + np.sum(c * rev, axis=0), -np.sum(c, axis=0)])
    wd = np.array([np.sum(q * rev * rev, axis=0), -2.0 * np.sum(q * rev, axis=0), np.sum(q, axis=0)])
    return np.ascontiguousarray(wf), np.ascontiguousarray(wd)


def main() -> None:
    n = int(round(T_END / DT))
    mu, chans, first, second = _inputs(n)
    pop = popdens.Population(LIF, NOISE)

    def fresh():
        s = FokkerPlanckSolver(pop, DT)
        s.initialize(5.0, None, "stationary")
        return s

    fresh().advance(mu[:3])  # compile / load outside the timings
    fresh().advance_conductance(mu[:3], chans, first[:, :3], second[:, :3])
    probe = fresh()
    cells = probe.axis.size
    w_own, c_own, _ = best_of(lambda: fresh().advance(mu), REPEATS)
    w_var, c_var, (r_var, _, _) = best_of(lambda: fresh().advance_conductance(mu, chans, first, second), REPEATS)

    # the minimal loop on the same grid, from the same stationary state
    e, c = np.array(probe.grid.edges), probe.axis
    faces = np.append(e[1:-1], 0.5 * (c[-1] + e[-1]))
    rows_f = np.ascontiguousarray([LIF.drift(faces), faces])
    rows_d = np.ascontiguousarray([faces, faces * faces])
    wf, wd = _weights(chans, first, second, mu, LIF.tau_m)
    dist = np.append(np.diff(c), e[-1] - c[-1])
    h = np.array(probe.grid.widths)
    n_delay = int(round(LIF.refractory / DT))

    def minimal(wf=wf, wd=wd):
        p0 = fresh()
        buf = p0.buf[:n_delay + 1].copy()  # the stationary refractory mass as popdens holds it (head 0)
        rate = np.empty(n)
        fp_mixed_minimal(rows_f, rows_d, wf, wd, dist, h, probe.grid.reset_cell, LIF.tau_m, n_delay, DT,
                         p0.p.copy(), buf, rate)
        return rate

    minimal()
    w_min, c_min, r_min = best_of(minimal, REPEATS)
    diff = float(np.max(np.abs(r_var - r_min)) / np.max(r_var))
    # the same scheme: with the channels held (no boundary moves) and the drive modulated, the two agree
    held = (first[:, :1] + 0.0 * first, second[:, :1] + 0.0 * second)
    r_held = fresh().advance_conductance(mu, chans, *held)[0]
    same = float(np.max(np.abs(r_held - minimal(*_weights(chans, *held, mu, LIF.tau_m)))) / np.max(r_held))

    # the E-I network of the contributor guide, 1 s
    from popdens.network import Circuit, Cohort, Pathway, PoissonBackground, fixed_points, simulate_network

    bg = PoissonBackground(rate=10.0, weight=0.02, count=2500, tau_syn=1.0, synapse="conductance", reversal=70.0)
    base = popdens.Population(LIF, popdens.WhiteNoise(1.0))
    coh = [Cohort(nm, base, size=sz, drive=5.0, sigma_ext=0.0, background=bg) for nm, sz in (("E", 4000), ("I", 2000))]
    pws = [Pathway(s, t, w, c_, delay=1.0, tau_syn=tau, synapse="conductance", reversal=rev)
           for s, w, c_, tau, rev in (("E", 0.04, 800, 1.0, 70.0), ("I", 0.2, 400, 1.2, -10.0)) for t in "EI"]
    net = Circuit(coh, pws)
    (fp,) = fixed_points(net, (0.0, 60.0), starts_per_dim=2)
    simulate_network(net, 1.0, initial_rates=fp.rates, progress=False)
    w_net, c_net, res = best_of(lambda: simulate_network(net, T_END, initial_rates=fp.rates, progress=False), 3)

    print("Conductance input varying in time: Fokker-Planck step (LIF, g_e0 0.8, g_i0 1.25, synapses 0.5 / 1 ms; "
          f"1 s at dt {DT} ms, {cells} cells, inputs modulated at {F_MOD:g} Hz)")
    print(f"  own step, drive varying        : wall {w_own:.4f} s, CPU {c_own:.4f} s, {1e6 * c_own / n:.1f} us/step")
    print(f"  advance_conductance            : wall {w_var:.4f} s, CPU {c_var:.4f} s, {1e6 * c_var / n:.1f} us/step "
          f"(x{c_var / c_own:.2f} CPU of the own step)")
    print(f"  minimal loop, same scheme      : wall {w_min:.4f} s, CPU {c_min:.4f} s, {1e6 * c_min / n:.1f} us/step")
    print(f"  ratio popdens / minimal        : wall {w_var / w_min:.2f}, CPU {c_var / c_min:.2f}; largest rate "
          f"difference {diff:.2g} of the peak (the minimal loop keeps threshold and reset fixed); with the "
          f"channels held and the drive modulated {same:.2g}")
    print(f"  E-I conductance network, 1 s   : wall {w_net:.3f} s, CPU {c_net:.3f} s, "
          f"{1e6 * c_net / res.diagnostics['steps']:.1f} us/step for two cohorts "
          f"({res.diagnostics['E:n_cells']} + {res.diagnostics['I:n_cells']} cells)")


if __name__ == "__main__":
    main()
