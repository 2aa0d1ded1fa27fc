"""Safe text expressions (custom drift, custom escape functions, scenario files).

A text expression is parsed with :mod:`ast` and checked node by node against a
whitelist: numbers, the declared variable and parameter names, ``+ - * / **``,
unary minus/plus, comparisons (which evaluate to 0 or 1), and the functions in
:data:`FUNCTIONS`.  The checked tree is then translated *by hand* into a sympy
expression, which is lambdified to vectorised numpy and differentiated
symbolically.  ``eval``, ``exec`` and ``sympify`` are never applied to the text.

The same checked tree is also compiled into a small postfix program
(:attr:`Expression.program`) that :func:`popdens.model._kernels.evaluate_program` runs inside
compiled loops, so custom models need no run-time code generation.
"""

from __future__ import annotations

import ast
import decimal
import functools
import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Callable, Mapping, Sequence

import numpy as np

from ..exceptions import ExpressionError

if TYPE_CHECKING:  # sympy costs about 1 s to import: loaded on the first parse, never at import
    import sympy

__all__ = ["Expression", "parse_expression", "FUNCTIONS"]

#: Longest accepted expression text (characters); longer input is rejected.
MAX_LENGTH = 2000
#: Deepest accepted nesting of the syntax tree.
MAX_DEPTH = 60
#: Largest literal exponent accepted in ``a ** n`` (guards against ``10**10**10``).
MAX_LITERAL_EXPONENT = 64.0
#: Largest magnitude of a literal or of a constant sub-expression (a margin below the
#: largest double, 1.8e308, so that a product of two accepted numbers with a parameter
#: cannot overflow unnoticed in a sub-expression that is checked).
MAX_CONSTANT = 1e300

# --- postfix op codes (shared with the compiled interpreter) -------------
OP_CONST, OP_VAR = 0, 1
OP_ADD, OP_SUB, OP_MUL, OP_DIV, OP_POW, OP_NEG = 2, 3, 4, 5, 6, 7
OP_EXP, OP_LOG, OP_SQRT, OP_TANH, OP_ERF, OP_ABS = 8, 9, 10, 11, 12, 13
OP_MIN, OP_MAX, OP_LT, OP_LE, OP_GT, OP_GE = 14, 15, 16, 17, 18, 19
OP_SIN, OP_COS, OP_ERFC, OP_COSH, OP_SINH, OP_ATAN = 20, 21, 22, 23, 24, 25

#: Accepted one-argument functions: name in expressions -> (sympy class name, op code).
_UNARY_NAMES = {
    "exp": ("exp", OP_EXP),
    "log": ("log", OP_LOG),
    "sqrt": ("sqrt", OP_SQRT),
    "tanh": ("tanh", OP_TANH),
    "erf": ("erf", OP_ERF),
    "erfc": ("erfc", OP_ERFC),
    "abs": ("Abs", OP_ABS),
    "sin": ("sin", OP_SIN),
    "cos": ("cos", OP_COS),
    "cosh": ("cosh", OP_COSH),
    "sinh": ("sinh", OP_SINH),
    "atan": ("atan", OP_ATAN),
}
_BINARY_NAMES = {"min": ("Min", OP_MIN), "max": ("Max", OP_MAX)}

#: Function names accepted in expressions.
FUNCTIONS: tuple[str, ...] = tuple(sorted([*_UNARY_NAMES, *_BINARY_NAMES]))

_CONSTANTS = {"pi": math.pi, "e": math.e}

_BINOPS = {
    ast.Add: (lambda a, b: a + b, OP_ADD),
    ast.Sub: (lambda a, b: a - b, OP_SUB),
    ast.Mult: (lambda a, b: a * b, OP_MUL),
    ast.Div: (lambda a, b: a / b, OP_DIV),
    ast.Pow: (lambda a, b: a**b, OP_POW),
}
_CMP_NAMES = {
    ast.Lt: ("StrictLessThan", OP_LT),
    ast.LtE: ("LessThan", OP_LE),
    ast.Gt: ("StrictGreaterThan", OP_GT),
    ast.GtE: ("GreaterThan", OP_GE),
}


@functools.cache
def _sympy_tables():
    """The sympy module and its classes behind each accepted name (imported on first use)."""
    import sympy

    unary = {k: (getattr(sympy, cls), code) for k, (cls, code) in _UNARY_NAMES.items()}
    binary = {k: (getattr(sympy, cls), code) for k, (cls, code) in _BINARY_NAMES.items()}
    cmpops = {k: (getattr(sympy, cls), code) for k, (cls, code) in _CMP_NAMES.items()}
    relops = {getattr(sympy, cls): code for cls, code in _CMP_NAMES.values()}
    return sympy, unary, binary, cmpops, relops


def _in_range(x) -> bool:
    """True if the number ``x`` (int, float or sympy number) is finite and |x| <= MAX_CONSTANT."""
    try:
        if isinstance(x, int):  # compare exactly: float() of a 400-digit int overflows
            return abs(x) <= MAX_CONSTANT
        f = float(x)
    except (OverflowError, TypeError, ValueError):
        return False
    return math.isfinite(f) and abs(f) <= MAX_CONSTANT


def _constant_checked(text, node, func, arg):
    """``func(arg)``; a function of a constant must give a finite constant (``exp(710)`` does not)."""
    if not getattr(arg, "is_number", False):
        return func(arg)
    try:
        out = func(arg)
        ok = _in_range(complex(out.evalf()).real) and complex(out.evalf()).imag == 0.0
    except (TypeError, ValueError, ArithmeticError, decimal.InvalidOperation):
        ok = False
    if not ok:
        raise _fail(text, node, f"constant is not a finite real number of at most {MAX_CONSTANT:g}")
    return out


def _fail(text: str, node: ast.AST | None, why: str) -> ExpressionError:
    part = ""
    if node is not None:
        seg = ast.get_source_segment(text, node)
        if seg:
            part = f" in `{seg}`"
    return ExpressionError(f"expression {text!r} rejected{part}: {why}")


@dataclass(frozen=True)
class Expression:
    """A checked expression.

    Attributes
    ----------
    text : str
        The original text.
    variables : tuple of str
        Names that vary at evaluation time (e.g. ``("u",)``), in calling order.
    parameters : dict
        Named constants substituted into the expression.
    sympy_expr : sympy.Expr
        The expression with parameters substituted.
    program : tuple of ndarray
        ``(ops, args)`` postfix program for :func:`popdens.model._kernels.evaluate_program`.
    """

    text: str
    variables: tuple[str, ...]
    parameters: Mapping[str, float]
    sympy_expr: sympy.Expr
    program: tuple[np.ndarray, np.ndarray] = field(repr=False)
    _func: Callable = field(repr=False, compare=False)

    def __call__(self, *values):
        """Evaluate vectorised with numpy; one argument per variable."""
        # numpy scalars, not Python floats: 1/0 must give inf as in compiled code, not raise
        values = tuple(np.asarray(v, dtype=float) for v in values)
        with np.errstate(all="ignore"):  # non-finite values are checked by the callers
            out = self._func(*values)
        shape = np.broadcast(*[np.asarray(v) for v in values]).shape if values else ()
        return np.broadcast_to(np.asarray(out, dtype=float), shape).copy() if shape else float(out)

    def derivative(self, variable: str) -> "Expression":
        """Symbolic derivative with respect to one of the variables."""
        if variable not in self.variables:
            raise ValueError(f"`variable` must be one of {self.variables}, got {variable!r}")
        sympy = _sympy_tables()[0]
        sym = sympy.Symbol(variable, real=True)
        d = sympy.diff(self.sympy_expr, sym)
        return _from_sympy(f"d({self.text})/d{variable}", self.variables, self.parameters, d)


def _to_sympy(text: str, tree: ast.AST, names: Mapping[str, sympy.Basic], depth: int = 0):
    if depth > MAX_DEPTH:
        raise _fail(text, None, f"nesting deeper than {MAX_DEPTH}")
    sympy, _UNARY, _BINARY, _CMPOPS, _ = _sympy_tables()
    rec = lambda n: _to_sympy(text, n, names, depth + 1)  # noqa: E731
    if isinstance(tree, ast.Expression):
        return rec(tree.body)
    if isinstance(tree, ast.Constant):
        v = tree.value
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            raise _fail(text, tree, "only numeric literals are allowed")
        if not _in_range(v):
            raise _fail(text, tree, f"numeric literal out of range (|x| <= {MAX_CONSTANT:g})")
        return sympy.Float(float(v)) if isinstance(v, float) else sympy.Integer(v)
    if isinstance(tree, ast.Name):
        if tree.id.startswith("_"):
            raise _fail(text, tree, f"name {tree.id!r} is not allowed")
        if tree.id in names:
            return names[tree.id]
        if tree.id in _CONSTANTS:
            return sympy.Float(_CONSTANTS[tree.id])
        raise _fail(text, tree, f"unknown name {tree.id!r}; allowed: {sorted(names)}")
    if isinstance(tree, ast.UnaryOp):
        if isinstance(tree.op, ast.USub):
            return -rec(tree.operand)
        if isinstance(tree.op, ast.UAdd):
            return rec(tree.operand)
        raise _fail(text, tree, "only unary + and - are allowed")
    if isinstance(tree, ast.BinOp):
        op = _BINOPS.get(type(tree.op))
        if op is None:
            raise _fail(text, tree, "only + - * / ** are allowed")
        if isinstance(tree.op, ast.Pow):
            exponent = tree.right
            if isinstance(exponent, ast.UnaryOp) and isinstance(exponent.operand, ast.Constant):
                exponent = exponent.operand
            if isinstance(exponent, ast.Constant) and isinstance(exponent.value, (int, float)):
                if abs(float(exponent.value)) > MAX_LITERAL_EXPONENT:
                    raise _fail(text, tree, f"literal exponent larger than {MAX_LITERAL_EXPONENT:g}")
            if isinstance(tree.right, ast.BinOp) and isinstance(tree.right.op, ast.Pow):
                raise _fail(text, tree, "nested powers are not allowed")
        left, right = rec(tree.left), rec(tree.right)
        if isinstance(tree.op, ast.Pow) and left.is_Number and right.is_Number:
            # sympy would evaluate a power of exact numbers exactly: ((2**64)**64)**64 has
            # 78914 digits and each further level multiplies that by 64, so check the size first
            try:
                size = abs(float(right)) * math.log10(abs(float(left))) if left != 0 else 0.0
            except (OverflowError, ValueError, TypeError):
                size = math.inf
            if not size <= math.log10(MAX_CONSTANT):
                raise _fail(text, tree, f"constant power out of range (|x| <= {MAX_CONSTANT:g})")
        if isinstance(tree.op, ast.Div) and right.is_zero:  # sympy would make it zoo
            raise _fail(text, tree, "division by a constant zero")
        try:
            result = op[0](left, right)
        except ZeroDivisionError:  # sympy Floats: 1.0/0.0
            raise _fail(text, tree, "constant division by zero") from None
        if getattr(result, "is_Number", False) and not _in_range(result):
            raise _fail(text, tree, f"constant out of range (|x| <= {MAX_CONSTANT:g})")
        return result
    if isinstance(tree, ast.Compare):
        if len(tree.ops) != 1:
            raise _fail(text, tree, "chained comparisons are not allowed")
        op = _CMPOPS.get(type(tree.ops[0]))
        if op is None:
            raise _fail(text, tree, "only < <= > >= comparisons are allowed")
        rel = op[0](rec(tree.left), rec(tree.comparators[0]))
        return sympy.Piecewise((1, rel), (0, True))
    if isinstance(tree, ast.Call):
        if not isinstance(tree.func, ast.Name):
            raise _fail(text, tree, "only calls of plain function names are allowed")
        if tree.keywords:
            raise _fail(text, tree, "keyword arguments are not allowed")
        fname = tree.func.id
        if fname in _UNARY:
            if len(tree.args) != 1:
                raise _fail(text, tree, f"{fname}() takes exactly one argument")
            return _constant_checked(text, tree, _UNARY[fname][0], rec(tree.args[0]))
        if fname in _BINARY:
            if len(tree.args) != 2:
                raise _fail(text, tree, f"{fname}() takes exactly two arguments")
            return _BINARY[fname][0](rec(tree.args[0]), rec(tree.args[1]))
        raise _fail(text, tree, f"unknown function {fname!r}; allowed: {list(FUNCTIONS)}")
    raise _fail(text, tree, f"{type(tree).__name__} is not allowed")


def _compile_sympy(expr: sympy.Basic, var_index: Mapping[sympy.Symbol, int]):
    """Postfix program for a sympy expression tree."""
    sympy, _REL_OPS = _sympy_tables()[0], _sympy_tables()[4]
    ops: list[int] = []
    args: list[float] = []

    def emit(op: int, arg: float = 0.0) -> None:
        ops.append(op)
        args.append(arg)

    def walk_condition(c) -> None:
        """Emit a boolean as 0.0 / 1.0."""
        if c in (True, False, sympy.S.true, sympy.S.false):
            emit(OP_CONST, 1.0 if c in (True, sympy.S.true) else 0.0)
        elif type(c) in _REL_OPS:
            walk(c.lhs)
            walk(c.rhs)
            emit(_REL_OPS[type(c)])
        elif isinstance(c, (sympy.Eq, sympy.Ne)):
            walk(c.lhs)
            walk(c.rhs)
            emit(OP_LE)
            walk(c.lhs)
            walk(c.rhs)
            emit(OP_GE)
            emit(OP_MUL)
            if isinstance(c, sympy.Ne):
                emit(OP_NEG)
                emit(OP_CONST, 1.0)
                emit(OP_ADD)
        elif isinstance(c, (sympy.And, sympy.Or)):
            walk_condition(c.args[0])
            for t in c.args[1:]:
                walk_condition(t)
                emit(OP_MUL if isinstance(c, sympy.And) else OP_MAX)
        elif isinstance(c, sympy.Not):
            emit(OP_CONST, 1.0)
            walk_condition(c.args[0])
            emit(OP_SUB)
        elif isinstance(c, sympy.ITE):
            select(lambda: walk_condition(c.args[0]), lambda: walk_condition(c.args[1]),
                   lambda: walk_condition(c.args[2]))
        else:
            raise ExpressionError(f"cannot compile condition {c}")

    def select(cond, if_true, if_false) -> None:
        """c * x + (1 - c) * y for a condition c in {0, 1}."""
        cond()
        if_true()
        emit(OP_MUL)
        emit(OP_CONST, 1.0)
        cond()
        emit(OP_SUB)
        if_false()
        emit(OP_MUL)
        emit(OP_ADD)

    def walk_piecewise(pieces) -> None:
        (val, c), rest = pieces[0], pieces[1:]
        if c in (True, sympy.S.true) or not rest:
            walk(val)
        elif len(rest) == 1 and rest[0][0] == 0 and rest[0][1] in (True, sympy.S.true):
            walk_condition(c)  # the form a comparison produces: condition * value
            walk(val)
            emit(OP_MUL)
        else:
            select(lambda: walk_condition(c), lambda: walk(val), lambda: walk_piecewise(rest))

    def walk(e: sympy.Basic) -> None:
        if not e.is_Number and e.is_number and not isinstance(e, sympy.Piecewise):
            # a constant sympy keeps symbolic (pi/4 from atan(1), E from exp(1), sqrt(2))
            try:
                value = complex(e.evalf())
            except (TypeError, ValueError):
                raise ExpressionError(f"constant {e} is not a real number") from None
            if value.imag != 0.0 or not _in_range(value.real):
                raise ExpressionError(f"constant {e} is not finite, real and at most {MAX_CONSTANT:g}")
            emit(OP_CONST, value.real)
            return
        if e.is_Number:
            if not _in_range(e):
                raise ExpressionError(f"constant {e} is not finite or out of range (|x| <= {MAX_CONSTANT:g})")
            emit(OP_CONST, float(e))
        elif e.is_Symbol:
            emit(OP_VAR, float(var_index[e]))
        elif isinstance(e, sympy.Add):
            terms = e.args
            walk(terms[0])
            for t in terms[1:]:
                walk(t)
                emit(OP_ADD)
        elif isinstance(e, sympy.Mul):
            terms = e.args
            walk(terms[0])
            for t in terms[1:]:
                walk(t)
                emit(OP_MUL)
        elif isinstance(e, sympy.Pow):
            walk(e.args[0])
            walk(e.args[1])
            emit(OP_POW)
        elif isinstance(e, (sympy.Min, sympy.Max)):
            code = OP_MIN if isinstance(e, sympy.Min) else OP_MAX
            walk(e.args[0])
            for t in e.args[1:]:
                walk(t)
                emit(code)
        elif isinstance(e, sympy.Piecewise):
            # comparisons give Piecewise((1, rel), (0, True)); sympy may merge products and
            # derivatives into other pieces and conditions (And, Or, ITE...): select arithmetically
            walk_piecewise(e.args)
        else:
            for cls, code in (
                (sympy.exp, OP_EXP), (sympy.log, OP_LOG), (sympy.tanh, OP_TANH),
                (sympy.erf, OP_ERF), (sympy.erfc, OP_ERFC), (sympy.Abs, OP_ABS),
                (sympy.sin, OP_SIN), (sympy.cos, OP_COS), (sympy.cosh, OP_COSH),
                (sympy.sinh, OP_SINH), (sympy.atan, OP_ATAN),
            ):
                if isinstance(e, cls):
                    walk(e.args[0])
                    emit(code)
                    return
            if isinstance(e, sympy.Heaviside):
                walk(e.args[0])
                emit(OP_CONST, 0.0)
                emit(OP_GT)
                return
            if e in (sympy.S.true, sympy.S.false):
                emit(OP_CONST, 1.0 if e == sympy.S.true else 0.0)
                return
            if isinstance(e, sympy.DiracDelta):
                emit(OP_CONST, 0.0)  # derivative of a step: zero almost everywhere
                return
            raise ExpressionError(f"cannot compile sub-expression {e}")

    walk(expr)
    return np.asarray(ops, dtype=np.int64), np.asarray(args, dtype=np.float64)


@functools.cache
def _exact_float_printer():
    """A numpy printer that prints floats with all 17 digits (the default prints 15, so
    ``u < 1.7987011555778594`` became ``u < 1.79870115557786`` and disagreed with the compiled
    program at the boundary)."""
    from sympy.printing.numpy import NumPyPrinter

    class _ExactFloatPrinter(NumPyPrinter):
        def _print_Float(self, expr):
            return repr(float(expr))

    return _ExactFloatPrinter


def _lambdify(expr: sympy.Basic, symbols: Sequence[sympy.Symbol]) -> Callable:
    sympy = _sympy_tables()[0]
    expr = expr.replace(sympy.DiracDelta, lambda *a: sympy.Integer(0))
    return sympy.lambdify(
        list(symbols),
        expr,
        printer=_exact_float_printer()({"fully_qualified_modules": False, "inline": True,
                                    "allow_unknown_functions": True, "user_functions": {}}),
        modules=[{"erf": _np_erf, "erfc": _np_erfc, "Heaviside": lambda x, h=0.5: np.heaviside(x, h)}, "numpy"],
    )


def _np_erf(x):
    from scipy.special import erf

    return erf(x)


def _np_erfc(x):
    from scipy.special import erfc

    return erfc(x)


def _from_sympy(text, variables, parameters, expr) -> Expression:
    sympy = _sympy_tables()[0]
    symbols = [sympy.Symbol(v, real=True) for v in variables]
    index = {s: i for i, s in enumerate(symbols)}
    program = _compile_sympy(expr, index)
    return Expression(
        text=text,
        variables=tuple(variables),
        parameters=dict(parameters),
        sympy_expr=expr,
        program=program,
        _func=_lambdify(expr, symbols),
    )


def parse_expression(
    text: str,
    variables: Sequence[str],
    parameters: Mapping[str, float] | None = None,
) -> Expression:
    """Parse and check a text expression.

    Parameters
    ----------
    text : str
        Python-like arithmetic, e.g. ``"-(u - rest) + 2*exp((u - vt)/2)"``.
    variables : sequence of str
        Names that vary at evaluation time, e.g. ``("u",)``.
    parameters : mapping of str to float, optional
        Named constants.  Names must be identifiers not starting with ``_``
        and must not clash with variables or function names.

    Returns
    -------
    Expression

    Raises
    ------
    ExpressionError
        If the text uses anything outside the whitelist; the message quotes
        the offending part.

    Examples
    --------
    >>> f = parse_expression("-(u - rest)", ["u"], {"rest": -65.0})
    >>> float(f(-60.0))
    -5.0
    """
    if not isinstance(text, str):
        raise ExpressionError(f"expression must be a string, got {type(text).__name__}")
    if len(text) > MAX_LENGTH:
        raise ExpressionError(f"expression longer than {MAX_LENGTH} characters")
    if "__" in text:
        raise ExpressionError(f"expression {text!r} rejected: dunder names are not allowed")
    parameters = dict(parameters or {})
    sympy = _sympy_tables()[0]
    names: dict[str, sympy.Basic] = {}
    for v in variables:
        names[v] = sympy.Symbol(v, real=True)
    for k, val in parameters.items():
        if not isinstance(k, str) or not k.isidentifier() or k.startswith("_"):
            raise ExpressionError(f"parameter name {k!r} is not a valid identifier")
        if k in names or k in FUNCTIONS or k in _CONSTANTS:
            raise ExpressionError(f"parameter name {k!r} clashes with a variable, function or constant")
        if isinstance(val, bool) or not isinstance(val, (int, float, np.integer, np.floating)):
            raise ExpressionError(f"parameter {k!r} must be a number, got {val!r}")
        if not math.isfinite(float(val)):
            raise ExpressionError(f"parameter {k!r} must be finite, got {val!r}")
        names[k] = sympy.Float(float(val))
    try:
        tree = ast.parse(text.strip(), mode="eval")
    except SyntaxError as exc:
        raise ExpressionError(f"expression {text!r} is not valid syntax: {exc.msg}") from None
    except (ValueError, RecursionError, MemoryError):
        raise ExpressionError(f"expression {text!r} could not be parsed") from None
    try:
        expr = _to_sympy(text.strip(), tree, names)
    except RecursionError:
        raise ExpressionError(f"expression {text!r} nests too deeply") from None
    except ExpressionError:
        raise
    except (TypeError, ValueError, ArithmeticError) as exc:  # sympy refused a combination
        raise ExpressionError(f"expression {text!r} rejected: {exc or type(exc).__name__}") from None
    if not isinstance(expr, sympy.Basic) or (getattr(expr, "is_Relational", False)):
        raise ExpressionError(f"expression {text!r} does not evaluate to a number")
    try:
        return _from_sympy(text, variables, parameters, expr)
    except ExpressionError as exc:
        raise ExpressionError(f"expression {text!r} rejected: {exc}") from None
    except (TypeError, ValueError, ArithmeticError, RecursionError) as exc:
        raise ExpressionError(f"expression {text!r} rejected: {exc or type(exc).__name__}") from None
