"""Network scenario files: ``[[cohort]]``, ``[[pathway]]`` and ``[network]`` tables.

A scenario that holds ``[[cohort]]`` tables describes a network of coupled
populations instead of a single population::

    [[cohort]]
    name = "E"
    size = 2000                      # neurons in the spiking twin
    drive = 24.0                     # external drive (mV)
    sigma_ext = 5.0                  # external noise (mV; white noise only, default: noise.sigma)
    neuron = { model = "LIF", tau_m = 20.0, threshold = 20.0, reset = 10.0, refractory = 2.0 }
    noise = { kind = "white", sigma = 5.0 }
    # background = { rate = 10.0, weight = 0.1, count = 100 }   # Poisson input: Hz, mV, sources
    #   (optional tau_syn, synapse and reversal as for a pathway)

    [[pathway]]
    source = "E"
    target = "I"
    weight = 0.1                     # PSP amplitude J (mV)
    in_degree = 200                  # C
    delay = 1.5                      # ms
    tau_syn = 0.0                    # ms; 0: instantaneous, > 0: exponential kernel
    synapse = "current"              # "current" (default; diffusion approximation), "shot" (finite
                                     # PSPs: jumps of `weight`, tau_syn 0, the target's sigma_ext 0)
    # reversal = 70.0                # or "conductance": `weight` is a conductance jump (leak units)
                                     # towards `reversal` (mV); the target cohort needs sigma_ext = 0

    [network]
    t_end = 200.0                    # ms (0: no time-domain run)
    dt = 0.1                         # ms
    record_interval = 1.0            # ms
    montecarlo = true                # also simulate the spiking network
    finite_size = true               # also integrate the escape-noise cohorts as finite (their `size`)
    seed = 1
    fixed_points = true              # self-consistent stationary states ...
    stability = true                 # ... and their linear stability
    rate_range = [0.1, 300.0]        # Hz, where fixed points are searched

    [network.stability_map]          # optional: stability over two parameters
    inhibition = { start = 2.0, stop = 8.0, count = 5 }   # factor on every inhibitory (negative) weight
    drive = { start = 15.0, stop = 30.0, count = 4 }      # external drive of every cohort (mV)
    curves = true                    # also the fold and onset curves by continuation, drawn on the map

    [network.bifurcation]            # optional: branches of fixed points over one parameter
    parameter = "cohort.E.drive"     # a path: cohort.NAME.FIELD, pathway.SOURCE->TARGET.FIELD,
                                     # "drive" or "inhibition" (see popdens.network.parameters)
    start = 10.0                     # span of the parameter, in its unit
    stop = 30.0
    max_step = 0.02                  # largest continuation step (scaled arclength; default 0.02)
    seeds = 5                        # parameter values where branches are seeded (default 5)
    max_frequency = 500.0            # Hz, highest oscillation frequency searched (default 500)

The objects are those of :mod:`popdens.network`, so a file and the
equivalent script give the same numbers.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from pathlib import Path

from ..exceptions import ScenarioError
from ..network.circuit import Cohort, Circuit, Pathway, PoissonBackground
from ._schema import build, check_keys, err, flatten, number, parse_meta
from .single import parse_population

__all__ = ["NetworkScenario", "parse_network_scenario", "NETWORK_TOP_LEVEL"]

NETWORK_TOP_LEVEL = {"scenario", "cohort", "pathway", "network"}
COHORT_KEYS = {"name", "size", "drive", "sigma_ext", "neuron", "noise", "background"}
PATHWAY_KEYS = {"source", "target", "weight", "in_degree", "delay", "tau_syn", "synapse", "reversal"}
BACKGROUND_REQUIRED = {"rate", "weight", "count"}
BACKGROUND_KEYS = BACKGROUND_REQUIRED | {"tau_syn", "synapse", "reversal"}
NETWORK_KEYS = {"t_end", "dt", "record_interval", "montecarlo", "seed", "fixed_points", "stability",
                "rate_range", "stability_map", "bifurcation", "finite_size"}
MAP_KEYS = {"inhibition", "drive", "curves"}
BIFURCATION_KEYS = {"parameter", "start", "stop", "max_step", "seeds", "max_frequency"}
#: Most seeds of a bifurcation diagram (each is a fixed-point search).
MAX_SEEDS = 100
#: Largest accepted spiking-twin size per cohort and in-degree (guards against typos).
MAX_SIZE = 1_000_000
#: Most points of a stability map (each costs a fixed-point search and a root search, ~1 s).
MAX_MAP_POINTS = 2500
#: Default search range of fixed points (Hz).
DEFAULT_RATE_RANGE = (0.01, 500.0)


@dataclass(frozen=True)
class NetworkScenario:
    """A validated network scenario."""

    source: Path
    title: str
    output: Path
    circuit: Circuit
    t_end: float
    dt: float | None
    record_interval: float | None
    montecarlo: bool
    seed: int
    fixed_points: bool
    stability: bool
    rate_range: tuple
    digest: str
    raw: dict
    #: ``(inhibition factors, drives in mV)`` of the stability map, or None
    stability_grid: tuple | None = None
    #: draw the continued boundary curves on the stability map
    map_curves: bool = False
    #: settings of the bifurcation diagram (parameter, span, max_step, seeds, max_frequency), or None
    bifurcation: dict | None = None
    #: Also integrate the escape-noise cohorts as populations of their ``size`` (mesoscopic equations).
    finite_size: bool = False

    def circuit_at(self, inhibition: float, drive: float) -> Circuit:
        """The circuit with every inhibitory weight scaled by ``inhibition`` and every external drive
        set to ``drive`` (mV): one point of the stability map."""
        import dataclasses

        c = self.circuit
        cohorts = [dataclasses.replace(a, drive=float(drive)) for a in c.cohorts]
        pathways = [dataclasses.replace(p, weight=p.weight * (inhibition if p.weight < 0 else 1.0))
                    for p in c.pathways]
        return Circuit(cohorts, pathways)


def _integer(src, table, key, value, lo, hi) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or not lo <= value <= hi:
        raise err(src, table, key, value, f"an integer from {lo} to {hi}")
    return value


def _flag(src, table, key, value) -> bool:
    if not isinstance(value, bool):
        raise err(src, table, key, value, "true or false")
    return value


def _array_of_tables(src, data, key, required: bool):
    items = data.get(key)
    if items is None:
        if required:
            raise ScenarioError(f"{src}: a network needs at least one `{key}` table ([[{key}]])")
        return []
    if not isinstance(items, list) or not all(isinstance(x, dict) for x in items):
        raise err(src, key, None, items, f"an array of tables ([[{key}]])")
    return items


def _synapse_keys(src, table, t: dict) -> dict:
    """The optional ``tau_syn`` (ms), ``synapse`` (kind) and ``reversal`` (mV) of a pathway or background."""
    out = {}
    for key in ("tau_syn", "reversal"):
        if key in t:
            out[key] = number(src, table, key, t[key])
    if "synapse" in t:
        if not isinstance(t["synapse"], str):
            raise err(src, table, "synapse", t["synapse"], "'current', 'shot' or 'conductance'")
        out["synapse"] = t["synapse"]
    return out


def parse_network_scenario(data: dict, source: str | Path = "<scenario>") -> NetworkScenario:
    """Validate a network scenario given as a dict (as read from TOML)."""
    src = str(source)
    check_keys(src, "", data, NETWORK_TOP_LEVEL, {"cohort"})
    title, out_path = parse_meta(src, data)

    cohorts = []
    for i, a in enumerate(_array_of_tables(src, data, "cohort", True)):
        name = a.get("name")
        table = f"cohort {name}" if isinstance(name, str) and name.isidentifier() else f"cohort #{i + 1}"
        check_keys(src, table, a, COHORT_KEYS, {"name", "neuron", "noise"})
        if not isinstance(name, str) or not name.strip():
            raise err(src, table, "name", name, "a non-empty string")
        pop = parse_population(src, a["neuron"], a["noise"], prefix=f"{table}.")
        params = {"name": name, "population": pop,
                  "size": _integer(src, table, "size", a.get("size", 1000), 1, MAX_SIZE),
                  "drive": number(src, table, "drive", a.get("drive", 0.0))}
        if "sigma_ext" in a:
            params["sigma_ext"] = number(src, table, "sigma_ext", a["sigma_ext"])
        if "background" in a:
            b = a["background"]
            bt = f"{table}.background"
            check_keys(src, bt, b, BACKGROUND_KEYS, BACKGROUND_REQUIRED)
            params["background"] = build(src, bt, PoissonBackground,
                                          {"rate": number(src, bt, "rate", b["rate"]),
                                           "weight": number(src, bt, "weight", b["weight"]),
                                           "count": _integer(src, bt, "count", b["count"], 1, MAX_SIZE),
                                           **_synapse_keys(src, bt, b)})
        cohorts.append(build(src, table, Cohort, params))

    pathways = []
    for i, p in enumerate(_array_of_tables(src, data, "pathway", False)):
        table = f"pathway #{i + 1}"
        check_keys(src, table, p, PATHWAY_KEYS, {"source", "target", "weight", "in_degree"})
        for key in ("source", "target"):
            if not isinstance(p[key], str):
                raise err(src, table, key, p[key], "a cohort name")
        params = {"source": p["source"], "target": p["target"],
                  "weight": number(src, table, "weight", p["weight"]),
                  "in_degree": _integer(src, table, "in_degree", p["in_degree"], 0, MAX_SIZE)}
        if "delay" in p:
            params["delay"] = number(src, table, "delay", p["delay"])
        params.update(_synapse_keys(src, table, p))
        pathways.append(build(src, table, Pathway, params))
    circuit = build(src, "pathway", Circuit, {"cohorts": cohorts, "pathways": pathways})

    net = data.get("network", {})
    check_keys(src, "network", net, NETWORK_KEYS)
    t_end = number(src, "network", "t_end", net.get("t_end", 0.0))
    if t_end < 0:
        raise err(src, "network", "t_end", t_end, "a duration >= 0 (ms; 0: no time-domain run)")
    dt = number(src, "network", "dt", net["dt"]) if "dt" in net else None
    rec = number(src, "network", "record_interval", net["record_interval"]) if "record_interval" in net else None
    seed = _integer(src, "network", "seed", net.get("seed", 0), 0, 2**63 - 1)
    rr = net.get("rate_range", list(DEFAULT_RATE_RANGE))
    if (not isinstance(rr, list) or len(rr) != 2
            or not 0 <= number(src, "network", "rate_range", rr[0]) < number(src, "network", "rate_range", rr[1])):
        raise err(src, "network", "rate_range", rr, "[low, high] in Hz with 0 <= low < high")
    want_fp = _flag(src, "network", "fixed_points", net.get("fixed_points", True))
    want_st = _flag(src, "network", "stability", net.get("stability", want_fp))
    if want_st and not want_fp:
        raise err(src, "network", "stability", True, "false when `fixed_points` is false (stability is "
                   "analysed at the fixed points)")
    montecarlo = _flag(src, "network", "montecarlo", net.get("montecarlo", False))
    if montecarlo and t_end == 0:
        raise err(src, "network", "montecarlo", True, "false, or a `t_end` > 0 for the spiking twin to run")
    finite = _flag(src, "network", "finite_size", net.get("finite_size", False))
    if finite and (t_end == 0 or all(a.diffusive for a in cohorts)):
        raise err(src, "network", "finite_size", True, "false, or a `t_end` > 0 and an escape-noise cohort "
                  "(finite white-noise cohorts are simulated by the spiking twin, `montecarlo`)")
    if finite and any(a.population.neuron.adaptation for a in cohorts if not a.diffusive):
        raise err(src, "network", "finite_size", True, "false for adapting escape-noise cohorts (not supported yet)")
    if t_end == 0 and not want_fp:
        raise ScenarioError(f"{src}: [network] nothing to compute: give `t_end` > 0 or `fixed_points` = true")
    grid = None
    map_curves = False
    if "stability_map" in net:
        from .analyses import parse_values

        sm = net["stability_map"]
        check_keys(src, "network.stability_map", sm, MAP_KEYS, MAP_KEYS - {"curves"})
        map_curves = _flag(src, "network.stability_map", "curves", sm.get("curves", False))
        if not any(p.weight < 0 for p in pathways):
            raise ScenarioError(f"{src}: [network.stability_map] key `inhibition`: the network has no "
                                "inhibitory (negative-weight) pathway to scale")
        grid = (parse_values(src, "network.stability_map", "inhibition", sm["inhibition"], positive=True),
                parse_values(src, "network.stability_map", "drive", sm["drive"]))
        if grid[0].size * grid[1].size > MAX_MAP_POINTS:
            raise err(src, "network.stability_map", "inhibition", sm["inhibition"],
                       f"at most {MAX_MAP_POINTS} map points in all")
        if map_curves and not want_st:
            raise err(src, "network.stability_map", "curves", True, "false when [network] `stability` is false")
        if map_curves and min(grid[0].size, grid[1].size) < 2:
            raise err(src, "network.stability_map", "curves", True,
                      "false, or at least two values of `inhibition` and of `drive` (the curves span them)")
    bifurcation = _parse_bifurcation(src, net["bifurcation"], circuit) if "bifurcation" in net else None
    digest = hashlib.sha256(repr(sorted(flatten(data))).encode()).hexdigest()[:16]
    return NetworkScenario(source=Path(src), title=title, output=out_path, circuit=circuit, t_end=t_end, dt=dt,
                           record_interval=rec, montecarlo=montecarlo, seed=seed, fixed_points=want_fp,
                           stability=want_st, rate_range=(float(rr[0]), float(rr[1])), digest=digest, raw=data,
                           stability_grid=grid, map_curves=map_curves, bifurcation=bifurcation,
                           finite_size=finite)


def _parse_bifurcation(src, b, circuit) -> dict:
    """The ``[network.bifurcation]`` table: a parameter path that fits the circuit and its span."""
    from ..network.parameters import CircuitParameter

    table = "network.bifurcation"
    if not isinstance(b, dict):
        raise err(src, table, None, b, "a table")
    check_keys(src, table, b, BIFURCATION_KEYS, {"parameter", "start", "stop"})
    path = b["parameter"]
    if not isinstance(path, str):
        raise err(src, table, "parameter", path, "a parameter path such as 'cohort.E.drive'")
    lo, hi = number(src, table, "start", b["start"]), number(src, table, "stop", b["stop"])
    if not lo < hi:
        raise err(src, table, "stop", hi, f"a value above `start` ({lo!r})")
    try:
        par = CircuitParameter(path)
        par.apply(circuit, lo)
        par.apply(circuit, hi)
    except (ValueError, TypeError) as exc:
        raise ScenarioError(f"{src}: [{table}] key `parameter`: {exc}") from None
    max_step = number(src, table, "max_step", b.get("max_step", 0.02))
    if not 0 < max_step <= 1:
        raise err(src, table, "max_step", max_step, "a number in (0, 1] (scaled arclength)")
    f_max = number(src, table, "max_frequency", b.get("max_frequency", 500.0))
    if not 0 < f_max <= 1e5:
        raise err(src, table, "max_frequency", f_max, "a frequency in (0, 1e5] Hz")
    return {"parameter": path, "span": (lo, hi), "max_step": max_step,
            "seeds": _integer(src, table, "seeds", b.get("seeds", 5), 1, MAX_SEEDS), "max_frequency": f_max}
