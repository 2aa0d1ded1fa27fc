"""Benchmark: network Monte Carlo twin vs mean-field time integration.

A sparse excitatory-inhibitory LIF network with 10^4 neurons (8000 E,
2000 I), in-degree 10^3 (800 E + 200 I partners, J = 0.1 mV, g = 5,
delay 1.5 ms; the parameter set of Brunel 2000, J. Comput. Neurosci. 8:183,
with the external Poisson input replaced by its white-noise equivalent) in
its asynchronous state, 1 s of biological time, dt = 0.1 ms.  Prints the
Monte Carlo wall time, neuron updates and synaptic events per second, the
mean-field integration's wall time for the same second, their ratio, the
time-averaged rates of both, and the machine load (these machines are
shared).

Run:  popdens bench network
"""

from __future__ import annotations

import math
import os
import time

import popdens
from popdens.network import Cohort, Circuit, Pathway, montecarlo_network, simulate_network

T_END = 1000.0  # ms
DT = 0.1  # ms


def circuit(g=5.0, ratio=2.0, n_e=8000, n_i=2000):
    j, c_e, c_i, tau = 0.1, 800, 200, 20.0
    nu_thr = 20.0 / (j * c_e * tau) * 1e3  # Hz, external rate that brings the mean to threshold
    nu_x = ratio * nu_thr
    mu_x = tau * j * c_e * nu_x * 1e-3
    s_x = math.sqrt(tau * j * j * c_e * nu_x * 1e-3)
    pop = popdens.Population(popdens.LIF(tau, 20.0, 10.0, 2.0), popdens.WhiteNoise(s_x))
    asm = [Cohort("E", pop, size=n_e, drive=mu_x), Cohort("I", pop, size=n_i, drive=mu_x)]
    pw = [Pathway("E", "E", j, c_e, 1.5), Pathway("E", "I", j, c_e, 1.5),
          Pathway("I", "E", -g * j, c_i, 1.5), Pathway("I", "I", -g * j, c_i, 1.5)]
    return Circuit(asm, pw)


def main() -> None:
    c = circuit()
    # compile / load the caches outside the timings
    small = Circuit([Cohort(a.name, a.population, size=1001, drive=a.drive) for a in c.cohorts], c.pathways)
    montecarlo_network(small, 1.0, dt=DT, burn_in=0.0)
    simulate_network(c, 1.0, dt=DT)
    load0 = os.getloadavg()

    t0 = time.perf_counter()
    mc = montecarlo_network(c, T_END, dt=DT, seed=1, burn_in=0.0)
    t_mc = time.perf_counter() - t0
    t0 = time.perf_counter()
    mf = simulate_network(c, T_END, dt=DT, initial_rates=mc.mean_rate(500.0))
    t_mf = time.perf_counter() - t0
    load1 = os.getloadavg()

    n_neurons = mc.diagnostics["n_neurons"]
    updates = n_neurons * mc.diagnostics["steps"]
    events = mc.diagnostics["synaptic_events"]
    print(f"network: {n_neurons} LIF neurons, {mc.diagnostics['n_synapses']:.3g} synapses, "
          f"{T_END:g} ms at dt = {DT:g} ms")
    print(f"Monte Carlo: {t_mc:.2f} s wall; {updates / t_mc:.3g} neuron updates/s "
          f"({1e9 * t_mc / updates:.1f} ns each), {events / t_mc:.3g} synaptic events/s "
          f"({events:.3g} events, {mc.diagnostics['n_spikes']} spikes)")
    print(f"mean-field integration: {t_mf:.2f} s wall ({1e6 * t_mf / mf.diagnostics['steps']:.0f} us per step "
          f"for {c.n} populations)")
    print(f"ratio Monte Carlo / mean field: {t_mc / t_mf:.1f}")
    print(f"rates, last 500 ms (Hz): Monte Carlo {mc.mean_rate(500.0).round(3)}, "
          f"mean field {mf.mean_rate(500.0).round(3)}")
    print(f"load average (1 min) before/after: {load0[0]:.2f} / {load1[0]:.2f} on {os.cpu_count()} cores")


if __name__ == "__main__":
    main()
