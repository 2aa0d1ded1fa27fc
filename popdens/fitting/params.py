"""Named model parameters: which ones a fit frees, and the population they give.

A fit names each free parameter as the model does: a neuron parameter
(``tau_m``, ``threshold``, ``reset``, ``refractory``, ``rest``...), an escape
function's (``rate``, ``width``, ``slope``, ``max_rate``, ``c1``...), the
white-noise ``sigma``, the coloured-noise ``sigma`` and ``tau_syn``, the
shot-noise input (``exc_rate``, ``exc_psp``, ``inh_rate``, ``inh_psp``), the
conductance input (``exc_rate``, ``exc_weight``, ``exc_tau``, ``exc_reversal``
and the ``inh_`` ones), an
adaptation component's ``adaptation[k].jump``, ``adaptation[k].tau`` or
``adaptation[k].coupling`` (``k`` its place in the neuron's ``adaptation``
list, from 0), or a drive parameter of the fit (``mu`` for a
constant drive; ``scale`` and ``offset`` mapping a stimulus to the drive,
``scale * stimulus + offset``).  Positive quantities are optimised on a log
scale.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, replace

import numpy as np

from .. import _validation as v
from ..model.hazard import CustomEscape
from ..model.neurons import CustomNeuron
from ..model.conductance import ConductanceNoise
from ..model.noise import EscapeNoise, Population, WhiteNoise
from ..model.shot import ShotNoise
from ..model.synaptic import ColouredNoise

__all__ = ["ParameterSet", "UNITS", "is_positive", "unit_of"]

#: Unit of every parameter name a fit accepts.
UNITS = {
    "tau_m": "ms", "threshold": "mV", "reset": "mV", "refractory": "ms", "rest": "mV", "soft_threshold": "mV",
    "slope_factor": "mV", "cutoff": "mV", "critical": "mV",
    "rate": "Hz", "width": "mV", "slope": "Hz/mV", "max_rate": "Hz", "sigma": "mV", "tau": "ms",
    "c1": "1", "c2": "1", "mu": "mV", "scale": "mV per stimulus unit", "offset": "mV",
    "tau_syn": "ms", "exc_rate": "Hz", "exc_psp": "mV", "inh_rate": "Hz", "inh_psp": "mV",
    "exc_weight": "leak conductance", "inh_weight": "leak conductance", "exc_tau": "ms", "inh_tau": "ms",
    "exc_reversal": "mV", "inh_reversal": "mV",
}
#: Parameters that must stay positive (fitted as logarithms).
POSITIVE = {"tau_m", "refractory", "slope_factor", "rate", "width", "slope", "max_rate", "sigma", "tau", "c1", "c2",
            "tau_syn", "exc_rate", "exc_psp", "inh_rate", "inh_psp", "exc_weight", "inh_weight", "exc_tau", "inh_tau"}
#: Numeric parameters of each diffusive noise model (the rest of the model is kept as it is).
NOISE_PARAMETERS = {WhiteNoise: ("sigma",), ColouredNoise: ("sigma", "tau_syn"),
                    ShotNoise: ("exc_rate", "exc_psp", "inh_rate", "inh_psp"),
                    ConductanceNoise: ("exc_rate", "exc_weight", "exc_tau", "exc_reversal", "inh_rate", "inh_weight",
                                       "inh_tau", "inh_reversal")}
#: Names of adaptation parameters: ``adaptation[k].tau`` (ms), ``.jump`` (mV), ``.coupling`` (1).
ADAPTATION_NAME = re.compile(r"^adaptation\[(\d+)\]\.(tau|jump|coupling)$")
_ADAPTATION_UNITS = {"tau": "ms", "jump": "mV", "coupling": "1"}


def unit_of(name: str) -> str:
    """Unit of a parameter name a fit accepts."""
    m = ADAPTATION_NAME.match(name)
    return _ADAPTATION_UNITS[m.group(2)] if m else UNITS[name]


def is_positive(name: str) -> bool:
    """True for parameters that must stay positive (fitted as logarithms)."""
    m = ADAPTATION_NAME.match(name)
    return m.group(2) in ("tau", "jump") if m else name in POSITIVE


def _init_names(obj) -> list:
    """The constructor's parameter names of an escape function (its ``parameters()`` keys that are arguments)."""
    import inspect

    args = inspect.signature(type(obj).__init__).parameters
    return [k for k in obj.parameters() if k in args]


@dataclass(frozen=True)
class ParameterSet:
    """The free parameters of a fit and how to turn their values into a model.

    Parameters
    ----------
    population : Population
        The model; its parameter values are the fixed ones.
    free : sequence of str or mapping
        Names to fit, or ``{name: start}`` / ``{name: (low, high)}`` (start at
        the middle; the range bounds the search).
    drive_names : tuple of str
        Drive parameters this fit knows (e.g. ``("mu",)``) with their
        defaults in ``drive_values``.
    """

    population: Population
    names: tuple
    start: np.ndarray
    bounds: tuple
    drive_values: dict

    @classmethod
    def make(cls, population, free, drive_values):
        if not isinstance(population, Population):
            raise ValueError(f"`population` must be a popdens.Population, got {population!r}")
        if isinstance(population.neuron, CustomNeuron):
            raise ValueError("fitting a CustomNeuron is not supported: write the model as LIF, EIF, QIF or PIF")
        noise = population.noise
        if isinstance(noise, EscapeNoise) and isinstance(noise.hazard, CustomEscape):
            raise ValueError("fitting a CustomEscape is not supported: use a built-in escape function")
        if isinstance(noise, (WhiteNoise, ColouredNoise)) and not isinstance(noise.sigma, (int, float)):
            raise ValueError(f"fitting needs a constant noise `sigma` (mV), got {noise.sigma!r}")
        current = cls.current_values(population, drive_values)
        if isinstance(free, str):
            free = [free]
        items = list(free.items()) if isinstance(free, dict) else [(n, None) for n in free]
        if not items:
            raise ValueError("`free` names no parameter to fit")
        names, start, bounds = [], [], []
        for name, spec in items:
            if name not in current:
                raise ValueError(f"`free`: {name!r} is not a parameter of this model; choose from {sorted(current)}")
            if name in names:
                raise ValueError(f"`free`: {name!r} appears twice")
            lo, hi = -math.inf, math.inf
            if spec is None:
                x0 = current[name]
            elif isinstance(spec, (tuple, list)):
                if len(spec) != 2:
                    raise ValueError(f"`free[{name!r}]` must be a start value or a (low, high) range, got {spec!r}")
                lo, hi = v.as_finite_float(f"free[{name!r}][0]", spec[0]), v.as_finite_float(f"free[{name!r}][1]", spec[1])
                v.less_than(f"free[{name!r}][0]", lo, f"free[{name!r}][1]", hi)
                x0 = math.sqrt(lo * hi) if is_positive(name) and lo > 0 else 0.5 * (lo + hi)
            else:
                x0 = v.as_finite_float(f"free[{name!r}]", spec)
            if name.endswith(".coupling"):
                lo = max(lo, 0.0)
            if is_positive(name):
                if x0 <= 0:
                    raise ValueError(f"`free[{name!r}]`: the start value must be > 0, got {x0!r}")
                lo = max(lo, 0.0)
            names.append(name)
            start.append(float(x0))
            bounds.append((lo, hi))
        return cls(population, tuple(names), np.array(start), tuple(bounds), dict(drive_values))

    @staticmethod
    def current_values(population, drive_values) -> dict:
        out = {}
        for k, val in population.neuron.parameters().items():
            if k != "adaptation":
                out[k] = float(val)
        for k, term in enumerate(population.neuron.adaptation):
            for key, val in term.parameters().items():
                if key != "kind":
                    out[f"adaptation[{k}].{key}"] = float(val)
        if isinstance(population.noise, EscapeNoise):
            for k in _init_names(population.noise.hazard):
                out[k] = float(population.noise.hazard.parameters()[k])
        else:
            for k in NOISE_PARAMETERS[type(population.noise)]:
                if getattr(population.noise, k) is not None:
                    out[k] = float(getattr(population.noise, k))
        out.update({k: float(val) for k, val in drive_values.items()})
        return out

    # -- transformed coordinates (log for positive parameters) --------------------
    def to_z(self, x) -> np.ndarray:
        return np.array([math.log(xi) if is_positive(n) else xi for n, xi in zip(self.names, x)])

    def from_z(self, z) -> np.ndarray:
        return np.array([math.exp(min(zi, 700.0)) if is_positive(n) else zi for n, zi in zip(self.names, z)])

    def z_bounds(self):
        out = []
        for n, (lo, hi) in zip(self.names, self.bounds):
            if is_positive(n):
                out.append((math.log(lo) if lo > 0 else None, math.log(hi) if math.isfinite(hi) else None))
            else:
                out.append((lo if math.isfinite(lo) else None, hi if math.isfinite(hi) else None))
        return out

    def values(self, x) -> dict:
        """All parameter values (fixed and free) with the free ones set to ``x``."""
        vals = self.current_values(self.population, self.drive_values)
        vals.update(dict(zip(self.names, (float(xi) for xi in x))))
        return vals

    def build(self, x):
        """``(population, drive_values)`` at free values ``x``; ``ValueError`` if the model rejects them."""
        vals = self.values(x)
        nrn = self.population.neuron
        kw = {k: vals[k] for k in nrn.parameters() if k != "adaptation"}
        if nrn.adaptation:
            kw["adaptation"] = [replace(term, **{key: vals[f"adaptation[{k}].{key}"] for key in term.parameters()
                                                 if key != "kind"})
                                for k, term in enumerate(nrn.adaptation)]
        nrn_new = type(nrn)(**kw)
        noise = self.population.noise
        if isinstance(noise, EscapeNoise):
            hz = noise.hazard
            noise_new = EscapeNoise(type(hz)(**{k: vals[k] for k in _init_names(hz)}))
        else:
            # the same noise model (coloured and shot noise keep their kind and fixed settings)
            noise_new = replace(noise, **{k: vals[k] for k in NOISE_PARAMETERS[type(noise)] if k in vals})
        return Population(nrn_new, noise_new), {k: vals[k] for k in self.drive_values}
