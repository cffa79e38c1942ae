"""Recognise steady-state systems that are polynomial after clearing denominators.

A right-hand side built from ``+ - * /`` and integer powers of the states (mass action,
Michaelis–Menten terms, Hill functions with integer exponents) is a rational function
of the states. Writing each equation as ``N_i / D_i`` with ``N_i`` and ``D_i`` coprime,
its steady states are the roots of the polynomials ``N_i`` at which no ``D_i`` vanishes.
The coefficients may depend on the parameters in any way (``exp(k)``, ``K**0.5``):
only the dependence on the states has to be polynomial.

`polynomial_form` returns this cleared form as plain data (`PolynomialSystem`) for the
homotopy solver in `poise.equilibria.homotopy`, or ``None`` when the system does not
qualify.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from math import prod

import sympy


@dataclass(frozen=True)
class PolynomialSystem:
    """A square system of polynomial equations in the states, with parameter coefficients.

    Attributes
    ----------
    states : tuple of sympy.Symbol
        The unknowns, in column order.
    params : tuple of sympy.Symbol
        The parameters, in the column order of the value arrays given to the solver.
    numerators : tuple of sympy.Expr
        One expanded polynomial in the states per equation (denominators cleared,
        common factors cancelled).
    denominators : tuple of sympy.Expr
        The distinct irreducible factors of the cleared denominators. A root at which
        one of them vanishes is not a steady state of the original system. Factors free
        of the states vanish for bad parameter values only (the model is undefined there).
    degrees : tuple of int
        Total degree of each numerator in the states.
    path_count : int
        Total-degree (Bézout) bound on the number of isolated roots: the product of the
        degrees. The solver tracks only the roots of a generic member of the family,
        which can be fewer (see `poise.equilibria.homotopy.generic_root_count`).
    """

    states: tuple[sympy.Symbol, ...]
    params: tuple[sympy.Symbol, ...]
    numerators: tuple[sympy.Expr, ...]
    denominators: tuple[sympy.Expr, ...]
    degrees: tuple[int, ...]
    path_count: int


def polynomial_form(equations: Sequence[sympy.Expr], states: Sequence[sympy.Symbol],
                    params: Sequence[sympy.Symbol]) -> PolynomialSystem | None:
    """Clear the denominators of a steady-state system, if it is rational in the states.

    Parameters
    ----------
    equations : sequence of sympy.Expr
        Right-hand sides ``f_i`` of ``d(state_i)/dt = f_i``, one per state (after any
        conservation reduction).
    states : sequence of sympy.Symbol
        The unknowns.
    params : sequence of sympy.Symbol
        Every other symbol that may appear. A parameter used as an exponent of a state
        must already have been replaced by its (integer) value.

    Returns
    -------
    PolynomialSystem or None
        ``None`` when some equation is not a rational function of the states after
        clearing denominators (``exp(x)``, ``x**0.5``, ``x**n`` with symbolic ``n``,
        ``abs``, ``min``/``max`` of states, any ``piecewise``), and also when an equation vanishes
        identically (its steady states are not isolated, so no root count exists).

    Raises
    ------
    ValueError
        If the number of equations differs from the number of states, or an equation
        contains a symbol that is neither a state nor a parameter.

    Notes
    -----
    Floating-point numbers are turned into the exact rationals they print as
    (``0.1`` -> ``1/10``, ``x**2.0`` -> ``x**2``) before cancelling common factors,
    so that cancellation is exact.
    """
    states = tuple(states)
    params = tuple(params)
    if len(equations) != len(states):
        raise ValueError(f"{len(equations)} equations for {len(states)} states")
    allowed = set(states) | set(params)
    if any(isinstance(e, sympy.Basic) and e.has(sympy.Piecewise) for e in equations):
        return None  # piecewise: each piece smooth, the whole not one polynomial (Newton's job)

    numerators: list[sympy.Expr] = []
    degrees: list[int] = []
    factors: list[sympy.Expr] = []
    for equation in equations:
        expr = _exact_numbers(_as_expr(equation))
        unknown = expr.free_symbols - allowed
        if unknown:
            names = ", ".join(sorted(str(s) for s in unknown))
            raise ValueError(f"symbols {names} are neither states nor parameters")
        numerator, denominator = sympy.fraction(sympy.together(expr))
        if not (numerator.is_polynomial(*states) and denominator.is_polynomial(*states)):
            return None
        numerator, denominator = _cancel(numerator, denominator)
        # only the states it holds as generators: sympy's dense form nests one level per
        # generator, so hundreds of states (most absent) made this take minutes
        poly = sympy.Poly(numerator, *[x for x in states if x in numerator.free_symbols] or states[:1])
        if poly.is_zero:
            return None
        numerators.append(poly.as_expr())
        degrees.append(int(poly.total_degree()))
        for factor in _factors(denominator):
            if factor not in factors:
                factors.append(factor)

    return PolynomialSystem(states=states, params=params, numerators=tuple(numerators),
                            denominators=tuple(factors), degrees=tuple(degrees),
                            path_count=int(prod(degrees)))


def _as_expr(value) -> sympy.Expr:
    """Accept plain Python numbers as constant equations."""
    if isinstance(value, int):
        return sympy.Integer(value)
    if isinstance(value, float):
        return sympy.Float(value)
    return value


def _exact_numbers(expr: sympy.Expr) -> sympy.Expr:
    """Replace every Float by the rational it prints as (exact cancellation, integer powers)."""
    floats = expr.atoms(sympy.Float)
    if not floats:
        return expr
    return expr.xreplace({f: sympy.nsimplify(f, rational=True) for f in floats})


def _cancel(numerator: sympy.Expr, denominator: sympy.Expr) -> tuple[sympy.Expr, sympy.Expr]:
    """Remove common factors; a shared factor would add spurious (even non-isolated) roots."""
    try:
        numerator, denominator = sympy.fraction(sympy.cancel(numerator / denominator))
    except (sympy.PolynomialError, NotImplementedError):  # unusual coefficient functions
        pass
    return sympy.expand(numerator), denominator


def _factors(denominator: sympy.Expr) -> list[sympy.Expr]:
    """Distinct non-constant irreducible factors of a cleared denominator."""
    if not denominator.free_symbols:
        return []
    try:
        _, pairs = sympy.factor_list(denominator)
        found = [factor for factor, _ in pairs]
    except (sympy.PolynomialError, NotImplementedError):
        found = [denominator]
    return [sympy.expand(f) for f in found if f.free_symbols]
