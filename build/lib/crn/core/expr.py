"""Safe evaluation of the arithmetic expressions allowed in model files.

An expression is parsed with :mod:`ast` and walked node by node; only numbers,
parameter names, the arithmetic operators ``+ - * / // % **``, parentheses and
a fixed set of functions are accepted. Nothing is ever passed to ``eval``.
"""

from __future__ import annotations

import ast
import math
import operator

from crn.core.errors import ExpressionError

__all__ = ["evaluate", "FUNCTIONS", "names_in"]


def _log(x, base=None):
    return math.log(x) if base is None else math.log(x, base)


FUNCTIONS = {
    "log": _log,
    "ln": math.log,
    "log2": math.log2,
    "sqrt": math.sqrt,
    "ceil": math.ceil,
    "floor": math.floor,
    "min": min,
    "max": max,
    "abs": abs,
}

_BINARY = {
    ast.Add: operator.add,
    ast.Sub: operator.sub,
    ast.Mult: operator.mul,
    ast.Div: operator.truediv,
    ast.FloorDiv: operator.floordiv,
    ast.Mod: operator.mod,
    ast.Pow: operator.pow,
}
_UNARY = {ast.UAdd: operator.pos, ast.USub: operator.neg}
_MAX_EXPONENT = 4096
_MAX_LENGTH = 1000


_MAX_BITS = 4096


def evaluate(expression, names: dict | None = None):
    """Evaluate an arithmetic expression over named numbers.

    Parameters
    ----------
    expression : str or int or float
        The expression, for example ``"(n + gap) / 2"``. Numbers pass through.
    names : dict of str to number, optional
        Values of the names the expression may use.

    Returns
    -------
    int or float

    Raises
    ------
    ExpressionError
        On syntax errors, names that are not defined, anything that is not
        arithmetic (attribute access, subscripts, calls of other functions,
        strings), or arithmetic errors such as division by zero.

    Examples
    --------
    >>> evaluate("(n + gap) // 2", {"n": 100, "gap": 4})
    52
    """
    if isinstance(expression, bool):
        raise ExpressionError(f"expected a number or an expression, got {expression!r}")
    if isinstance(expression, int | float):
        return _real(expression, repr(expression))
    if not isinstance(expression, str):
        raise ExpressionError(f"expected a number or an expression, got {expression!r}")
    if len(expression) > _MAX_LENGTH:
        raise ExpressionError(f"expression longer than {_MAX_LENGTH} characters")
    try:
        tree = ast.parse(expression.strip(), mode="eval")
    except SyntaxError as err:
        raise ExpressionError(f"cannot parse expression {expression!r}: {err.msg}") from err
    except (RecursionError, MemoryError) as err:
        raise ExpressionError(f"expression nested too deeply: {expression[:40]!r}...") from err
    names = names or {}
    try:
        return _walk(tree.body, names, expression)
    except ExpressionError:
        raise
    except RecursionError as err:
        raise ExpressionError(f"expression nested too deeply: {expression[:40]!r}...") from err
    except (ArithmeticError, ValueError, TypeError) as err:
        raise ExpressionError(f"cannot evaluate {expression!r}: {err}") from err


def names_in(expression) -> set[str]:
    """Return the parameter names an expression refers to (functions excluded)."""
    if not isinstance(expression, str):
        return set()
    try:
        tree = ast.parse(expression.strip(), mode="eval")
    except SyntaxError:
        return set()
    found = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Name) and node.id not in FUNCTIONS:
            found.add(node.id)
    return found


def _walk(node, names, source):
    if isinstance(node, ast.Constant):
        if isinstance(node.value, bool) or not isinstance(node.value, int | float):
            raise ExpressionError(f"only numbers are allowed in {source!r}, found {node.value!r}")
        return _real(node.value, source)
    if isinstance(node, ast.Name):
        if node.id in names:
            return names[node.id]
        if node.id in FUNCTIONS:
            raise ExpressionError(f"function {node.id!r} must be called in {source!r}")
        raise ExpressionError(f"unknown parameter {node.id!r} in {source!r}")
    if isinstance(node, ast.BinOp) and type(node.op) in _BINARY:
        left = _walk(node.left, names, source)
        right = _walk(node.right, names, source)
        if isinstance(node.op, ast.Pow) and (
            abs(right) > _MAX_EXPONENT
            or isinstance(left, int) and abs(right) * left.bit_length() > _MAX_BITS
        ):
            raise ExpressionError(f"power {left} ** {right} too large in {source!r}")
        return _real(_BINARY[type(node.op)](left, right), source)
    if isinstance(node, ast.UnaryOp) and type(node.op) in _UNARY:
        return _UNARY[type(node.op)](_walk(node.operand, names, source))
    if isinstance(node, ast.Call):
        if not isinstance(node.func, ast.Name) or node.func.id not in FUNCTIONS:
            what = ast.unparse(node.func)
            raise ExpressionError(f"call of {what!r} is not allowed in {source!r}")
        if node.keywords:
            raise ExpressionError(f"keyword arguments are not allowed in {source!r}")
        args = [_walk(arg, names, source) for arg in node.args]
        return _real(FUNCTIONS[node.func.id](*args), source)
    raise ExpressionError(
        f"{type(node).__name__.lower()} is not allowed in {source!r}: "
        "only numbers, parameters, + - * / // % ** and "
        + ", ".join(sorted(FUNCTIONS))
    )


def _real(value, source):
    if isinstance(value, complex):
        raise ExpressionError(f"{source!r} gives a complex number, {value}")
    if isinstance(value, float) and not math.isfinite(value):
        raise ExpressionError(f"{source!r} gives {value}, not a finite number")
    return value
