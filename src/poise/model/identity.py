"""Exact linear relations among expressions, by evaluation at random points modulo primes.

Deciding whether ``c1*f1 + ... + cn*fn`` vanishes identically by expanding it
symbolically is exact but can take minutes on real models (rational rate laws with
many terms). Here every expression is evaluated exactly, in modular arithmetic, at
random points: a non-zero rational function vanishes at a random point modulo a
prime ``p`` with probability at most (its degree) / p (the Schwartz–Zippel lemma),
so with several points and several primes near 2**31 a relation that holds at all of
them holds identically, except with a probability far below 1e-30.

What is evaluated exactly:

- integers, rationals, and floating-point numbers, each taken as the decimal
  fraction it prints as (``0.7859`` is 7859/10000, ``4.3e-06`` is 43/10**7), so
  coefficients typed in decimals cancel exactly; a number beyond the double range
  is what the compiled model computes with (``1e-400`` is 0);
- ``+``, ``*`` and integer powers (negative ones by the modular inverse).

Every other sub-expression (``exp``, ``x**0.5``, ``x**n`` with a symbolic ``n``,
``min``, ``piecewise``...) is an *atom*: an independent random value, the same for
equal sub-expressions. A relation that holds with the atoms free also holds for
their actual values, so nothing false is ever reported; a relation that needs an
identity between atoms (``exp(a)*exp(b) = exp(a + b)``) is missed.

The walk over an expression is iterative (no recursion limit) and visits each
distinct sub-expression once.
"""

from __future__ import annotations

from fractions import Fraction
from math import isqrt, prod
from typing import Iterable, Mapping, Sequence

import numpy as np
import sympy

# Primes just below 2**31: products of two residues fit in int64.
PRIMES = np.array([2147483647, 2147483629, 2147483587, 2147483579,
                   2147483563, 2147483549, 2147483543, 2147483497], dtype=np.int64)
MAX_POWER = 10**6  # larger integer exponents are treated as atoms


class Evaluator:
    """Evaluates sympy expressions at random points modulo several primes.

    Parameters
    ----------
    points : int
        Number of random points.
    primes : array of int64
        The moduli; values have shape (len(primes), points).
    seed : int
        Seed of the random points and atoms (fixed: results are reproducible).
    values : mapping, optional
        Symbol -> residues of shape (len(primes), points), for symbols that must take
        given values; every other symbol gets random ones.
    """

    def __init__(self, points: int, primes: np.ndarray = PRIMES, seed: int = 0,
                 values: Mapping[sympy.Basic, np.ndarray] | None = None):
        self.primes = np.asarray(primes, dtype=np.int64)
        self.p = self.primes[:, None]
        self.points = points
        self.rng = np.random.default_rng(seed)
        self.cache: dict[sympy.Basic, np.ndarray] = dict(values or {})
        # points where some denominator vanished (modulo some prime): not usable
        self.bad = np.zeros(points, dtype=bool)

    def random(self) -> np.ndarray:
        return self.rng.integers(1, self.p, size=(len(self.primes), self.points), dtype=np.int64)

    def constant(self, value: Fraction) -> np.ndarray:
        numerator = np.array([value.numerator % int(q) for q in self.primes], dtype=np.int64)
        denominator = np.array([value.denominator % int(q) for q in self.primes], dtype=np.int64)
        result = numerator * _power(denominator, self.primes - 2, self.primes) % self.primes
        return np.broadcast_to(result[:, None], (len(self.primes), self.points)).copy()

    def evaluate(self, expr: sympy.Basic) -> np.ndarray:
        """Residues of `expr`, shape (primes, points)."""
        stack = [expr]
        cache = self.cache
        while stack:
            node = stack[-1]
            if node in cache:
                stack.pop()
                continue
            if _is_arithmetic(node):
                pending = [a for a in node.args if a not in cache]
                if pending:
                    stack.extend(pending)
                    continue
            stack.pop()
            cache[node] = self._value(node)
        return cache[expr]

    def _value(self, node: sympy.Basic) -> np.ndarray:
        p = self.p
        if isinstance(node, sympy.Rational):
            return self.constant(Fraction(int(node.p), int(node.q)))
        if isinstance(node, sympy.Float):
            return self.constant(decimal_fraction(node))
        if isinstance(node, sympy.Add):
            total = np.zeros((len(self.primes), self.points), dtype=np.int64)
            for arg in node.args:
                total = (total + self.cache[arg]) % p
            return total
        if isinstance(node, sympy.Mul):
            result = np.ones((len(self.primes), self.points), dtype=np.int64)
            for arg in node.args:
                result = result * self.cache[arg] % p
            return result
        if isinstance(node, sympy.Pow) and _is_arithmetic(node):
            base = self.cache[node.base]
            exponent = _integer_exponent(node.exp)
            if exponent < 0:
                self.bad |= (base == 0).any(axis=0)
                base = _power(base, p - 2, p)
                exponent = -exponent
            return _power(base, np.full_like(base, exponent), p)
        return self.random()  # an atom


def _is_arithmetic(node: sympy.Basic) -> bool:
    """Nodes evaluated from their arguments (the rest are numbers, symbols or atoms)."""
    if isinstance(node, (sympy.Add, sympy.Mul)):
        return True
    if isinstance(node, sympy.Pow):
        return _integer_exponent(node.exp) is not None
    return False


def _integer_exponent(exponent: sympy.Basic) -> int | None:
    if exponent.is_Integer:
        value = int(exponent)
    elif isinstance(exponent, sympy.Float) and float(exponent).is_integer():
        value = int(float(exponent))
    else:
        return None
    return value if abs(value) <= MAX_POWER else None


def decimal_fraction(number: sympy.Float) -> Fraction:
    """The exact decimal fraction a float prints as; beyond double range what a double holds."""
    value = float(number)
    if value != value or value in (float("inf"), float("-inf")):
        raise ValueError(f"the number {number} is not finite")
    return Fraction(repr(value))


def _power(base: np.ndarray, exponent: np.ndarray, modulus) -> np.ndarray:
    """Elementwise base**exponent modulo `modulus` by repeated squaring (int64 safe)."""
    base = np.asarray(base, dtype=np.int64) % modulus
    exponent = np.array(exponent, dtype=np.int64)
    result = np.ones(np.broadcast(base, exponent).shape, dtype=np.int64)
    base = np.broadcast_to(base, result.shape).copy()
    exponent = np.broadcast_to(exponent, result.shape).copy()
    while exponent.any():
        odd = (exponent & 1).astype(bool)
        result = np.where(odd, result * base % modulus, result)
        base = base * base % modulus
        exponent >>= 1
    return result


# --- linear algebra modulo a prime -------------------------------------------------------

def row_reduce(matrix: np.ndarray, prime: int) -> tuple[np.ndarray, list[int]]:
    """Reduced row echelon form modulo `prime`; returns (rows, pivot columns)."""
    _, reduced, pivots = row_reduce_many(np.asarray(matrix)[None], np.array([prime], dtype=np.int64))
    return reduced[0], pivots


def row_reduce_many(matrices: np.ndarray, primes: np.ndarray) -> tuple[np.ndarray, np.ndarray, list[int]]:
    """Reduced row echelon forms of one matrix's residues modulo several primes at once.

    Parameters
    ----------
    matrices : array (k, rows, cols)
        Residues modulo each of the `primes` (k,).

    Returns
    -------
    kept : array of int
        The primes (their positions) whose echelon form is returned: where a column
        has a pivot modulo some primes but not others, the rank dropped by accident
        modulo the latter (a random value hit zero), and they are left out.
    reduced : array (len(kept), rank, cols)
    pivots : list of int
        The pivot columns, common to the kept primes.

    Notes
    -----
    One pass over the columns for all primes together; each elimination touches only
    the columns from the pivot on (those before it are already zero in the pivot row).
    """
    a = np.array(matrices, dtype=np.int64)
    kept = np.arange(a.shape[0])
    p = np.asarray(primes, dtype=np.int64)[:, None, None]
    a %= p
    _, rows, cols = a.shape
    pivots: list[int] = []
    r = 0
    for c in range(cols):
        if r == rows:
            break
        nonzero = a[:, r:, c] != 0
        found = nonzero.any(axis=1)
        if not found.any():
            continue
        if not found.all():
            a, p, kept = a[found], p[found], kept[found]
            nonzero = nonzero[found]
        k = r + nonzero.argmax(axis=1)          # first usable row, per prime
        layer = np.arange(a.shape[0])
        pivot_rows = a[layer, k].copy()
        a[layer, k] = a[:, r]
        a[:, r] = pivot_rows
        inverse = _power(a[:, r, c], p[:, 0, 0] - 2, p[:, 0, 0])
        a[:, r, c:] = a[:, r, c:] * inverse[:, None] % p[:, 0]
        factor = a[:, :, c].copy()
        factor[:, r] = 0
        a[:, :, c:] = (a[:, :, c:] - factor[:, :, None] * a[:, r:r + 1, c:]) % p
        pivots.append(c)
        r += 1
    return kept, a[:, :r], pivots


def null_space_residues(matrix: np.ndarray, prime: int) -> tuple[list[int], np.ndarray]:
    """Basis of {c : matrix @ c = 0} modulo `prime`, one vector per free column.

    Each vector has 1 at its free column and 0 at the other free columns (the basis
    sympy's ``Matrix.nullspace`` gives over the rationals). Returns (free columns,
    vectors as rows).
    """
    _, free, basis = null_spaces(np.asarray(matrix)[None], np.array([prime], dtype=np.int64))
    return free, basis[0]


def null_spaces(matrices: np.ndarray, primes: np.ndarray) -> tuple[np.ndarray, list[int], np.ndarray]:
    """`null_space_residues` modulo several primes at once: (kept primes, free columns,
    bases (len(kept), len(free), cols)); see `row_reduce_many` for the kept primes."""
    kept, reduced, pivots = row_reduce_many(matrices, primes)
    cols = matrices.shape[2]
    chosen = set(pivots)
    free = [c for c in range(cols) if c not in chosen]
    q = np.asarray(primes, dtype=np.int64)[kept][:, None, None]
    basis = np.zeros((kept.size, len(free), cols), dtype=np.int64)
    basis[:, np.arange(len(free)), free] = 1
    if pivots and free:
        basis[:, :, pivots] = (-reduced[:, :, free]).transpose(0, 2, 1) % q
    return kept, free, basis


def rank_mod(matrix: np.ndarray, prime: int) -> int:
    return len(row_reduce(matrix, prime)[1])


def reconstruct(residues: Sequence[int], primes: Iterable[int]) -> Fraction | None:
    """The rational with small numerator and denominator congruent to `residues`.

    Chinese remaindering, then rational reconstruction (half-extended Euclid): found
    when |numerator| and denominator are below sqrt(M/2), M the product of the primes.
    """
    primes = [int(q) for q in primes]
    modulus = prod(primes)
    value = 0
    for residue, q in zip(residues, primes):
        rest = modulus // q
        value += int(residue) * rest * pow(rest, -1, q)
    value %= modulus
    bound = isqrt(modulus // 2)
    r0, r1, s0, s1 = modulus, value, 0, 1
    while r1 > bound:
        quotient = r0 // r1
        r0, r1 = r1, r0 - quotient * r1
        s0, s1 = s1, s0 - quotient * s1
    if s1 == 0 or abs(s1) > bound:
        return None
    return Fraction(r1, s1)
