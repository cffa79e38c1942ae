"""Conservation laws of a reaction network from its stoichiometric matrix."""

from __future__ import annotations

import math
from fractions import Fraction

import sympy


def _exact(value: float) -> sympy.Rational:
    # Stoichiometries are small integers or simple fractions (1.5, 0.25) in practice;
    # a bounded denominator keeps the null space exact without inventing precision.
    fraction = Fraction(value).limit_denominator(10**6)
    return sympy.Rational(fraction.numerator, fraction.denominator)


def left_null_space(stoichiometry: list[list[float]]) -> list[list[int]]:
    """Integer basis of {y : yᵀ N = 0} for a species × reactions matrix N.

    Each vector is scaled to coprime integers with its first non-zero entry
    positive. The basis is the one sympy's reduced row echelon form gives, so each
    vector has a leading species of its own.

    Parameters
    ----------
    stoichiometry : list of rows
        Net stoichiometric coefficients, one row per species.

    Returns
    -------
    list of integer vectors, one per independent conservation law.
    """
    if not stoichiometry:
        return []
    rows = len(stoichiometry)
    cols = len(stoichiometry[0])
    if cols == 0:
        return [[int(i == j) for j in range(rows)] for i in range(rows)]
    matrix = sympy.Matrix(rows, cols, lambda i, j: _exact(stoichiometry[i][j]))
    basis = []
    for vector in matrix.T.nullspace():
        entries = list(vector)
        scale = math.lcm(*[sympy.Rational(v).q for v in entries])
        integers = [int(v * scale) for v in entries]
        divisor = math.gcd(*integers)
        integers = [v // divisor for v in integers]
        if next(v for v in integers if v != 0) < 0:
            integers = [-v for v in integers]
        basis.append(integers)
    return basis
