"""Safe arithmetic expressions for potentials, e.g. ``"0.5*(x**2 + y**2) - 0.1*z"``.

The text is parsed with :mod:`ast` and only a whitelist of nodes is
accepted: numbers, the allowed variables, + - * / ** unary minus, and calls
of a fixed set of numpy functions.  It is never passed to ``eval``; the tree
is compiled into nested closures that evaluate on numpy arrays.
"""

from __future__ import annotations

import ast
import math
import operator
from collections.abc import Callable

import numpy as np

__all__ = ["compile_expression", "ExpressionError", "FUNCTIONS", "ARITY"]

FUNCTIONS: dict[str, Callable] = {
    "sin": np.sin, "cos": np.cos, "tan": np.tan, "exp": np.exp, "log": np.log,
    "sqrt": np.sqrt, "abs": np.abs, "tanh": np.tanh, "cosh": np.cosh, "sinh": np.sinh,
    "arctan2": np.arctan2, "arccos": np.arccos, "arcsin": np.arcsin, "arctan": np.arctan,
    "minimum": np.minimum, "maximum": np.maximum, "where": np.where, "heaviside": np.heaviside,
}
#: arguments each function takes (numpy's optional ``out`` and ``where`` are never passed)
ARITY = {**{name: 1 for name in FUNCTIONS}, "arctan2": 2, "minimum": 2, "maximum": 2, "heaviside": 2, "where": 3}
CONSTANTS = {"pi": np.pi, "e": np.e}
_BINARY = {ast.Add: operator.add, ast.Sub: operator.sub, ast.Mult: operator.mul,
           ast.Div: operator.truediv, ast.Pow: operator.pow}
_COMPARE = {ast.Lt: operator.lt, ast.LtE: operator.le, ast.Gt: operator.gt, ast.GtE: operator.ge}
#: longest expression text (characters); a potential is a formula, not data
MAX_LENGTH = 2000
#: most nested operations (keeps parsing and evaluation far from Python's recursion limit)
MAX_DEPTH = 200
#: most characters of one number literal (17 significant digits and an exponent fit easily)
MAX_LITERAL = 40
#: most powers stacked in a tower a ** b ** c
MAX_TOWER = 2


class ExpressionError(ValueError):
    """The expression is not plain arithmetic over the allowed names."""


def compile_expression(text: str, variables: tuple[str, ...] = ("x", "y", "z", "r", "theta", "phi")):
    """Compile ``text`` into a function of keyword arrays.

    Parameters
    ----------
    text
        Arithmetic expression.
    variables
        Names the expression may use besides ``pi``, ``e`` and :data:`FUNCTIONS`.

    Returns
    -------
    callable
        ``f(**arrays) -> ndarray``, broadcast to the shape of the inputs.

    Raises
    ------
    ExpressionError
        For syntax errors, unknown names or anything but arithmetic.

    Examples
    --------
    >>> f = compile_expression("2*x + sin(pi*y)", variables=("x", "y", "z"))
    >>> float(f(x=1.0, y=0.5, z=0.0))
    3.0
    """
    if not isinstance(text, str) or not text.strip():
        raise ExpressionError("expected a non-empty arithmetic expression")
    if len(text) > MAX_LENGTH:
        raise ExpressionError(f"the expression has {len(text)} characters; at most {MAX_LENGTH} are allowed")
    try:
        tree = ast.parse(text.strip(), mode="eval")
    except SyntaxError as exc:
        raise ExpressionError(f"not a valid expression ({exc.msg} at column {exc.offset})") from None
    except (RecursionError, MemoryError, ValueError):
        raise ExpressionError(f"the expression is nested too deeply; at most {MAX_DEPTH} levels") from None
    allowed = set(variables)
    source = text.strip()

    def number(node):
        literal = ast.get_source_segment(source, node) or repr(node.value)
        if len(literal) > MAX_LITERAL:
            raise ExpressionError(f"the number {literal[:20]}... has {len(literal)} characters; "
                                  f"at most {MAX_LITERAL} are allowed")
        try:
            value = float(node.value)
        except OverflowError:
            value = math.inf
        if not math.isfinite(value):
            raise ExpressionError(f"the number {literal} is outside the floating-point range")
        return np.float64(value)

    def tower(node) -> int:
        return 1 + tower(node.right) if isinstance(node, ast.BinOp) and isinstance(node.op, ast.Pow) else 0

    def build(node, depth=0):
        if depth > MAX_DEPTH:
            raise ExpressionError(f"the expression is nested too deeply; at most {MAX_DEPTH} levels")
        closure, constant = _build(node, depth + 1)
        if constant:  # fold a part without variables now, so an overflow or 1/0 is found here
            with np.errstate(all="ignore"):
                value = np.float64(closure({}))
            if not np.isfinite(value):
                part = ast.get_source_segment(source, node) or "a constant part"
                raise ExpressionError(f"{part} is {value} (division by zero, overflow or a root of a "
                                      "negative number)")
            return (lambda env: value), True
        return closure, False

    def _build(node, depth):
        if isinstance(node, ast.Constant) and isinstance(node.value, (int, float)) and not isinstance(
                node.value, bool):
            value = number(node)
            return (lambda env: value), True
        if isinstance(node, ast.Name):
            name = node.id
            if name in allowed:
                return (lambda env: env[name]), False
            if name in CONSTANTS:
                value = np.float64(CONSTANTS[name])
                return (lambda env: value), True
            raise ExpressionError(
                f"unknown name {name!r}; allowed variables: {', '.join(sorted(allowed))}, constants: pi, e")
        if isinstance(node, ast.BinOp) and type(node.op) in _BINARY:
            if isinstance(node.op, ast.Pow) and tower(node) > MAX_TOWER:
                raise ExpressionError(f"a tower of {tower(node)} powers; at most {MAX_TOWER} are allowed "
                                      "(use parentheses: (a**b)**c)")
            op = _BINARY[type(node.op)]
            (a, ca), (b, cb) = build(node.left, depth), build(node.right, depth)
            return (lambda env: op(a(env), b(env))), ca and cb
        if isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.USub, ast.UAdd)):
            a, ca = build(node.operand, depth)
            sign = -1.0 if isinstance(node.op, ast.USub) else 1.0
            return (lambda env: sign * a(env)), ca
        if isinstance(node, ast.Compare) and len(node.ops) == 1 and type(node.ops[0]) in _COMPARE:
            op = _COMPARE[type(node.ops[0])]
            (a, ca), (b, cb) = build(node.left, depth), build(node.comparators[0], depth)
            return (lambda env: np.asarray(op(a(env), b(env)), dtype=float)), ca and cb
        if isinstance(node, ast.Call) and isinstance(node.func, ast.Name) and not node.keywords:
            name = node.func.id
            if name not in FUNCTIONS:
                raise ExpressionError(f"unknown function {name!r}; allowed: {', '.join(sorted(FUNCTIONS))}")
            if any(isinstance(a, ast.Starred) for a in node.args) or len(node.args) != ARITY[name]:
                raise ExpressionError(f"{name}() takes {ARITY[name]} argument{'s' if ARITY[name] > 1 else ''}, "
                                      f"got {len(node.args)}")
            fn = FUNCTIONS[name]
            built = [build(a, depth) for a in node.args]
            args = [a for a, _ in built]
            return (lambda env: fn(*(a(env) for a in args))), all(c for _, c in built)
        raise ExpressionError(f"{type(node).__name__} is not allowed; use numbers, variables, "
                              "+ - * / ** and functions")

    body, _ = build(tree.body)

    def evaluate(**env):
        missing = allowed - set(env)
        if missing:
            raise ExpressionError(f"missing variables: {', '.join(sorted(missing))}")
        arrays = {k: np.asarray(v, dtype=float) for k, v in env.items()}
        shape = np.broadcast_shapes(*(a.shape for a in arrays.values())) if arrays else ()
        with np.errstate(all="ignore"):
            values = np.broadcast_to(np.asarray(body(arrays), dtype=float), shape).copy()
        bad = ~np.isfinite(values)
        if np.any(bad):
            where = ", ".join(f"{k} = {float(np.broadcast_to(v, shape)[bad][0]):.6g}"
                              for k, v in sorted(arrays.items()))
            raise ExpressionError(f"{text!r} is {float(values[bad][0])} at {where}; the potential must be finite "
                                  "everywhere in the domain")
        return values

    evaluate.text = text
    return evaluate
