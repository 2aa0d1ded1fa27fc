"""Numeric parameters of a circuit named by a path, for continuation and boundary curves.

A path names one number of the circuit (or the same number in several
places, with ``*`` for any name), in the spirit of the dotted keys of sweeps:

==================================  ====================================================  =====
path                                meaning                                               unit
==================================  ====================================================  =====
``cohort.E.drive``                  external drive of cohort ``E`` (a constant)           mV
``cohort.E.sigma_ext``              external white-noise amplitude                        mV
``cohort.E.background.rate``        rate of each Poisson background train                 Hz
``cohort.E.background.weight``      PSP jump of a background spike                        mV
``cohort.E.neuron.tau_m``           any numeric neuron parameter (``threshold``, ...)     model
``cohort.E.noise.hazard.width``     any numeric escape-function parameter                 model
``pathway.I->E.weight``             PSP jump J of the pathway from ``I`` to ``E``         mV
``pathway.I->E.delay``              its delay                                             ms
``pathway.I->E.tau_syn``            its synaptic time constant                            ms
``cohort.*.drive``                  the drive of every cohort, set to the same value      mV
``pathway.I->*.weight``             every pathway from ``I``                              mV
``drive``                           shorthand for ``cohort.*.drive``                      mV
``inhibition``                      factor on every inhibitory weight of the circuit      --
                                    given (1: unchanged): negative weights, and the
                                    conductance jumps of synapses reversing below their
                                    target's threshold
==================================  ====================================================  =====

``drive`` and ``inhibition`` are the axes of the scenario stability map.  Counts
(``size``, ``in_degree``, background ``count``) are integers and cannot be
continued.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

from .circuit import Circuit

__all__ = ["CircuitParameter", "as_parameter"]

#: Fields that are counts (integers), not continuous parameters.
_COUNTS = {"size", "in_degree", "count"}
#: Units of the named fields (neuron and escape-function parameters: see their classes).
_UNITS = {"drive": "mV", "sigma_ext": "mV", "rate": "Hz", "weight": "mV", "delay": "ms", "tau_syn": "ms",
          "tau_m": "ms", "refractory": "ms", "threshold": "mV", "reset": "mV", "rest": "mV",
          "soft_threshold": "mV", "slope_factor": "mV", "cutoff": "mV", "critical": "mV", "width": "mV"}


def _inhibitory(circuit: Circuit, p) -> bool:
    """True for a negative weight, or a conductance synapse whose reversal potential lies below the
    target neuron's threshold (its boundary for models with a spike cut-off)."""
    if p.synapse == "conductance":
        return p.reversal < float(circuit.cohorts[circuit.index(p.target)].population.neuron.boundary)
    return p.weight < 0


def _bad(path, why):
    return ValueError(f"`parameter` = {path!r}: {why}")


@dataclass(frozen=True)
class CircuitParameter:
    """One numeric parameter of a circuit, named by a path (module docstring).

    Parameters
    ----------
    path : str
        For example ``"cohort.E.drive"``, ``"pathway.I->E.weight"``, ``"inhibition"``.

    Examples
    --------
    >>> import popdens
    >>> from popdens.network import Cohort, Circuit, Pathway
    >>> pop = popdens.Population(popdens.LIF(20.0, 20.0, 10.0, 2.0), popdens.WhiteNoise(3.0))
    >>> c = Circuit([Cohort("E", pop, drive=12.0)], [Pathway("E", "E", 0.1, 200, 1.5)])
    >>> p = CircuitParameter("pathway.E->E.weight")
    >>> p.value(c), p.apply(c, 0.2).pathways[0].weight
    (0.1, 0.2)
    """

    path: str

    def __post_init__(self):
        if not isinstance(self.path, str) or not self.path.strip():
            raise _bad(self.path, "expected a path such as 'cohort.E.drive' or 'pathway.I->E.weight'")
        self._parts()

    def _parts(self) -> tuple:
        path = self.path.strip()
        if path in ("drive", "inhibition"):
            return (path,)
        parts = path.split(".")
        if parts[0] == "cohort":
            if len(parts) < 3 or not all(parts):
                raise _bad(path, "expected 'cohort.NAME.FIELD', e.g. 'cohort.E.drive'")
            field = tuple(parts[2:])
            ok = (field in (("drive",), ("sigma_ext",), ("background", "rate"), ("background", "weight"))
                  or (len(field) == 2 and field[0] == "neuron")
                  or (len(field) == 3 and field[:2] == ("noise", "hazard")))
            if not ok:
                if field[-1] in _COUNTS:
                    raise _bad(path, f"`{field[-1]}` is a count (an integer) and cannot be varied continuously")
                raise _bad(path, "a cohort's parameter is one of drive, sigma_ext, background.rate, "
                                 "background.weight, neuron.<parameter>, noise.hazard.<parameter>")
            return ("cohort", parts[1], field)
        if parts[0] == "pathway":
            if len(parts) != 3 or "->" not in parts[1]:
                raise _bad(path, "expected 'pathway.SOURCE->TARGET.FIELD', e.g. 'pathway.I->E.weight'")
            src, tgt = parts[1].split("->", 1)
            if parts[2] not in ("weight", "delay", "tau_syn"):
                if parts[2] in _COUNTS:
                    raise _bad(path, f"`{parts[2]}` is a count (an integer) and cannot be varied continuously")
                raise _bad(path, "a pathway's parameter is one of weight, delay, tau_syn")
            return ("pathway", src.strip(), tgt.strip(), parts[2])
        raise _bad(path, "expected 'drive', 'inhibition', 'cohort.NAME.FIELD' or 'pathway.SOURCE->TARGET.FIELD'")

    @property
    def unit(self) -> str:
        """Unit of the parameter ('' for the inhibition factor and unknown model parameters)."""
        parts = self._parts()
        if parts[0] == "inhibition":
            return ""
        if parts[0] == "drive":
            return "mV"
        last = parts[2][-1] if parts[0] == "cohort" else parts[3]
        return _UNITS.get(last, "")

    @property
    def label(self) -> str:
        """Axis label with the unit."""
        if self.path.strip() == "inhibition":
            return "inhibition factor (x inhibitory weights)"
        return f"{self.path.strip()} ({self.unit})" if self.unit else self.path.strip()

    # ------------------------------------------------------------ matching
    def _cohorts(self, circuit: Circuit, name: str) -> list[int]:
        idx = [k for k, nm in enumerate(circuit.names) if name in ("*", nm)]
        if not idx:
            raise _bad(self.path, f"no cohort {name!r} in the circuit; known: {list(circuit.names)}")
        return idx

    def _pathways(self, circuit: Circuit, src: str, tgt: str) -> list[int]:
        idx = [i for i, p in enumerate(circuit.pathways)
               if src in ("*", p.source) and tgt in ("*", p.target)]
        if not idx:
            raise _bad(self.path, f"no pathway {src}->{tgt} in the circuit; known: "
                                  f"{[p.label for p in circuit.pathways]}")
        return idx

    def value(self, circuit: Circuit) -> float:
        """The parameter's value in ``circuit`` (the first match for a wildcard; 1 for ``inhibition``)."""
        parts = self._parts()
        if parts[0] == "inhibition":
            return 1.0
        if parts[0] == "drive":
            parts = ("cohort", "*", ("drive",))
        if parts[0] == "pathway":
            p = circuit.pathways[self._pathways(circuit, parts[1], parts[2])[0]]
            return float(getattr(p, parts[3]))
        a = circuit.cohorts[self._cohorts(circuit, parts[1])[0]]
        field = parts[2]
        if field == ("drive",):
            return float(a.drive(0.0))
        if field == ("sigma_ext",):
            self._white(a)
            return float(a.sigma_ext(0.0))
        if field[0] == "background":
            self._background(a)
            return float(getattr(a.background, field[1]))
        if field[0] == "neuron":
            return float(self._neuron_params(a)[field[1]])
        return float(self._hazard_params(a)[field[2]])

    def apply(self, circuit: Circuit, value: float) -> Circuit:
        """A copy of ``circuit`` with the parameter set to ``value`` (validated like any circuit)."""
        x = float(value)
        if not math.isfinite(x):
            raise _bad(self.path, f"the value must be finite, got {value!r}")
        parts = self._parts()
        cohorts, pathways = list(circuit.cohorts), list(circuit.pathways)
        if parts[0] == "inhibition":
            inhibitory = [_inhibitory(circuit, p) for p in circuit.pathways]
            pathways = [dataclasses.replace(p, weight=p.weight * x) if inh else p
                        for p, inh in zip(pathways, inhibitory)]
            if not any(inhibitory):
                raise _bad(self.path, "the circuit has no inhibitory pathway to scale (a negative weight, or a "
                                      "conductance synapse reversing below its target's threshold)")
            return Circuit(cohorts, pathways)
        if parts[0] == "drive":
            parts = ("cohort", "*", ("drive",))
        if parts[0] == "pathway":
            for i in self._pathways(circuit, parts[1], parts[2]):
                pathways[i] = dataclasses.replace(pathways[i], **{parts[3]: x})
            return Circuit(cohorts, pathways)
        field = parts[2]
        for k in self._cohorts(circuit, parts[1]):
            a = cohorts[k]
            if field == ("drive",):
                a = dataclasses.replace(a, drive=x)
            elif field == ("sigma_ext",):
                self._white(a)
                a = dataclasses.replace(a, sigma_ext=x)
            elif field[0] == "background":
                self._background(a)
                a = dataclasses.replace(a, background=dataclasses.replace(a.background, **{field[1]: x}))
            elif field[0] == "neuron":
                pars = self._neuron_params(a)
                pars[field[1]] = x
                neuron = type(a.population.neuron)(**pars)
                a = dataclasses.replace(a, population=dataclasses.replace(a.population, neuron=neuron))
            else:
                pars = self._hazard_params(a)
                pars[field[2]] = x
                noise = a.population.noise
                hazard = type(noise.hazard)(**pars)
                a = dataclasses.replace(a, population=dataclasses.replace(
                    a.population, noise=dataclasses.replace(noise, hazard=hazard)))
            cohorts[k] = a
        return Circuit(cohorts, pathways)

    # ------------------------------------------------------------ checks
    def _white(self, a):
        if not a.diffusive:
            raise _bad(self.path, f"cohort {a.name!r} has escape noise; `sigma_ext` applies to white noise")

    def _background(self, a):
        if a.background is None:
            raise _bad(self.path, f"cohort {a.name!r} has no Poisson background")

    def _neuron_params(self, a) -> dict:
        pars = dict(a.population.neuron.parameters())
        key = self._parts()[2][1]
        if key not in pars or not isinstance(pars[key], (int, float)) or isinstance(pars[key], bool):
            raise _bad(self.path, f"{type(a.population.neuron).__name__} has no numeric parameter {key!r}; "
                                  f"its parameters: {sorted(pars)}")
        return pars

    def _hazard_params(self, a) -> dict:
        noise = a.population.noise
        if not hasattr(noise, "hazard"):
            raise _bad(self.path, f"cohort {a.name!r} has white noise; escape-function parameters need escape noise")
        pars = dict(noise.hazard.parameters())
        key = self._parts()[2][2]
        if key not in pars or not isinstance(pars[key], (int, float)) or isinstance(pars[key], bool):
            raise _bad(self.path, f"{type(noise.hazard).__name__} has no numeric parameter {key!r}; "
                                  f"its parameters: {sorted(pars)}")
        return pars


def as_parameter(parameter) -> CircuitParameter:
    """A :class:`CircuitParameter` from a path or an existing one."""
    return parameter if isinstance(parameter, CircuitParameter) else CircuitParameter(parameter)
