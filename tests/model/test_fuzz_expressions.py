"""Fuzzed text expressions: every input is either accepted and evaluates correctly, or rejected with
ExpressionError; never another exception, never code run, never a hang.

Inputs per test by default (``settings.default.max_examples`` = 10, times the factor in each
``@settings``): random character soup 500, grammar-generated valid expressions 300 (values checked
against an evaluator written here with the math module), hostile constructs 300; plus fixed cases.
"""

from __future__ import annotations

import math
import os
import tempfile
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from popdens.exceptions import ExpressionError
from popdens.model._kernels import evaluate_program
from popdens.model.expressions import parse_expression

N = settings.default.max_examples
FUZZ = dict(deadline=10_000, suppress_health_check=[HealthCheck.too_slow])

VARS = ("u",)
PARAMS = {"a": 1.5, "b": -0.25}


def parse_or_reject(text):
    """The only two allowed outcomes; anything else propagates and fails the test."""
    try:
        return parse_expression(text, VARS, PARAMS)
    except ExpressionError as exc:
        assert str(exc)  # a message, quoting the text or the offending part
        return None


@settings(max_examples=50 * N, **FUZZ)
@given(text=st.lists(st.sampled_from(list("ua b0123456789.e+-*/()<>=,_ ")
                                     + ["exp", "log", "sqrt", "min", "max", "**", "__", "pi",
                                        "erf", "tanh", "abs", "1e308", "9" * 30, "\x00", "é"]),
                     max_size=40).map("".join))
def test_character_soup_is_accepted_or_rejected_cleanly(text):
    expr = parse_or_reject(text)
    if expr is not None:
        # the compiled program and the numpy function agree wherever both are finite
        u = np.array([-3.0, 0.0, 0.7, 12.0])
        check_paths_agree(expr, u)


def check_paths_agree(expr, u):
    ops, args = expr.program
    stack = np.empty(ops.size + 2)
    with np.errstate(all="ignore"):
        vec = np.asarray(expr(u), dtype=float)
    for x, y in zip(u, np.broadcast_to(vec, u.shape)):
        c = evaluate_program(ops, args, np.array([x]), stack)
        if math.isfinite(c) and math.isfinite(y):
            assert c == pytest.approx(y, rel=1e-9, abs=1e-12), (expr.text, x)


# ------------------------------------------------------------------ grammar: valid expressions
def leaf():
    return st.one_of(
        st.just(("u", lambda u: u)),
        st.just(("a", lambda u: PARAMS["a"])),
        st.just(("b", lambda u: PARAMS["b"])),
        st.floats(-50.0, 50.0, allow_nan=False).map(lambda c: (repr(c), lambda u, c=c: c)),
        st.integers(0, 9).map(lambda c: (str(c), lambda u, c=c: float(c))),
    )


SAFE_UNARY = {
    "exp": lambda x: math.exp(x) if x < 700 else math.inf,
    "tanh": math.tanh, "erf": math.erf, "erfc": math.erfc, "abs": abs, "sin": math.sin, "cos": math.cos,
    "atan": math.atan,
}


def extend(children):
    def binop(pair, op):
        (ta, fa), (tb, fb) = pair
        ops = {"+": lambda x, y: x + y, "-": lambda x, y: x - y, "*": lambda x, y: x * y,
               "/": lambda x, y: x / y if y != 0 else math.nan}
        return (f"({ta} {op} {tb})", lambda u: ops[op](fa(u), fb(u)))

    def unary(item, name):
        t, f = item
        return (f"{name}({t})", lambda u: SAFE_UNARY[name](f(u)))

    def compare(pair, op):
        (ta, fa), (tb, fb) = pair
        cmp = {"<": lambda x, y: x < y, ">=": lambda x, y: x >= y}
        def value(u):
            x, y = fa(u), fb(u)
            if math.isnan(x) or math.isnan(y) or abs(x - y) <= 1e-12 * max(1.0, abs(x), abs(y)):
                return math.nan  # a near tie: rounding (or erfc underflow) of either library decides
            return 1.0 if cmp[op](x, y) else 0.0

        return (f"({ta} {op} {tb})", value)

    def square(item):
        t, f = item
        return (f"({t})**2", lambda u: f(u) ** 2)

    def minmax(pair, name):
        (ta, fa), (tb, fb) = pair
        # NaN-propagating, as numpy.minimum / maximum
        return (f"{name}({ta}, {tb})", lambda u: float((np.minimum if name == "min" else np.maximum)(fa(u), fb(u))))

    pairs = st.tuples(children, children)
    return st.one_of(
        st.builds(binop, pairs, st.sampled_from(["+", "-", "*", "/"])),
        st.builds(unary, children, st.sampled_from(sorted(SAFE_UNARY))),
        st.builds(compare, pairs, st.sampled_from(["<", ">="])),
        st.builds(square, children),
        st.builds(minmax, pairs, st.sampled_from(["min", "max"])),
    )


valid_expressions = st.recursive(leaf(), extend, max_leaves=8)


@settings(max_examples=30 * N, **FUZZ)
@given(item=valid_expressions, u=st.floats(-30.0, 30.0, allow_nan=False))
def test_valid_expressions_evaluate_as_the_math_module_does(item, u):
    text, reference = item
    with np.errstate(all="ignore"):
        try:
            want = reference(u)
        except (OverflowError, ValueError, ZeroDivisionError):
            want = math.nan
    try:
        expr = parse_expression(text, VARS, PARAMS)
    except ExpressionError as exc:
        # constant sub-expressions may be rejected when they are not finite (e.g. 0/0 folded by sympy)
        assert "constant" in str(exc) or "nest" in str(exc) or "division by" in str(exc), (text, str(exc))
        return
    assume(math.isfinite(want) and abs(want) < 1e12)
    got = float(expr(u))
    # reference: this file's evaluator built with Python's math module beside the text
    assert got == pytest.approx(want, rel=1e-9, abs=1e-9), text
    check_paths_agree(expr, np.array([u]))


# ------------------------------------------------------------------ grammar: hostile constructs
#: A file that the hostile texts try to create; it exists only if text was executed.
MARKER = Path(tempfile.gettempdir()) / f"popdens-fuzz-marker-{os.getpid()}"
M = repr(str(MARKER))

hostile_atoms = st.sampled_from([
    f"open({M}, 'w')", f"__import__('os').mkdir({M})", f"__import__('pathlib').Path({M}).touch()",
    f"[open({M}, 'w') for _ in (1,)]", f"(lambda: open({M}, 'w'))()", f"u.__class__.__init__({M})",
    "__import__('os').system('true')", "u.__class__", "().__class__.__bases__[0]", "open('/etc/passwd')",
    "eval('1')", "exec('x=1')", "globals()", "locals()", "vars()", "getattr(u, 'real')", "u.real",
    "lambda: 0", "(lambda x: x)(u)", "[u for u in (1,)]", "{1: 2}", "{u}", "[1][0]", "'text'", "b'x'",
    "f'{u}'", "u if u else 1", "u and 1", "not u", "~u", "u % 2", "u // 2", "u @ u", "u << 1", "u == 1",
    "1 < u < 2", "(x := 1)", "*u", "yield u", "await u", "u; 1", "import os", "del u", "u = 1", "...",
    "None", "True", "1j", "0x10", "1_000", "exp(u, 1)", "exp(x=u)", "min(u)", "unknown(u)", "_u",
    "a__b", "print(u)", "10**10**10", "2**1000", "u**65", "((2**64)**64)**64", "(((9**64)**64)**64)**64",
    "exp(1e300)", "exp(710)", "log(0)", "sqrt(-1)", "1/0", "0**-1", "9" * 400, "1e400", "1e-400",
    "u" + "+u" * 100, "-" * 200 + "u", "(" * 200 + "u" + ")" * 200, "exp(" * 80 + "u" + ")" * 80,
    "u" * 3000, "\x00", "\ud800", "u\n+1", "u\\\n+1", "# comment", "",
])


@settings(max_examples=30 * N, **FUZZ)
@given(parts=st.lists(st.one_of(hostile_atoms, st.sampled_from(["u", "+", "*", "(", ")", "a", "-", "**2"])),
                      min_size=1, max_size=4))
def test_hostile_constructs_are_rejected_without_running_anything(parts):
    text = "".join(parts)
    expr = parse_or_reject(text)
    assert not MARKER.exists(), "the parser ran code from the text"
    if expr is not None:
        # whatever got through is plain arithmetic in u, a and b, and it can be evaluated
        assert set(map(str, expr.sympy_expr.free_symbols)) <= {"u"}
        check_paths_agree(expr, np.array([0.3, 5.0]))


@pytest.mark.parametrize("text", [
    "__import__('os').system('true')", "u.__class__", "lambda: 0", "import os", "open('x')", "eval('1')",
    "u.real", "[1][0]", "u if u else 1", "getattr(u, 'x')",
])
def test_code_constructs_are_rejected(text):
    with pytest.raises(ExpressionError):
        parse_expression(text, VARS, PARAMS)


# regressions found by these fuzzers (each raised another exception type, or hung, before)
@pytest.mark.parametrize("text,fragment", [
    ("((2**64)**64)**64", "out of range"),  # ValueError (int digits); one level more took minutes
    ("(((9**64)**64)**64)**64", "out of range"),
    ("9" * 400, "out of range"),  # OverflowError in float()
    ("u + " + "1" * 320, "out of range"),
    ("exp(1e300)", "finite"),  # decimal.InvalidOperation text as the message
    ("1e300*1e300", "out of range"),  # accepted as inf before
    ("exp(710)", "finite"),  # accepted, evaluated to inf
    ("log(0)", "finite"),
    ("1/0", "rejected"),
    ("1.0 / 0.0", "division by a constant zero"),  # empty message (ZeroDivisionError from sympy) before
    ("u + 0.0 / 0.0", "division by a constant zero"),
    ("u < a / (u < u)", "division by a constant zero"),  # sympy's "Invalid comparison of non-real zoo" before
])
def test_regressions_are_expression_errors(text, fragment):
    with pytest.raises(ExpressionError, match=fragment):
        parse_expression(text, VARS, PARAMS)


@pytest.mark.parametrize("text,u,want", [
    ("atan(1) + u", 0.5, math.pi / 4 + 0.5),  # sympy keeps pi/4 symbolic: "cannot compile pi" before
    ("exp(1) * u", 2.0, 2.0 * math.e),  # sympy turns exp(1) into E: rejected before
    ("(u < 1) * ((u >= 0) * u)", 0.5, 0.5),  # merged Piecewise pieces: AttributeError ('ITE') before
    ("(u < 1) * ((u >= 0) * u)", -0.5, 0.0),
    ("(u < 1) * ((u >= 0) * u)", 1.5, 0.0),
])
def test_regressions_valid_expressions_compile_and_agree(text, u, want):
    expr = parse_expression(text, VARS, PARAMS)
    assert float(expr(u)) == pytest.approx(want, rel=1e-14, abs=1e-15)  # closed form
    ops, args = expr.program
    assert evaluate_program(ops, args, np.array([u]), np.empty(ops.size + 2)) == pytest.approx(want, rel=1e-14,
                                                                                                abs=1e-15)


def test_regression_literals_keep_all_digits_in_the_numpy_path():
    # the numpy function printed 1.79870115557786 for 1.7987011555778594: u < c was 1 at u == c
    c = 1.7987011555778594
    expr = parse_expression(f"(u < {c!r}) + u * {c!r}", VARS)
    assert float(expr(c)) == c * c  # exact: the comparison is false at equality (closed form)
    assert float(parse_expression("u - 0.1", VARS)(0.1)) == 0.0


def test_regression_division_by_zero_gives_inf_not_an_exception():
    # a Python float argument made the numpy path raise ZeroDivisionError at u = 0
    expr = parse_expression("min(0, -2/u)", VARS)
    assert float(expr(0.0)) == -np.inf  # IEEE 754: -2/+0 = -inf
    ops, args = expr.program
    assert evaluate_program(ops, args, np.array([0.0]), np.empty(ops.size + 2)) == -np.inf


def test_big_but_finite_constants_are_still_accepted():
    # 2**64 ** 4 = 2**256 ~ 1.2e77 is in range: the size check must not reject it
    expr = parse_expression("u * ((2**64)**4)", VARS, PARAMS)
    assert float(expr(1.0)) == pytest.approx(2.0**256, rel=1e-15)  # closed form
    assert float(parse_expression("exp(690)", VARS)(0.0)) == pytest.approx(math.exp(690), rel=1e-14)
