"""Typical size of each state, read off the balance of the model's own terms.

A steady state is where the terms of each equation cancel, so each term must be about
as large as the others of its sum. Writing every quantity by its logarithmic size
(``u_j = log |x_j|`` for a state, a number for anything free of the states), a product
adds sizes, a power multiplies them, and every sum asks its terms to share one size:

    log |c_k| + sum_j a_kj u_j + (sizes of nested sums) = w_sum   for each term k.

These linear equations, over all sums of all equations, are solved in the least-squares
sense per parameter set; ``exp(u_j)`` is the state's typical size. For polynomial
systems this is the variable scaling of Meintjes & Morgan (1987, "A methodology for
solving chemical equilibrium systems", Appl. Math. Comput. 22:333), which balances the
logarithms of the coefficients; here it is read off the expression tree, so rational
terms, Hill functions and real exponents count too. The arguments of ``exp``, ``sin``,
``tanh`` and the like are asked to be of order one.

Why: every tolerance and every start of the steady-state search is placed relative to
these sizes. They follow the model's units exactly — write a state in nM instead of M
and its size is multiplied by 1e9, because the constants it meets are — so a result
never depends on the units chosen (unlike a size taken from the largest parameter).
Directions the terms do not fix (a state that only ever multiplies its own equation)
are pulled weakly towards 1.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np
import sympy

from poise.model.constants import floating_constants

# the weak pull of undetermined directions towards 0 (size 1), relative to one balance row
_RIDGE = 1e-8
# logarithmic sizes are clipped to the range of double precision
_LOG_LIMIT = 690.0
# functions whose argument is asked to be of order one
_ORDER_ONE = (sympy.exp, sympy.sin, sympy.cos, sympy.tan, sympy.tanh, sympy.sinh, sympy.cosh,
              sympy.asin, sympy.acos, sympy.atan, sympy.asinh, sympy.acosh, sympy.atanh)


@dataclass(frozen=True)
class _Level:
    """A logarithmic size: sum of coefficient * unknown, plus a state-free constant."""

    terms: dict
    constant: sympy.Expr

    def __add__(self, other: "_Level") -> "_Level":
        terms = dict(self.terms)
        for column, coefficient in other.terms.items():
            terms[column] = terms.get(column, 0) + coefficient
        return _Level(terms, self.constant + other.constant)

    def times(self, factor: sympy.Expr) -> "_Level":
        return _Level({c: v * factor for c, v in self.terms.items()}, self.constant * factor)


_ZERO = _Level({}, sympy.Integer(0))


class _Builder:
    """Walks the right-hand sides and collects the balance rows."""

    def __init__(self, states: Sequence[sympy.Symbol]):
        self.states = list(states)
        self.column = {s: j for j, s in enumerate(self.states)}
        self.columns = len(self.states)
        self.rows: list[_Level] = []
        self.memo: dict = {}

    def level(self, expr: sympy.Expr) -> _Level:
        if expr in self.memo:
            return self.memo[expr]
        got = self._level(expr)
        self.memo[expr] = got
        return got

    def _free(self, expr) -> bool:
        return not (expr.free_symbols & set(self.states))

    def _level(self, expr) -> _Level:
        if self._free(expr):
            return _Level({}, sympy.log(sympy.Abs(expr))) if expr != 0 else _ZERO
        if expr in self.column:
            return _Level({self.column[expr]: sympy.Integer(1)}, sympy.Integer(0))
        if isinstance(expr, sympy.Mul):
            out = _ZERO
            for factor in expr.args:
                out = out + self.level(factor)
            return out
        if isinstance(expr, sympy.Pow):
            base, exponent = expr.args
            if self._free(exponent):
                return self.level(base).times(exponent)
            self._order_one(base)
            self._order_one(exponent)
            return _ZERO
        if isinstance(expr, (sympy.Add, sympy.Min, sympy.Max)):
            return self._balanced(expr.args)
        if isinstance(expr, sympy.Piecewise):
            return self._balanced([value for value, _ in expr.args])
        if isinstance(expr, sympy.Abs):
            return self.level(expr.args[0])
        if isinstance(expr, _ORDER_ONE):
            for argument in expr.args:
                self._order_one(argument)
            return _ZERO
        # log and anything else: its value is of order one, its argument unconstrained
        return _ZERO

    def _balanced(self, parts) -> _Level:
        """A sum (or a choice) of parts: each part's size equals the sum's own size."""
        column = self.columns
        self.columns += 1
        for part in parts:
            if part == 0:
                continue
            self.rows.append(self.level(part) + _Level({column: sympy.Integer(-1)}, sympy.Integer(0)))
        return _Level({column: sympy.Integer(1)}, sympy.Integer(0))

    def _order_one(self, expr) -> None:
        if not self._free(expr):
            self.rows.append(self.level(expr))


@dataclass(frozen=True)
class MagnitudeProgram:
    """The balance rows of a system, compiled: ``sizes(params)`` gives (B, n)."""

    n: int
    columns: int
    matrix: Callable[[np.ndarray], np.ndarray]     # params (B, m) -> (B, rows, columns)
    constants: Callable[[np.ndarray], np.ndarray]  # params (B, m) -> (B, rows)
    constant_matrix: np.ndarray | None             # when no entry depends on a parameter

    def sizes(self, params: np.ndarray) -> np.ndarray:
        """Typical size of each state for each parameter set, shape (B, n)."""
        params = np.asarray(params, dtype=float)
        batch = params.shape[0]
        if self.n == 0:
            return np.ones((batch, 0))
        b = self.constants(params)
        A = self.constant_matrix if self.constant_matrix is not None else self.matrix(params)
        levels = solve_levels(A, b)
        return np.exp(np.clip(levels[:, :self.n], -_LOG_LIMIT, _LOG_LIMIT))


def magnitude_program(rhs: Sequence[sympy.Expr], states: Sequence[sympy.Symbol],
                      params: Sequence[sympy.Symbol]) -> MagnitudeProgram:
    """Balance rows of the right-hand sides `rhs` in `states`, compiled over `params`."""
    builder = _Builder(states)
    for expr in rhs:
        builder.level(sympy.sympify(expr))  # safe: built by poise, never study text
    rows, columns = builder.rows, builder.columns
    entries = [[row.terms.get(c, 0) for c in range(columns)] for row in rows]
    numeric = all(sympy.sympify(v).is_number for line in entries for v in line)  # safe: as above
    params = list(params)
    if numeric:
        constant = np.array([[float(v) for v in line] for line in entries]).reshape(len(rows), columns)
        matrix = lambda P: np.broadcast_to(constant, (P.shape[0],) + constant.shape)  # noqa: E731
    else:
        constant = None
        matrix = _grid_kernel(params, entries, (len(rows), columns))
    constants = _grid_kernel(params, [[row.constant for row in rows]], (1, len(rows)))
    return MagnitudeProgram(n=len(states), columns=columns, matrix=matrix,
                            constants=lambda P: -constants(P)[:, 0, :], constant_matrix=constant)


def _grid_kernel(params, exprs, shape):
    """Vectorised evaluation of a grid of state-free expressions: P (B, m) -> (B, *shape)."""
    flat = [sympy.sympify(e) for line in exprs for e in line]  # safe: built by poise
    if not flat:
        return lambda P: np.zeros((P.shape[0],) + shape)
    function = sympy.lambdify(params, [floating_constants(e) for e in flat], modules="numpy", cse=True)

    def kernel(P: np.ndarray) -> np.ndarray:
        out = np.empty((P.shape[0], len(flat)))
        with np.errstate(all="ignore"):
            values = function(*np.asarray(P, dtype=float).T)
        for k, value in enumerate(values):
            value = np.asarray(value)
            out[:, k] = np.real(value) if np.iscomplexobj(value) else value
        return out.reshape((P.shape[0],) + shape)

    return kernel


def absolute_form(expr: sympy.Expr) -> sympy.Expr:
    """The size of the terms that make up `expr`: every sum replaced by the sum of the
    absolute values of its parts, at every depth (products and positive powers of them
    kept as products and powers). Where `expr` is small next to this, its terms cancel;
    rounding and a root's inaccuracy perturb `expr` by a fraction of this, never of
    its own value. Denominators and functions count by their value."""
    if not expr.free_symbols or isinstance(expr, sympy.Symbol):
        return sympy.Abs(expr)
    if isinstance(expr, sympy.Add):
        return sympy.Add(*[absolute_form(a) for a in expr.args])
    if isinstance(expr, sympy.Mul):
        return sympy.Mul(*[absolute_form(a) for a in expr.args])
    if isinstance(expr, sympy.Pow):
        base, exponent = expr.args
        if exponent.is_number and exponent > 0:
            return absolute_form(base) ** exponent
    return sympy.Abs(expr)


def solve_levels(A: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Least-squares solution z of ``A z = b`` for each set, rows with a non-finite
    right-hand side left out (a term whose coefficient vanishes at that set), and a weak
    ridge towards 0 for directions the rows leave free. A set's result does not depend
    on the other sets of the batch.

    Parameters
    ----------
    A : (rows, cols) or (B, rows, cols)
    b : (B, rows)

    Returns
    -------
    (B, cols)
    """
    b = np.asarray(b, dtype=float)
    batch, rows = b.shape
    cols = A.shape[-1]
    use = np.isfinite(b)
    if A.ndim == 3:
        use &= np.isfinite(A).all(axis=2)
    out = np.empty((batch, cols))
    if A.ndim == 2 or A.shape[0] == 1:
        # one solve per pattern of usable rows (nearly always a single pattern)
        A2 = A if A.ndim == 2 else A[0]
        if use.all():   # the common case: no coefficient vanishes
            patterns, which = np.ones((1, rows), bool), np.zeros(batch, int)
        else:
            patterns, which = np.unique(use, axis=0, return_inverse=True)
        for k, pattern in enumerate(patterns):
            sets = np.flatnonzero(which.ravel() == k)
            Ak = A2[pattern]
            inverse = np.linalg.inv(Ak.T @ Ak + _RIDGE * np.eye(cols))
            # z = inverse Ak^T b, summed row by row in a fixed order so
            # that a set's result never depends on the others in the batch (a matrix
            # product's blocking would)
            mapping = inverse @ Ak.T                                   # (cols, rows')
            bk = b[sets][:, pattern]
            z = np.zeros((sets.size, cols))
            for r in range(mapping.shape[1]):
                z += bk[:, r:r + 1] * mapping[:, r]
            out[sets] = z
        return out
    A = np.where(use[:, :, None], A, 0.0)
    rhs = np.einsum("brc,br->bc", A, np.where(use, b, 0.0))
    normal = np.einsum("brc,brd->bcd", A, A) + _RIDGE * np.eye(cols)
    return np.linalg.solve(normal, rhs[..., None])[..., 0]
