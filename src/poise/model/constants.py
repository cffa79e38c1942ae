"""Exact numbers of a model, made ready for numeric kernels."""

from __future__ import annotations

import sympy


def floating_constants(expr: sympy.Expr) -> sympy.Expr:
    """Exact numbers beyond 2**53 (a whole number, or a fraction's numerator or
    denominator) as the nearest double: a model written with exact decimals such as
    1e28 would hand numpy a Python integer beyond 64 bits, which `log` and others
    refuse; the kernels compute in doubles anyway."""
    if not isinstance(expr, sympy.Basic):
        return sympy.Float(expr)
    big = {a: _double(a) for a in expr.atoms(sympy.Rational) if max(abs(a.p), a.q) >= _EXACT_DOUBLE}
    return expr.xreplace(big) if big else expr


_EXACT_DOUBLE = 2 ** 53


def _double(number: sympy.Rational) -> sympy.Expr:
    try:
        return sympy.Float(float(number))
    except OverflowError:
        return sympy.oo if number > 0 else -sympy.oo
