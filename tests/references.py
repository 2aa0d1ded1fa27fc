"""Outside references shared by the hardening tests: renewal theory and the Siegert formula,
computed with scipy independently of the solvers."""

from __future__ import annotations

import math

from scipy.integrate import quad, solve_ivp
from scipy.special import erfcx


def renewal_rate(pop, mu, a_max_taus=60.0):
    """Stationary rate (Hz) = 1 / E[ISI], E[ISI] = tau_ref + int_0^inf S(a) da.

    Renewal theory (Cox 1962, "Renewal Theory"; Gerstner 2000, Neural Comput. 12:43): along the
    free LIF trajectory u(a) = mu + (reset - mu) exp(-a/tau_m) (rest 0) the survivor is
    S = exp(-H), H' = h(u(a)); H and int S are integrated together with scipy's solve_ivp
    (rtol 1e-10); the tail beyond a_max uses the asymptotic hazard h(mu).
    """
    nrn, h = pop.neuron, pop.noise.hazard
    tau, reset, theta = nrn.tau_m, nrn.reset, nrn.threshold

    def rhs(a, y):
        u = mu + (reset - mu) * math.exp(-a / tau)
        return [float(h.rate(u, theta)) * 1e-3, math.exp(-y[0])]

    a_max = a_max_taus * tau
    sol = solve_ivp(rhs, (0.0, a_max), [0.0, 0.0], method="LSODA", rtol=1e-10, atol=1e-13)
    big_h, mean = sol.y[:, -1]
    h_inf = float(h.rate(mu + (reset - mu) * math.exp(-a_max / tau), theta)) * 1e-3
    mean += math.exp(-big_h) / h_inf
    return 1000.0 / (nrn.refractory + mean)


def siegert_rate(pop, mu):
    """LIF stationary rate (Hz), Siegert formula (Siegert 1951; Brunel & Hakim 1999 eq. 21),
    for tau_m du = (-u + mu) dt + sigma sqrt(tau_m) dW, with erfcx(-x) = exp(x^2)(1 + erf(x))."""
    nrn, sigma = pop.neuron, pop.noise.sigma
    lo, hi = (nrn.reset - mu) / sigma, (nrn.threshold - mu) / sigma
    integral = quad(lambda x: erfcx(-x), lo, hi, limit=200, epsabs=0.0, epsrel=1e-12)[0]
    return 1000.0 / (nrn.refractory + nrn.tau_m * math.sqrt(math.pi) * integral)


#: The [neuron] and [noise] tables of the test population used across the scenario tests: a LIF
#: (tau_m 10 ms, threshold 20 mV, reset 0 mV, refractory 2 ms) with exponential escape noise
#: (20 Hz at threshold, width 2 mV).  Invented parameters.
LIF_ESCAPE_TABLES = """
[neuron]
model = "LIF"
tau_m = 10.0
threshold = 20.0
reset = 0.0
refractory = 2.0
[noise]
kind = "escape"
[noise.hazard]
shape = "exponential"
rate = 20.0
width = 2.0
"""


def eif_rate(mu, sigma, tau=10.0, ut=10.0, dT=1.0, uc=20.0, ur=0.0, tref=2.0):
    """Stationary rate (Hz) of the white-noise EIF: the stationary Fokker-Planck equation with unit
    flux, dp/du = (2/sigma^2)[(F + mu) p - tau J], p(cutoff) = 0 (Brunel & Hakim 1999;
    Fourcaud-Trocme et al. 2003), integrated from the cut-off down by scipy's stiff Radau solver."""
    k = 2.0 / sigma ** 2

    def drift(u):
        return -u + dT * math.exp((u - ut) / dT) + mu

    def rhs(u, y, j):
        return [k * (drift(u) * y[0] - tau * j), y[0]]

    def jac(u, y, j):
        return [[k * drift(u), 0.0], [1.0, 0.0]]

    tol = dict(method="Radau", jac=jac, rtol=1e-11, atol=1e-15)
    above = solve_ivp(rhs, (uc, ur), [0.0, 0.0], args=(1.0,), **tol)
    below = solve_ivp(rhs, (ur, min(ur, mu) - 12 * sigma), above.y[:, -1], args=(0.0,), **tol)
    return 1000.0 / (tref - below.y[1, -1])  # the integral ran downwards


def milne_layer(ds=0.01, dz=0.05, length=9.0, z_max=6.0):
    """Half-space (Milne) problem of the kinetic boundary layer at an absorbing wall, solved by finite
    differences with scipy's sparse LU: ``z dP/ds + d/dz(z P + dP/dz) = 0`` on ``0 < s < length``,
    ``P(0, z < 0) = 0`` (nothing comes out of the wall), far-field data ``(s + 1.46 + z) phi(z)`` entering
    at ``s = length`` (its own error decays within a few units).  Conservative flux form in z (no-flux
    at +-z_max), second-order upwind differences in s along the characteristics ``ds/dt = -z``.

    Returns ``(wall density per unit flux into the wall, extrapolation length)``; the second is known
    exactly, |zeta(1/2)| = 1.4604 (Hagan, Doering & Levermore 1989), and checks the solver.
    """
    import numpy as np
    import scipy.sparse as sp
    from scipy.sparse.linalg import spsolve

    nz = int(round(2 * z_max / dz))
    z = -z_max + (np.arange(nz) + 0.5) * dz
    ns = int(round(length / ds)) + 1
    s = np.arange(ns) * ds
    phi = np.exp(-z * z / 2) / math.sqrt(2 * math.pi)
    zf = -z_max + np.arange(1, nz) * dz
    lo, hi = zf / 2 - 1 / dz, zf / 2 + 1 / dz  # face flux F = lo P_j + hi P_{j+1}
    rows, cols, vals = [], [], []
    rhs = np.zeros(ns * nz)
    for i in range(ns):
        base = i * nz
        for j in range(nz):
            r = base + j
            if (i == 0 and z[j] < 0) or (i == ns - 1 and z[j] > 0):
                rows.append(r)
                cols.append(r)
                vals.append(1.0)
                if i == ns - 1:
                    rhs[r] = (length + 1.46 + z[j]) * phi[j]
                continue
            if j < nz - 1:  # + F_{j+1/2} / dz
                rows += [r, r]
                cols += [r, r + 1]
                vals += [lo[j] / dz, hi[j] / dz]
            if j > 0:  # - F_{j-1/2} / dz
                rows += [r, r]
                cols += [r - 1, r]
                vals += [-lo[j - 1] / dz, -hi[j - 1] / dz]
            if z[j] > 0:
                st = [(0, -1.5), (1, 2.0), (2, -0.5)] if i + 2 <= ns - 1 else [(0, -1.0), (1, 1.0)]
            else:
                st = [(0, 1.5), (-1, -2.0), (-2, 0.5)] if i >= 2 else [(0, 1.0), (-1, -1.0)]
            for off, w in st:
                rows.append(r)
                cols.append(r + off * nz)
                vals.append(z[j] * w / ds)
    m = sp.csr_matrix((vals, (rows, cols)), shape=(ns * nz, ns * nz))
    p = spsolve(m.tocsc(), rhs).reshape(ns, nz)
    dens = p.sum(axis=1) * dz
    flux_wall = float((p[0] * z).sum() * dz)
    mid = (s > 3.0) & (s < length - 3.0)
    a, b = np.polyfit(s[mid], dens[mid], 1)
    return float(dens[0] / flux_wall), float(b / a)


def window_isi_cv(spike_ids, spike_times, t_end, n_neurons, groups=20):
    """ISI CV of a stationary spiking ensemble observed on ``[0, t_end]`` (ms), and its SE.

    Only intervals with both spikes inside the window are seen, and an interval of length ``L`` is
    complete with probability ``(T - L)/T``: the pooled intervals under-represent long ones (measured
    -0.55 % in the CV with windows of ~37 mean intervals, -2 % with ~12).  Each interval is weighted by
    ``1/(T - L)``, which undoes this exactly, for intervals shorter than ``T``, for any stationary point process: the expected number of
    complete intervals in ``[L, L + dL]`` is ``rate (T - L) f(L) dL`` (Palm calculus; from memory: the
    edge correction of interval sampling, Cox & Lewis 1966, "The Statistical Analysis of Series of
    Events").  SE from batch means over ``groups`` groups of neurons (independent neurons; the
    intervals of one neuron may be correlated).
    """
    import numpy as np  # noqa: PLC0415 - local: the module's other helpers need none

    order = np.lexsort((spike_times, spike_ids))
    ids, ts = np.asarray(spike_ids)[order], np.asarray(spike_times)[order]
    same = ids[1:] == ids[:-1]
    isi, owner = np.diff(ts)[same], ids[1:][same]
    weight = 1.0 / (float(t_end) - isi)

    def cv(x, w):
        m1 = np.sum(w * x) / np.sum(w)
        return math.sqrt(max(np.sum(w * x * x) / np.sum(w) - m1 * m1, 0.0)) / m1

    batch = np.array_split(np.arange(n_neurons), groups)
    cvs = np.array([cv(isi[np.isin(owner, g)], weight[np.isin(owner, g)]) for g in batch])
    return cv(isi, weight), float(cvs.std(ddof=1) / math.sqrt(groups))
