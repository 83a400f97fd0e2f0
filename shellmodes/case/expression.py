"""Safe arithmetic expressions for potentials, e.g. ``"0.5*(x**2 + y**2) - 0.1*z"``.

The text is parsed with :mod:`ast` and only a whitelist of nodes is
accepted: numbers, the allowed variables, + - * / ** unary minus, and calls
of a fixed set of numpy functions.  It is never passed to ``eval``; the tree
is compiled into nested closures that evaluate on numpy arrays.
"""

from __future__ import annotations

import ast
import operator
from collections.abc import Callable

import numpy as np

__all__ = ["compile_expression", "ExpressionError", "FUNCTIONS"]

FUNCTIONS: dict[str, Callable] = {
    "sin": np.sin, "cos": np.cos, "tan": np.tan, "exp": np.exp, "log": np.log,
    "sqrt": np.sqrt, "abs": np.abs, "tanh": np.tanh, "cosh": np.cosh, "sinh": np.sinh,
    "arctan2": np.arctan2, "arccos": np.arccos, "arcsin": np.arcsin, "arctan": np.arctan,
    "minimum": np.minimum, "maximum": np.maximum, "where": np.where, "heaviside": np.heaviside,
}
CONSTANTS = {"pi": np.pi, "e": np.e}
_BINARY = {ast.Add: operator.add, ast.Sub: operator.sub, ast.Mult: operator.mul,
           ast.Div: operator.truediv, ast.Pow: operator.pow}
_COMPARE = {ast.Lt: operator.lt, ast.LtE: operator.le, ast.Gt: operator.gt, ast.GtE: operator.ge}


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
    try:
        tree = ast.parse(text.strip(), mode="eval")
    except SyntaxError as exc:
        raise ExpressionError(f"not a valid expression ({exc.msg} at column {exc.offset})") from None
    allowed = set(variables)

    def build(node):
        if isinstance(node, ast.Constant) and isinstance(node.value, (int, float)) and not isinstance(
                node.value, bool):
            value = float(node.value)
            return lambda env: value
        if isinstance(node, ast.Name):
            name = node.id
            if name in allowed:
                return lambda env: env[name]
            if name in CONSTANTS:
                value = CONSTANTS[name]
                return lambda env: value
            raise ExpressionError(
                f"unknown name {name!r}; allowed variables: {', '.join(sorted(allowed))}, constants: pi, e")
        if isinstance(node, ast.BinOp) and type(node.op) in _BINARY:
            op, a, b = _BINARY[type(node.op)], build(node.left), build(node.right)
            return lambda env: op(a(env), b(env))
        if isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.USub, ast.UAdd)):
            a = build(node.operand)
            sign = -1.0 if isinstance(node.op, ast.USub) else 1.0
            return lambda env: sign * a(env)
        if isinstance(node, ast.Compare) and len(node.ops) == 1 and type(node.ops[0]) in _COMPARE:
            op, a, b = _COMPARE[type(node.ops[0])], build(node.left), build(node.comparators[0])
            return lambda env: op(a(env), b(env)).astype(float)
        if isinstance(node, ast.Call) and isinstance(node.func, ast.Name) and not node.keywords:
            name = node.func.id
            if name not in FUNCTIONS:
                raise ExpressionError(f"unknown function {name!r}; allowed: {', '.join(sorted(FUNCTIONS))}")
            fn, args = FUNCTIONS[name], [build(a) for a in node.args]
            return lambda env: fn(*(a(env) for a in args))
        raise ExpressionError(f"{type(node).__name__} is not allowed; use numbers, variables, "
                              "+ - * / ** and functions")

    body = build(tree.body)

    def evaluate(**env):
        missing = allowed - set(env)
        if missing:
            raise ExpressionError(f"missing variables: {', '.join(sorted(missing))}")
        arrays = {k: np.asarray(v, dtype=float) for k, v in env.items()}
        shape = np.broadcast_shapes(*(a.shape for a in arrays.values())) if arrays else ()
        with np.errstate(all="ignore"):
            return np.broadcast_to(np.asarray(body(arrays), dtype=float), shape).copy()

    evaluate.text = text
    return evaluate
