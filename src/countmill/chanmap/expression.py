"""Arithmetic expressions of derived channels, parsed with :mod:`ast` and never evaluated by Python.

Allowed: numbers, channel names, ``+ - * / **``, unary ``+ -``, parentheses and the
functions ``abs sqrt exp log min max``. Everything else (attributes, subscripts, other
calls, lambdas, comprehensions, strings, comparisons) is refused with the offending text
quoted. A parsed expression becomes a tree of small closures over numpy arrays.
"""

from __future__ import annotations

import ast
from dataclasses import dataclass
from typing import Callable, Mapping

import numpy as np

from countmill.units import ureg

MAX_LENGTH = 1000
MAX_NODES = 200
MAX_EXPONENT = 64.0

_FUNCTIONS: dict[str, tuple[int, int, Callable]] = {
    # name: (min args, max args, numpy function)
    "abs": (1, 1, np.abs),
    "sqrt": (1, 1, np.sqrt),
    "exp": (1, 1, np.exp),
    "log": (1, 1, np.log),
    "min": (2, 8, lambda *a: _reduce(np.fmin, a)),
    "max": (2, 8, lambda *a: _reduce(np.fmax, a)),
}

_BINARY = {
    ast.Add: np.add,
    ast.Sub: np.subtract,
    ast.Mult: np.multiply,
    ast.Div: np.divide,
    ast.Pow: np.power,
}


def _reduce(fn, arrays):
    out = arrays[0]
    for a in arrays[1:]:
        out = fn(out, a)
    # fmin/fmax skip NaN; a missing input must stay missing
    nan = np.zeros(np.shape(out), dtype=bool)
    for a in arrays:
        nan |= np.isnan(a)
    return np.where(nan, np.nan, out)


class ExpressionError(ValueError):
    """The expression is not in the allowed language; the message quotes the part."""


@dataclass(frozen=True)
class Expression:
    text: str
    #: channel names in the order they first appear in the text
    names: tuple[str, ...]
    evaluate: Callable[[Mapping[str, np.ndarray]], np.ndarray]
    tree: ast.Expression

    @property
    def trigger(self) -> str:
        """The channel at whose records the derived value is computed: the first one named."""
        return self.names[0]

    def dimension_check(self, units: Mapping[str, str]):
        """The expression's result as a pint quantity computed on unit-one inputs.

        Raises ``ExpressionError`` when the units do not combine (a sum of volts and
        amperes, ``exp`` of a dimensional quantity, ...).
        """
        values = {name: ureg.Quantity(1.0, units[name]).to_root_units() for name in self.names}
        try:
            return _unit_eval(self.tree.body, values, self.text)
        except ExpressionError:
            raise
        except Exception as exc:
            raise ExpressionError(f"units do not combine in {self.text!r}: {exc}") from None


_DIMENSIONLESS = ureg.dimensionless.dimensionality


def _dimension(value):
    return getattr(value, "dimensionality", _DIMENSIONLESS)


def parse_expression(text: str) -> Expression:
    if len(text) > MAX_LENGTH:
        raise ExpressionError(f"expression longer than {MAX_LENGTH} characters")
    try:
        tree = ast.parse(text.strip(), mode="eval")
    except SyntaxError as exc:
        raise ExpressionError(f"{text!r} is not an arithmetic expression ({exc.msg})") from None
    count = sum(1 for _ in ast.walk(tree))
    if count > MAX_NODES:
        raise ExpressionError(f"expression has {count} parts; at most {MAX_NODES} are allowed")
    names: list[str] = []
    evaluate = _compile(tree.body, text, names)
    if not names:
        raise ExpressionError(f"{text!r} names no channel")
    return Expression(text=text, names=tuple(names), evaluate=evaluate, tree=tree)


def _constant(node: ast.AST, text: str) -> float | None:
    """The value of a sub-expression made of numbers only, else None."""
    if any(isinstance(n, ast.Name) for n in ast.walk(node)):
        return None
    value = _compile(node, text, [])({})
    return float(value)


def _snippet(node: ast.AST, text: str) -> str:
    part = ast.get_source_segment(text.strip(), node)
    return part if part is not None else ast.dump(node)


def _compile(node: ast.AST, text: str, names: list[str]) -> Callable[[Mapping[str, np.ndarray]], np.ndarray]:
    if isinstance(node, ast.Constant) and isinstance(node.value, (int, float)) and not isinstance(node.value, bool):
        value = float(node.value)
        return lambda env: value
    if isinstance(node, ast.Name):
        if node.id in _FUNCTIONS:
            raise ExpressionError(f"'{node.id}' is a function; call it as {node.id}(...)")
        name = node.id
        if name not in names:
            names.append(name)
        return lambda env: env[name]
    if isinstance(node, ast.BinOp) and type(node.op) in _BINARY:
        if isinstance(node.op, ast.Pow):
            exponent = _constant(node.right, text)
            if exponent is not None and abs(exponent) > MAX_EXPONENT:
                raise ExpressionError(
                    f"the exponent in '{_snippet(node, text)}' is larger than {MAX_EXPONENT:g} in size"
                )
        left = _compile(node.left, text, names)
        right = _compile(node.right, text, names)
        fn = _BINARY[type(node.op)]

        def binary(env, left=left, right=right, fn=fn):
            with np.errstate(all="ignore"):
                return fn(left(env), right(env))

        return binary
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.USub, ast.UAdd)):
        operand = _compile(node.operand, text, names)
        if isinstance(node.op, ast.USub):
            return lambda env: np.negative(operand(env))
        return operand
    if isinstance(node, ast.Call):
        if not isinstance(node.func, ast.Name) or node.func.id not in _FUNCTIONS:
            raise ExpressionError(
                f"'{_snippet(node, text)}' calls something other than {', '.join(_FUNCTIONS)}"
            )
        if node.keywords:
            raise ExpressionError(f"'{_snippet(node, text)}': keyword arguments are not allowed")
        lo, hi, fn = _FUNCTIONS[node.func.id]
        if not lo <= len(node.args) <= hi:
            raise ExpressionError(f"'{_snippet(node, text)}': {node.func.id} takes {lo}..{hi} arguments")
        args = [_compile(a, text, names) for a in node.args]

        def call(env, args=args, fn=fn):
            with np.errstate(all="ignore"):
                return fn(*(np.asarray(a(env), dtype=np.float64) for a in args))

        return call
    raise ExpressionError(f"'{_snippet(node, text)}' is not allowed in an expression")


def _unit_eval(node: ast.AST, values, text: str):
    if isinstance(node, ast.Constant):
        return float(node.value)
    if isinstance(node, ast.Name):
        return values[node.id]
    if isinstance(node, ast.UnaryOp):
        operand = _unit_eval(node.operand, values, text)
        return -operand if isinstance(node.op, ast.USub) else operand
    if isinstance(node, ast.BinOp):
        left = _unit_eval(node.left, values, text)
        if isinstance(node.op, ast.Pow):
            exponent = _constant(node.right, text)
            if exponent is None:
                # a variable exponent is fine on a dimensionless base with a dimensionless power
                power = _unit_eval(node.right, values, text)
                for part, what in ((left, "base"), (power, "exponent")):
                    if _dimension(part) != _DIMENSIONLESS:
                        raise ExpressionError(
                            f"'{_snippet(node, text)}': a {what} with units needs a number as exponent"
                        )
                return 1.0
            return left**exponent
        right = _unit_eval(node.right, values, text)
        if isinstance(node.op, (ast.Add, ast.Sub)):
            l_dim, r_dim = _dimension(left), _dimension(right)
            if l_dim != r_dim:
                raise ExpressionError(
                    f"'{_snippet(node, text)}' adds or subtracts quantities of different dimensions ({l_dim} and {r_dim})"
                )
            return left + right if isinstance(node.op, ast.Add) else left - right
        return left * right if isinstance(node.op, ast.Mult) else left / right
    if isinstance(node, ast.Call):
        name = node.func.id
        args = [_unit_eval(a, values, text) for a in node.args]
        if name in ("exp", "log"):
            if _dimension(args[0]) != _DIMENSIONLESS:
                raise ExpressionError(
                    f"'{_snippet(node, text)}': {name} needs a dimensionless argument, got {_dimension(args[0])}"
                )
            return 1.0
        if name == "sqrt":
            return args[0] ** 0.5
        if name == "abs":
            return abs(args[0])
        # min/max: quantities must share a dimension; a plain number (a clamp such as
        # max(x, 0)) takes the dimension of the others
        quantities = [a for a, n in zip(args, node.args) if _constant(n, text) is None]
        dims = {str(_dimension(a)) for a in quantities}
        if len(dims) > 1:
            raise ExpressionError(f"'{_snippet(node, text)}': {name} of quantities of different dimensions")
        return quantities[0] if quantities else 1.0
    raise ExpressionError(f"'{_snippet(node, text)}' is not allowed in an expression")
