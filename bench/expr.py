"""Safe expressions for manufactured solutions: parse to sympy without ever evaluating Python.

The string is parsed by :mod:`ast` and only a whitelist of node types is converted, node by node,
into sympy objects: numbers, the symbols ``x`` and ``y``, the constants ``pi`` and ``e``, the
arithmetic operators and calls of the named math functions below. Anything else (attribute access,
subscripts, dunder names, lambdas, comprehensions, keyword arguments, unknown names) is refused
with an `ExpressionError`. No string is ever passed to `eval`, `exec` or `sympy.sympify`.
"""
from __future__ import annotations

import ast
import warnings
from functools import lru_cache

import numpy as np
import sympy as sp

from lapbench.config import ConfigError

__all__ = ["ExpressionError", "parse", "Manufactured", "X", "Y", "FUNCTIONS"]

X, Y = sp.symbols("x y", real=True)
SYMBOLS = {"x": X, "y": Y, "pi": sp.pi, "e": sp.E}
FUNCTIONS = {
    "sin": sp.sin, "cos": sp.cos, "tan": sp.tan, "exp": sp.exp, "log": sp.log, "sqrt": sp.sqrt,
    "sinh": sp.sinh, "cosh": sp.cosh, "tanh": sp.tanh, "asin": sp.asin, "acos": sp.acos,
    "atan": sp.atan, "atan2": sp.atan2, "abs": sp.Abs, "erf": sp.erf,
}
ARITY = {"atan2": 2}
MAX_LENGTH = 2000          # longer strings are refused before parsing
MAX_NODES = 400            # limits sympy's work on differentiation
MAX_LITERAL = 1e12         # bigger literals are almost surely a mistake (or an attack)
MAX_CONST_EXPONENT = 64    # 9**9**9 would make sympy build a 370-million-digit integer

_BINOPS = {ast.Add: lambda a, b: a + b, ast.Sub: lambda a, b: a - b,
           ast.Mult: lambda a, b: a * b, ast.Div: lambda a, b: a / b,
           ast.Pow: lambda a, b: a ** b}


class ExpressionError(ConfigError):
    """A refused or malformed expression (one line, names the field and the offending part)."""


def _fail(field: str, text: str, why: str):
    raise ExpressionError(f"`{field}`: {why} in expression {text[:80]!r}"
                          f"{'...' if len(text) > 80 else ''}; allowed: numbers, x, y, pi, e, "
                          f"+ - * / ** and the functions {', '.join(sorted(FUNCTIONS))}")


def _short(value) -> str:
    """repr of a literal, cut to keep the error one short line (a 2000-digit integer is not)."""
    text = repr(value)
    return text if len(text) <= 24 else f"{text[:20]}...({len(text)} characters)"


def _literal_value(node):
    """Float value of a pure-number subtree (+, -, *, / of literals), or None."""
    if isinstance(node, ast.Constant) and type(node.value) in (int, float):
        return float(node.value)
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.USub, ast.UAdd)):
        v = _literal_value(node.operand)
        return None if v is None else (-v if isinstance(node.op, ast.USub) else v)
    if isinstance(node, ast.BinOp) and type(node.op) in (ast.Add, ast.Sub, ast.Mult, ast.Div):
        a, b = _literal_value(node.left), _literal_value(node.right)
        if a is None or b is None:
            return None
        if isinstance(node.op, ast.Div):
            return None if b == 0 else a / b
        return _BINOPS[type(node.op)](a, b)
    return None


def _convert(node, field, text):
    if isinstance(node, ast.Expression):
        return _convert(node.body, field, text)
    if isinstance(node, ast.Constant):
        if type(node.value) not in (int, float):
            _fail(field, text, f"literal {node.value!r} is not a number")
        if abs(node.value) > MAX_LITERAL:
            _fail(field, text, f"literal {_short(node.value)} exceeds {MAX_LITERAL:g}")
        return sp.Integer(node.value) if type(node.value) is int else sp.Float(node.value)
    if isinstance(node, ast.Name):
        if node.id not in SYMBOLS:
            _fail(field, text, f"unknown name {node.id!r}")
        return SYMBOLS[node.id]
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.USub, ast.UAdd)):
        v = _convert(node.operand, field, text)
        return -v if isinstance(node.op, ast.USub) else v
    if isinstance(node, ast.BinOp) and type(node.op) in _BINOPS:
        if isinstance(node.op, ast.Pow):
            has_symbol = any(isinstance(n, ast.Name) and n.id in ("x", "y") for n in ast.walk(node.right))
            if not has_symbol:
                v = _literal_value(node.right)
                if v is None and any(isinstance(n, ast.Name) for n in ast.walk(node.right)):
                    v = 1.0  # pi or e in an exponent: harmless size
                if v is None or abs(v) > MAX_CONST_EXPONENT:
                    _fail(field, text, f"constant exponent must be a number of size at most {MAX_CONST_EXPONENT}")
        a = _convert(node.left, field, text)
        b = _convert(node.right, field, text)
        if isinstance(node.op, ast.Div) and b == 0:
            _fail(field, text, "division by zero")
        return _BINOPS[type(node.op)](a, b)
    if isinstance(node, ast.Call):
        if not isinstance(node.func, ast.Name):
            _fail(field, text, f"only the named functions may be called (found a call of a "
                                f"{type(node.func).__name__} node)")
        if node.func.id not in FUNCTIONS:
            _fail(field, text, f"call of unknown function {node.func.id!r}")
        if node.keywords:
            _fail(field, text, "keyword arguments are not allowed")
        name = node.func.id
        if len(node.args) != ARITY.get(name, 1):
            _fail(field, text, f"{name} takes {ARITY.get(name, 1)} argument(s), got {len(node.args)}")
        return FUNCTIONS[name](*[_convert(a, field, text) for a in node.args])
    kind = type(node).__name__
    _fail(field, text, f"{kind} is not allowed")


@lru_cache(maxsize=256)
def parse(text: str, field: str = "problem.u") -> sp.Expr:
    """Parse `text` into a sympy expression in x and y, or raise ExpressionError."""
    if not isinstance(text, str):
        raise ExpressionError(f"`{field}` must be a string expression, got {text!r}")
    if len(text) > MAX_LENGTH:
        raise ExpressionError(f"`{field}`: expression longer than {MAX_LENGTH} characters")
    if not text.strip():
        raise ExpressionError(f"`{field}`: empty expression")
    try:
        with warnings.catch_warnings():  # e.g. "invalid decimal literal": the error below says it
            warnings.simplefilter("ignore", SyntaxWarning)
            tree = ast.parse(text.strip(), mode="eval")
    except (SyntaxError, ValueError) as exc:
        raise ExpressionError(f"`{field}`: syntax error in expression {text[:80]!r}: "
                              f"{getattr(exc, 'msg', str(exc))}") from None
    n_nodes = sum(1 for _ in ast.walk(tree))
    if n_nodes > MAX_NODES:
        raise ExpressionError(f"`{field}`: expression has {n_nodes} syntax nodes, at most {MAX_NODES} allowed")
    try:
        expr = _convert(tree, field, text)
    except ExpressionError:
        raise
    except (RecursionError, OverflowError, ZeroDivisionError, TypeError, ValueError) as exc:
        raise ExpressionError(f"`{field}`: cannot build expression {text[:80]!r}: {exc}") from None
    # `is_real is False` catches constants such as sqrt(-1); sympy answers None when it cannot tell
    if not isinstance(expr, sp.Expr) or expr.has(sp.zoo, sp.nan, sp.oo, -sp.oo) or expr.is_real is False:
        raise ExpressionError(f"`{field}`: expression {text[:80]!r} is not a finite real expression")
    return expr


def _numeric(expr: sp.Expr):
    """Vectorised numpy function of points (m, 2) for a sympy expression in x, y; evaluates on
    tensor grids by broadcasting (lapbench.fields.Field)."""
    from lapbench.fields import Field

    return Field(sp.lambdify((X, Y), expr, modules="numpy"))


def _vanishes(expr: sp.Expr, f, u) -> bool:
    """Whether f = -Laplace(u) is identically zero.

    sympy's `simplify` took up to 16 s on the layer and wave-front expressions; instead: the
    expression is zero symbolically after cheap expansion, or f vanishes to rounding (relative to
    u's second-derivative scale) at 64 seeded points of [-1, 2]^2 where both are finite.
    """
    if expr == 0 or sp.expand(expr) == 0:
        return True
    pts = np.random.default_rng(12345).uniform(-1.0, 2.0, (64, 2))
    with np.errstate(all="ignore"):
        fv = np.asarray(f(pts), dtype=float)
        uv = np.asarray(u(pts), dtype=float)
    ok = np.isfinite(fv) & np.isfinite(uv)
    if ok.sum() < 16:
        return False
    scale = max(1.0, float(np.max(np.abs(uv[ok]))))
    return bool(np.max(np.abs(fv[ok])) <= 1e-9 * scale)


@lru_cache(maxsize=64)
def manufactured(text: str, field: str = "problem.u") -> "Manufactured":
    """Cached `Manufactured` (problems are built twice per case: at planning and in the job)."""
    return Manufactured(text, field)


class Manufactured:
    """u(x, y) from a safe expression; sympy derives f = -Laplace(u) and the boundary data."""

    def __init__(self, text: str, field: str = "problem.u"):
        self.text = text
        self.u_expr = parse(text, field)
        self.f_expr = -(sp.diff(self.u_expr, X, 2) + sp.diff(self.u_expr, Y, 2))
        self.u = _numeric(self.u_expr)
        self.f = _numeric(self.f_expr)
        self.is_harmonic = _vanishes(self.f_expr, self.f, self.u)
