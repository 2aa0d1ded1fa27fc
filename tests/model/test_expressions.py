"""Safe expression parser: accepted grammar, rejected constructs, compiled evaluation."""

from __future__ import annotations

import numpy as np
import pytest

from popdens.exceptions import ExpressionError
from popdens.model._kernels import evaluate_program
from popdens.model.expressions import parse_expression


@pytest.mark.parametrize(
    "text,expected",
    [
        ("-(u - rest) + 2*exp((u - vt)/2)", lambda u: -(u + 65) + 2 * np.exp((u + 50) / 2)),
        ("sqrt(abs(u)) + tanh(u/10) - log(1 + u**2)", lambda u: np.sqrt(abs(u)) + np.tanh(u / 10) - np.log(1 + u**2)),
        ("max(u, 0) * (u > 1) + min(u, -1)", lambda u: max(u, 0) * (u > 1) + min(u, -1)),
        ("erf(u/3) + erfc(u/3) + cos(u)**2 + sin(u)**2", lambda u: 2.0),
        ("pi * e - u", lambda u: np.pi * np.e - u),
    ],
)
def test_numpy_and_compiled_evaluation_agree_with_python(text, expected):
    # reference: the same formula written directly with numpy / Python math, and the identities
    # erf + erfc = 1 and cos^2 + sin^2 = 1 (common practice)
    f = parse_expression(text, ["u"], {"rest": -65.0, "vt": -50.0})
    stack = np.empty(f.program[0].size + 1)
    for u in (-70.0, -3.0, 0.5, 2.0, 7.0):
        want = float(expected(u))
        assert float(f(np.array([u]))[0]) == pytest.approx(want, rel=1e-12)
        assert evaluate_program(*f.program, np.array([u]), stack) == pytest.approx(want, rel=1e-12)


@pytest.mark.parametrize(
    "text,part",
    [
        ('__import__("os").system("true")', "dunder"),
        ("u.real", "u.real"),
        ("(lambda x: x)(u)", "lambda"),
        ("u[0]", "u[0]"),
        ("open('f')", "open"),
        ("foo(u)", "foo"),
        ("x + 1", "x"),
        ("10**10**10", "10**10**10"),
        ("u ** 1000", "exponent"),
        ("'text'", "numeric"),
        ("exp(u, 2)", "exactly one"),
        ("exp(x=u)", "keyword"),
        ("u if u > 0 else 0", "IfExp"),
        ("[u]", "List"),
        ("1 < u < 2", "chained"),
        ("u +", "syntax"),
        ("_secret", "_secret"),
        ("u; import os", "syntax"),
        ("(" * 300 + "u" + ")" * 300, "nest"),
        ("-" * 500 + "u", "nest"),
    ],
)
def test_rejected_expressions_quote_the_offending_part(text, part):
    with pytest.raises(ExpressionError) as info:
        parse_expression(text, ["u"])
    msg = str(info.value)
    assert part.lower() in msg.lower() or "too deeply" in msg or "could not be parsed" in msg


def test_derivative():
    f = parse_expression("a*u**3 + exp(u)", ["u"], {"a": 2.0})
    d = f.derivative("u")
    u = np.array([0.0, 1.0, 2.0])
    np.testing.assert_allclose(d(u), 6 * u**2 + np.exp(u))  # d/du (a u^3 + e^u), by hand (common practice)


def test_bad_parameters():
    with pytest.raises(ExpressionError, match="clashes"):
        parse_expression("u", ["u"], {"u": 1.0})
    with pytest.raises(ExpressionError, match="finite"):
        parse_expression("u + a", ["u"], {"a": float("inf")})
    with pytest.raises(ExpressionError, match="string"):
        parse_expression(3.0, ["u"])
