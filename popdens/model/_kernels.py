"""Compiled building blocks shared by the solvers and the Monte Carlo twins.

Neuron models and escape functions are passed to compiled code as an integer
code, a parameter array and (for text expressions) a postfix program, so one
disk-cached compilation serves every model.  Codes are defined in
:mod:`popdens.model.neurons` and :mod:`popdens.model.hazard`.
"""

from __future__ import annotations

import math

import numba

from . import _jit  # noqa: F401 - installs the compilation notices and timing before any kernel compiles
from .expressions import (OP_ABS, OP_ADD, OP_ATAN, OP_CONST, OP_COS, OP_COSH, OP_DIV, OP_ERF, OP_ERFC, OP_EXP,
                          OP_GE, OP_GT, OP_LE, OP_LOG, OP_LT, OP_MAX, OP_MIN, OP_MUL, OP_NEG, OP_POW, OP_SIN,
                          OP_SINH, OP_SQRT, OP_SUB, OP_TANH, OP_VAR)
from .hazard import CODE_ARRHENIUS, CODE_ERF, CODE_EXP, CODE_LINEAR, MAX_EXPONENT
from .neurons import CODE_EIF, CODE_LIF, CODE_PIF, CODE_QIF

_SQRT2 = math.sqrt(2.0)
#: ms -> s: hazards are in Hz but time steps in ms.
MS_TO_S = 1e-3
#: Hot loops and their helpers are compiled without reference counting (numba's ``_nrt=False``):
#: they never allocate, and the atomic reference-count updates on the array
#: arguments of every helper call cost ~80 ns per bin-step (measured: 83 ns
#: with, 6 ns without, per LIF bin-step with exponential escape).  Helpers are inlined by LLVM
#: (``forceinline=True``), not in numba's IR (``inline="always"``): same run time, about 3.5x less
#: compilation (DEVELOPERS.md, "Compiled loops").
NO_REFCOUNT = False


# ---------------------------------------------------------------- text expressions
@numba.njit(cache=True, nogil=True)
def evaluate_program(ops, args, x, stack):  # pragma: no cover - compiled
    """Run a postfix program on the variable values ``x`` (1-D float array).

    ``stack`` is scratch space of length >= ``len(ops) + 1`` (allocated once by
    the caller so that inner loops do not allocate).
    """
    sp = 0
    for i in range(ops.shape[0]):
        op = ops[i]
        if op == OP_CONST:
            stack[sp] = args[i]
            sp += 1
        elif op == OP_VAR:
            stack[sp] = x[int(args[i])]
            sp += 1
        elif op <= OP_POW or op == OP_MIN or op == OP_MAX or (op >= OP_LT and op <= OP_GE):
            b = stack[sp - 1]
            a = stack[sp - 2]
            sp -= 1
            if op == OP_ADD:
                r = a + b
            elif op == OP_SUB:
                r = a - b
            elif op == OP_MUL:
                r = a * b
            elif op == OP_DIV:
                r = a / b
            elif op == OP_POW:
                r = a**b
            elif op == OP_MIN:
                r = min(a, b)
            elif op == OP_MAX:
                r = max(a, b)
            elif op == OP_LT:
                r = 1.0 if a < b else 0.0
            elif op == OP_LE:
                r = 1.0 if a <= b else 0.0
            elif op == OP_GT:
                r = 1.0 if a > b else 0.0
            else:
                r = 1.0 if a >= b else 0.0
            stack[sp - 1] = r
        else:
            a = stack[sp - 1]
            if op == OP_NEG:
                r = -a
            elif op == OP_EXP:
                r = math.exp(a)
            elif op == OP_LOG:
                r = math.log(a) if a > 0 else (-math.inf if a == 0 else math.nan)
            elif op == OP_SQRT:
                r = math.sqrt(a) if a >= 0 else math.nan
            elif op == OP_TANH:
                r = math.tanh(a)
            elif op == OP_ERF:
                r = math.erf(a)
            elif op == OP_ERFC:
                r = math.erfc(a)
            elif op == OP_ABS:
                r = abs(a)
            elif op == OP_SIN:
                r = math.sin(a)
            elif op == OP_COS:
                r = math.cos(a)
            elif op == OP_COSH:
                r = math.cosh(a)
            elif op == OP_SINH:
                r = math.sinh(a)
            else:
                r = math.atan(a)
            stack[sp - 1] = r
    return stack[0]


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def drift_value(code, p, ops, args, u, stack, xbuf):  # pragma: no cover - compiled
    """F(u) in mV for model ``code`` with parameters ``p``."""
    if code == CODE_LIF:
        return -(u - p[0])
    elif code == CODE_EIF:
        x = (u - p[1]) / p[2]
        if x > MAX_EXPONENT:
            x = MAX_EXPONENT
        return -(u - p[0]) + p[2] * math.exp(x)
    elif code == CODE_QIF:
        return (u - p[0]) * (u - p[1]) / (p[1] - p[0])
    elif code == CODE_PIF:
        return 0.0
    else:
        xbuf[0] = u
        return evaluate_program(ops, args, xbuf, stack)


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def hazard_value(code, hp, ops, args, u, theta, dudt, stack, xbuf):  # pragma: no cover - compiled
    """Escape rate in Hz at potential ``u`` (mV), threshold ``theta`` (mV), slope ``dudt`` (mV/ms)."""
    if code == CODE_EXP:
        x = (u - theta) / hp[1]
        if x > MAX_EXPONENT:
            x = MAX_EXPONENT
        return hp[0] * math.exp(x)
    elif code == CODE_LINEAR:
        d = u - theta
        return hp[0] * d if d > 0.0 else 0.0
    elif code == CODE_ERF:
        return 0.5 * hp[0] * math.erfc((theta - u) / (_SQRT2 * hp[1]))
    elif code == CODE_ARRHENIUS:
        gap = theta - u
        if gap < 0.0:
            gap = 0.0
        gap = gap / hp[0]
        pos = dudt if dudt > 0.0 else 0.0
        return 1000.0 * (hp[2] / hp[1] + hp[3] * pos / hp[0]) * math.exp(-gap * gap)
    else:
        xbuf[0] = u
        xbuf[1] = theta
        xbuf[2] = dudt
        r = evaluate_program(ops, args, xbuf, stack)
        if not (r > 0.0):  # also maps NaN to 0 -> caught by finiteness checks upstream
            return 0.0 if r <= 0.0 else r
        return r


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def advance_potential(code, p, ops, args, tau_m, u, h, mu0, mu1, stack, xbuf):  # pragma: no cover
    """Advance ``u`` (mV) by ``h`` ms with the drive going linearly from ``mu0`` to ``mu1`` (mV).

    LIF: exact exponential step for a linear-in-time drive; PIF: exact;
    other drifts: Heun's method (explicit trapezoid, second order).
    """
    if h <= 0.0:
        return u
    if code == CODE_LIF:
        e = math.exp(-h / tau_m)
        # exact for mu linear on [0, h]: particular solution tracks the ramp
        slope = (mu1 - mu0) / h
        base0 = p[0] + mu0
        # u(t) = base(t) - tau*slope + C e^{-t/tau}
        c = u - base0 + tau_m * slope
        return (p[0] + mu1) - tau_m * slope + c * e
    elif code == CODE_PIF:
        return u + h * 0.5 * (mu0 + mu1) / tau_m
    else:
        k1 = (drift_value(code, p, ops, args, u, stack, xbuf) + mu0) / tau_m
        up = u + h * k1
        k2 = (drift_value(code, p, ops, args, up, stack, xbuf) + mu1) / tau_m
        return u + 0.5 * h * (k1 + k2)


#: Below this integrated hazard, exp(-H) is evaluated by its Taylor series
#: (truncation error H**5/120 < 1e-17), which is several times cheaper.
SERIES_BELOW = 1e-3


@numba.njit(cache=True, nogil=True, forceinline=True, _nrt=NO_REFCOUNT)
def survival(big_h):  # pragma: no cover - compiled
    """exp(-H) for H >= 0 (H may be inf)."""
    if big_h < SERIES_BELOW:
        return 1.0 - big_h * (1.0 - 0.5 * big_h * (1.0 - big_h / 3.0 * (1.0 - 0.25 * big_h)))
    return math.exp(-big_h)
