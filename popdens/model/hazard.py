"""Escape functions: the instantaneous firing rate (hazard) in Hz.

An escape function maps the membrane potential ``u`` (mV), the neuron's
``threshold`` (mV) and, for some functions, the slope ``dudt`` (mV/ms) to a
rate in Hz.  Each class provides vectorised ``rate`` and ``slope`` (dh/du in
Hz/mV) and a compiled representation used by the solvers.

Examples
--------
>>> h = Exponential(rate=10.0, width=2.0)
>>> float(h.rate(20.0, threshold=20.0))
10.0
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import ClassVar, Mapping

import numpy as np

from .. import _validation as v
from .expressions import Expression, parse_expression

__all__ = ["EscapeFunction", "Exponential", "Linear", "ErfEscape", "ArrheniusCurrent", "CustomEscape"]

CODE_EXP, CODE_LINEAR, CODE_ERF, CODE_ARRHENIUS, CODE_CUSTOM = 0, 1, 2, 3, 4

#: Largest exponent evaluated in exponential escape (beyond it the hazard is
#: capped: exp(700) is near the float64 limit).
MAX_EXPONENT = 700.0

_EMPTY_PROGRAM = (np.zeros(1, dtype=np.int64), np.zeros(1))


def _out(x):
    return x if np.ndim(x) else float(x)


@dataclass(frozen=True)
class EscapeFunction:
    """Base class of escape functions (do not instantiate)."""

    code: ClassVar[int] = -1
    #: True if the hazard depends on du/dt.
    uses_slope: ClassVar[bool] = False

    def rate(self, u, threshold, dudt=0.0):  # pragma: no cover - abstract
        """Hazard in Hz."""
        raise NotImplementedError

    def slope(self, u, threshold, dudt=0.0):  # pragma: no cover - abstract
        """Derivative dh/du of the hazard, in Hz/mV."""
        raise NotImplementedError

    @property
    def kernel_params(self) -> np.ndarray:
        raise NotImplementedError  # pragma: no cover

    @property
    def program(self):
        return _EMPTY_PROGRAM

    def parameters(self) -> dict:
        return {k: getattr(self, k) for k in self.__dataclass_fields__ if not k.startswith("_")}


@dataclass(frozen=True)
class Exponential(EscapeFunction):
    """Exponential escape: ``h(u) = rate * exp((u - threshold)/width)``.

    Parameters
    ----------
    rate : float
        Hazard at threshold (Hz), > 0.
    width : float
        Softness of the threshold (mV), > 0; small widths approach a hard
        threshold.
    """

    rate_at_threshold: float
    width: float
    code: ClassVar[int] = CODE_EXP

    def __init__(self, rate, width):
        object.__setattr__(self, "rate_at_threshold", v.positive("rate", rate))
        object.__setattr__(self, "width", v.positive("width", width))

    def rate(self, u, threshold, dudt=0.0):
        x = np.minimum((np.asarray(u, dtype=float) - threshold) / self.width, MAX_EXPONENT)
        return _out(self.rate_at_threshold * np.exp(x))

    def slope(self, u, threshold, dudt=0.0):
        return _out(np.asarray(self.rate(u, threshold)) / self.width)

    @property
    def kernel_params(self):
        return np.array([self.rate_at_threshold, self.width])

    def parameters(self):
        return {"rate": self.rate_at_threshold, "width": self.width}


@dataclass(frozen=True)
class Linear(EscapeFunction):
    """Piecewise-linear escape: ``h(u) = slope * max(0, u - threshold)``.

    Parameters
    ----------
    slope : float
        Hz per mV above threshold, > 0.
    """

    slope_hz_per_mv: float
    code: ClassVar[int] = CODE_LINEAR

    def __init__(self, slope):
        object.__setattr__(self, "slope_hz_per_mv", v.positive("slope", slope))

    def rate(self, u, threshold, dudt=0.0):
        return _out(self.slope_hz_per_mv * np.maximum(0.0, np.asarray(u, dtype=float) - threshold))

    def slope(self, u, threshold, dudt=0.0):
        return _out(np.where(np.asarray(u, dtype=float) > threshold, self.slope_hz_per_mv, 0.0))

    @property
    def kernel_params(self):
        return np.array([self.slope_hz_per_mv])

    def parameters(self):
        return {"slope": self.slope_hz_per_mv}


@dataclass(frozen=True)
class ErfEscape(EscapeFunction):
    """Saturating escape: ``h(u) = max_rate * (1 + erf((u - threshold)/(sqrt(2) width)))/2``.

    The hazard rises sigmoidally through threshold (half of ``max_rate`` at
    threshold) and saturates at ``max_rate``.

    Parameters
    ----------
    max_rate : float
        Saturation rate (Hz), > 0.
    width : float
        Width of the transition (mV), > 0.
    """

    max_rate: float
    width: float
    code: ClassVar[int] = CODE_ERF

    def __init__(self, max_rate, width):
        object.__setattr__(self, "max_rate", v.positive("max_rate", max_rate))
        object.__setattr__(self, "width", v.positive("width", width))

    def rate(self, u, threshold, dudt=0.0):
        from scipy.special import erfc  # noqa: PLC0415 - scipy.special costs ~0.6 s: loaded on first use

        z = (threshold - np.asarray(u, dtype=float)) / (math.sqrt(2.0) * self.width)
        return _out(0.5 * self.max_rate * erfc(z))

    def slope(self, u, threshold, dudt=0.0):
        z = (np.asarray(u, dtype=float) - threshold) / self.width
        return _out(self.max_rate * np.exp(-0.5 * z * z) / (math.sqrt(2.0 * math.pi) * self.width))

    @property
    def kernel_params(self):
        return np.array([self.max_rate, self.width])


@dataclass(frozen=True)
class ArrheniusCurrent(EscapeFunction):
    """Arrhenius-and-current escape rate (Plesser & Gerstner 2000, Neural Comput. 12:367).

    .. math::
        h = \\left[\\frac{c_1}{\\tau} + \\frac{c_2}{\\sigma}\\,[\\dot u]_+\\right]
            \\exp\\!\\left(-\\frac{[\\vartheta - u]_+^2}{\\sigma^2}\\right)

    where :math:`[x]_+ = \\max(x, 0)`.  The first term is a thermal
    (Arrhenius) escape over the barrier, the second the drift-driven
    crossing when the potential rises.  Above threshold the exponential
    factor is 1.

    Parameters
    ----------
    sigma : float
        Amplitude of the membrane-potential fluctuations the escape rate
        stands for (mV), > 0.
    tau : float
        Time scale of the thermal term (ms), > 0; usually the membrane
        time constant.
    c1 : float
        Dimensionless weight of the thermal term, >= 0.
    c2 : float
        Dimensionless weight of the drift term, >= 0.
    """

    sigma: float
    tau: float
    c1: float
    c2: float
    code: ClassVar[int] = CODE_ARRHENIUS
    uses_slope: ClassVar[bool] = True

    def __init__(self, sigma, tau, c1, c2):
        object.__setattr__(self, "sigma", v.positive("sigma", sigma))
        object.__setattr__(self, "tau", v.positive("tau", tau))
        object.__setattr__(self, "c1", v.non_negative("c1", c1))
        object.__setattr__(self, "c2", v.non_negative("c2", c2))
        if self.c1 == 0.0 and self.c2 == 0.0:
            raise ValueError("`c1` and `c2` cannot both be 0 (the hazard would vanish)")

    def _prefactor(self, dudt):
        # 1/ms -> Hz: factor 1000
        return 1000.0 * (self.c1 / self.tau + self.c2 * np.maximum(np.asarray(dudt, dtype=float), 0.0) / self.sigma)

    def rate(self, u, threshold, dudt=0.0):
        gap = np.maximum(threshold - np.asarray(u, dtype=float), 0.0) / self.sigma
        return _out(self._prefactor(dudt) * np.exp(-gap * gap))

    def slope(self, u, threshold, dudt=0.0):
        gap = np.maximum(threshold - np.asarray(u, dtype=float), 0.0) / self.sigma
        return _out(self._prefactor(dudt) * np.exp(-gap * gap) * 2.0 * gap / self.sigma)

    @property
    def kernel_params(self):
        return np.array([self.sigma, self.tau, self.c1, self.c2])


@dataclass(frozen=True)
class CustomEscape(EscapeFunction):
    """Escape function given as a text expression.

    The expression may use ``u`` (mV), ``threshold`` (mV), ``dudt`` (mV/ms)
    and named parameters, and must give the hazard in Hz; it is parsed
    safely (see :mod:`popdens.model.expressions`).  Negative values are clipped to
    zero by the solvers.

    Parameters
    ----------
    expression : str
        E.g. ``"r0 * exp((u - threshold)/w)**2"``.
    parameters : mapping, optional
        Named constants used in the expression.
    """

    expression: str
    params: Mapping[str, float]
    _expr: Expression = field(repr=False, compare=False)
    _slope: Expression = field(repr=False, compare=False)

    def __init__(self, expression, parameters=None):
        params = dict(parameters or {})
        expr = parse_expression(expression, ("u", "threshold", "dudt"), params)
        object.__setattr__(self, "expression", expression)
        object.__setattr__(self, "params", params)
        object.__setattr__(self, "_expr", expr)
        object.__setattr__(self, "_slope", expr.derivative("u"))

    @property
    def uses_slope(self) -> bool:  # type: ignore[override]
        return "dudt" in {s.name for s in self._expr.sympy_expr.free_symbols}

    def rate(self, u, threshold, dudt=0.0):
        u = np.asarray(u, dtype=float)
        return _out(np.maximum(self._expr(u, np.full_like(u, threshold), np.broadcast_to(dudt, u.shape)), 0.0))

    def slope(self, u, threshold, dudt=0.0):
        u = np.asarray(u, dtype=float)
        return _out(self._slope(u, np.full_like(u, threshold), np.broadcast_to(dudt, u.shape)))

    @property
    def kernel_params(self):
        return np.zeros(1)

    @property
    def program(self):
        return self._expr.program

    def parameters(self):
        return {"expression": self.expression, "parameters": dict(self.params)}
