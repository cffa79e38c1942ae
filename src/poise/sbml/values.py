"""Evaluate a sympy expression in floating point, once (initial values at time 0).

An iterative walk over the expression with Python floats: no sympy `evalf` (which
works in arbitrary precision and can be made to compute numbers with billions of
digits, e.g. ``exp(exp(exp(100)))``) and no recursion. Anything that overflows,
is undefined or complex is reported as such by `evaluate`, which returns None.
Delays read at time 0 give the current value (the standard leaves earlier times
to the initial state).
"""

from __future__ import annotations

import math
from typing import Mapping

import sympy

from poise.sbml.mathml import DELAY

_FUNCTIONS = {
    sympy.exp: math.exp, sympy.log: math.log, sympy.sin: math.sin, sympy.cos: math.cos,
    sympy.tan: math.tan, sympy.tanh: math.tanh, sympy.asin: math.asin, sympy.acos: math.acos,
    sympy.atan: math.atan, sympy.Abs: abs, sympy.floor: math.floor, sympy.ceiling: math.ceil,
    sympy.gamma: math.gamma, sympy.sign: lambda x: math.copysign(1.0, x) if x else 0.0,
    sympy.asec: lambda x: math.acos(1 / x), sympy.acsc: lambda x: math.asin(1 / x),
    sympy.acot: lambda x: math.atan(1 / x),
}
_RELATIONS = {"<": lambda a, b: a < b, "<=": lambda a, b: a <= b, ">": lambda a, b: a > b,
              ">=": lambda a, b: a >= b, "==": lambda a, b: a == b, "!=": lambda a, b: a != b}


class _Undefined(Exception):
    pass


def evaluate(expr: sympy.Basic, values: Mapping[sympy.Symbol, float]) -> float | bool | None:
    """The value of `expr` with `values` for its symbols; None if undefined, infinite or complex."""
    done: dict[sympy.Basic, object] = {}
    stack = [expr]
    try:
        while stack:
            node = stack[-1]
            if node in done:
                stack.pop()
                continue
            children = _children(node)
            pending = [c for c in children if c not in done]
            if pending:
                stack.extend(pending)
                continue
            stack.pop()
            done[node] = _value(node, [done[c] for c in children], values)
    except (_Undefined, OverflowError, ValueError, ZeroDivisionError, TypeError):
        return None
    result = done[expr]
    if isinstance(result, float) and not math.isfinite(result):
        return None
    return result


def _children(node: sympy.Basic) -> tuple:
    if isinstance(node, sympy.Piecewise):
        return tuple(part for pair in node.args for part in pair)
    if isinstance(node, (sympy.Symbol, sympy.Number, sympy.NumberSymbol)) or node in (sympy.true, sympy.false):
        return ()
    if node.func == DELAY:
        return (node.args[0],)
    return node.args


def _value(node: sympy.Basic, args: list, values: Mapping[sympy.Symbol, float]):
    if isinstance(node, sympy.Symbol):
        if node not in values:
            raise _Undefined(node)
        return float(values[node])
    if node is sympy.true or node is sympy.false:
        return bool(node)
    if isinstance(node, (sympy.Number, sympy.NumberSymbol)):
        return _finite(float(node))
    if isinstance(node, sympy.Add):
        return _finite(math.fsum(args))
    if isinstance(node, sympy.Mul):
        return _finite(math.prod(args))
    if isinstance(node, sympy.Pow):
        base, exponent = args
        if base < 0 and not float(exponent).is_integer():
            raise _Undefined("complex power")
        return _finite(math.pow(base, exponent))
    if isinstance(node, sympy.Piecewise):
        for k in range(0, len(args), 2):
            if args[k + 1]:
                return args[k]
        raise _Undefined("no piece of a piecewise holds")
    if isinstance(node, sympy.core.relational.Relational):
        return _RELATIONS[node.rel_op](*args)
    if isinstance(node, sympy.And):
        return all(args)
    if isinstance(node, sympy.Or):
        return any(args)
    if isinstance(node, sympy.Not):
        return not args[0]
    if isinstance(node, sympy.Xor):
        return sum(bool(a) for a in args) % 2 == 1
    if isinstance(node, sympy.Implies):
        return (not args[0]) or bool(args[1])
    if node.func == DELAY:
        return args[0]
    if isinstance(node, (sympy.Min, sympy.Max)):
        return (min if isinstance(node, sympy.Min) else max)(args)
    function = _FUNCTIONS.get(node.func)
    if function is None:
        raise _Undefined(node.func)
    return _finite(float(function(*args)))


def _finite(value: float) -> float:
    if isinstance(value, complex) or not math.isfinite(value):
        raise _Undefined(value)
    return value
