"""Linear conservation laws: vectors c with c · f(x) ≡ 0 for every state x.

The laws are found exactly, by evaluating every right-hand side at random points
modulo several primes (`poise.model.identity`): the vectors c with c · f = 0 at all
those points form, with overwhelming probability, exactly the space of laws (the
Schwartz–Zippel lemma), and their coefficients are recovered as exact rationals. No
symbolic expansion is needed, so this stays fast on models with hundreds of rational
rate laws. Stoichiometric laws and laws that only the kinetics make (two equations
with the same rate term) are found alike, and so is a state whose equation is
identically zero (it is conserved by itself).

Numbers in the equations count as the decimal fractions they print as, so a declared
law with decimal coefficients (``0.7859*X - 0.1762*Y``) is checked exactly against
decimal stoichiometries.
"""

from __future__ import annotations

from fractions import Fraction
from typing import Mapping, Sequence

import numpy as np
import sympy

from poise.model.identity import PRIMES, Evaluator, decimal_fraction, null_spaces, rank_mod, reconstruct

# Largest whole-number coefficient kept when a law is scaled to integers; beyond it the
# law is written with its first coefficient 1 (e.g. "X + 4.3e-06*Y").
MAX_INTEGER_COEFFICIENT = 1000
EXTRA_POINTS = 6


class LawProbe:
    """The equations of a model evaluated once, exactly, at random points.

    Parameters
    ----------
    ode : mapping
        state -> right-hand side (sympy). Every symbol that is not a state counts as a
        free parameter (any value); substitute fixed values first where laws should
        hold only for them.
    states : sequence of str
        Column order.
    seed : int
        Seed of the random points (fixed, so results are reproducible).
    """

    def __init__(self, ode: Mapping[str, sympy.Expr], states: Sequence[str], seed: int = 0):
        self.states = list(states)
        self.ode = {s: exact_numbers(_expression(ode[s])) for s in self.states}
        n = len(self.states)
        self.evaluator = Evaluator(n + EXTRA_POINTS, PRIMES, seed)
        columns = [self.evaluator.evaluate(self.ode[s]) for s in self.states]
        values = np.stack(columns, axis=-1) if columns else np.zeros((len(PRIMES), n + EXTRA_POINTS, 0),
                                                                     dtype=np.int64)
        self.values = values[:, ~self.evaluator.bad, :]  # (primes, points, states)

    def laws(self, tidy: bool = True) -> list[dict[str, sympy.Rational]]:
        """A basis of the conservation laws, each {state: exact coefficient}.

        With `tidy`, each law is simplified towards non-negative coefficients on few
        states (a total amount); without, the basis is the one sympy's ``nullspace``
        would give (each law has a state of its own). Each law is scaled to
        coprime whole numbers with its first coefficient positive when that keeps them
        at most `MAX_INTEGER_COEFFICIENT`, else to a first coefficient of 1.
        """
        if not self.states:
            return []
        # two primes recover coefficients up to about 1e9 / 1e9 (stoichiometries,
        # decimal sizes); all of them only when that fails. A law whose coefficients
        # even all the primes cannot recover (beyond about 1e37) is left out.
        for count in (2, len(PRIMES)):
            last = count == len(PRIMES)
            vectors = self._basis(count, partial=last)
            if vectors is None:
                continue
            laws = []
            fresh = LawProbe(self.ode, self.states, seed=_fresh_seed(self.evaluator)) if vectors else None
            for law in _tidy(vectors) if tidy else vectors:
                law = _normalised(law)
                # checked at new points: guards against a wrongly reconstructed rational
                if fresh.holds([sympy.Rational(c.numerator, c.denominator) for c in law]):
                    laws.append({s: sympy.Rational(c.numerator, c.denominator)
                                 for s, c in zip(self.states, law) if c != 0})
                elif not last:
                    break
            else:
                return laws
        return []  # not reached: the last round returns

    def _basis(self, count: int, partial: bool = False) -> list[list[Fraction]] | None:
        """The law space's basis from residues modulo the first `count` primes, as exact
        rationals; None when a coefficient cannot be recovered from them (with
        `partial`, the vectors that can be are returned)."""
        kept, free, basis = null_spaces(self.values[:count], PRIMES[:count])
        primes = [int(q) for q in PRIMES[:count][kept]]
        vectors = []
        for row in range(len(free)):
            vector = []
            for col in range(len(self.states)):
                residues = basis[:, row, col]
                if not residues.any():
                    vector.append(Fraction(0))
                    continue
                value = reconstruct(residues, primes)
                if value is None:
                    break
                vector.append(value)
            else:
                vectors.append(vector)
                continue
            if not partial:
                return None
        return vectors

    def holds(self, vector: Sequence[sympy.Expr]) -> bool:
        """Whether c · f ≡ 0 for the coefficients `vector` (numbers, in column order)."""
        coefficients = [self.evaluator.evaluate(_expression(c))[:, ~self.evaluator.bad]
                        for c in vector]
        p = PRIMES[:, None]
        total = np.zeros(self.values.shape[:2], dtype=np.int64)
        for c, column in zip(coefficients, np.moveaxis(self.values, -1, 0)):
            total = (total + c * column % p) % p
        return not total.any()


def _fresh_seed(evaluator: Evaluator) -> int:
    return int(evaluator.rng.integers(1, 2**31))


def _score(vector: list[int]) -> tuple[int, int]:
    """Fewer coefficients of the minority sign, then fewer states: a law a reader
    recognises (a total amount of enzyme, of substrate) rather than a difference."""
    positive = sum(1 for c in vector if c > 0)
    negative = sum(1 for c in vector if c < 0)
    return (min(positive, negative), positive + negative)


def _primitive(vector: list[int]) -> list[int]:
    from math import gcd
    divisor = 0
    for c in vector:
        divisor = gcd(divisor, c)
    return [c // divisor for c in vector] if divisor > 1 else vector


def _tidy(basis: list[list[Fraction]], rounds: int = 20) -> list[list[Fraction]]:
    """The same space of laws, each law simplified by adding multiples of the others
    while that lowers its `_score` (a law keeps a non-zero multiple of itself, so the
    laws stay independent). Whole-number arithmetic: it runs on every import."""
    from math import lcm
    vectors = [_primitive([int(c * lcm(*[x.denominator for x in v])) for c in v]) for v in basis]
    scores = [_score(v) for v in vectors]
    for _ in range(rounds):
        changed = False
        for i in range(len(vectors)):
            for j in range(len(vectors)):
                if i == j:
                    continue
                v, w = vectors[i], vectors[j]
                candidates = [[a + b for a, b in zip(v, w)], [a - b for a, b in zip(v, w)]]
                candidates += [[b_k * a - a_k * b for a, b in zip(v, w)]
                               for a_k, b_k in {(a, b) for a, b in zip(v, w) if a and b}]
                for candidate in candidates:
                    score = _score(candidate)
                    if score[1] and score < scores[i]:
                        vectors[i], scores[i], v = _primitive(candidate), score, candidate
                        changed = True
        if not changed:
            break
    return [[Fraction(c) for c in v] for v in vectors]


def _normalised(vector: list[Fraction]) -> list[Fraction]:
    from math import gcd, lcm
    denominators = lcm(*[c.denominator for c in vector])
    integers = [int(c * denominators) for c in vector]
    divisor = 0
    for i in integers:
        divisor = gcd(divisor, i)
    integers = [i // divisor for i in integers] if divisor else integers
    first = next(i for i in integers if i != 0)
    sign = -1 if first < 0 else 1
    if max(abs(i) for i in integers) <= MAX_INTEGER_COEFFICIENT:
        return [Fraction(sign * i) for i in integers]
    return [Fraction(i, first) for i in integers]


def find_laws(ode: Mapping[str, sympy.Expr], states: Sequence[str]) -> list[dict[str, sympy.Rational]]:
    """A basis of the linear conservation laws, each as {state: coefficient}.

    Coefficients are exact rationals, scaled to small whole numbers where possible
    (see `LawProbe.laws`). Every symbol that is not a state is a free parameter.
    """
    return LawProbe(ode, states).laws()


def law_vector(combination: sympy.Expr, states: Sequence[str]) -> list[sympy.Expr] | None:
    """Coefficients of a declared linear combination of states, or None if not linear
    with numeric coefficients. Floating-point coefficients become the exact decimal
    fractions they print as."""
    symbols = [sympy.Symbol(s, real=True) for s in states]
    expanded = sympy.expand(combination)
    coefficients = []
    for sym in symbols:
        c = expanded.coeff(sym)
        if not c.is_number or not c.is_real:
            return None
        try:
            coefficients.append(exact(c))
        except (TypeError, ValueError):  # infinite or undefined
            return None
    remainder = sympy.expand(expanded - sum(c * s for c, s in zip(coefficients, symbols)))
    if remainder != 0:
        return None
    return coefficients


def exact_numbers(expr: sympy.Expr) -> sympy.Expr:
    """Every float in `expr` as its exact decimal fraction, so that sympy's own arithmetic
    (folding ``1.0 + k`` after a substitution) stays exact."""
    floats = {f for f in expr.atoms(sympy.Float)}
    return expr.xreplace({f: exact(f) for f in floats}) if floats else expr


def exact(number: sympy.Expr) -> sympy.Rational:
    """A number as an exact rational: a float (or an irrational constant, through its
    float value) as the decimal fraction it prints as."""
    if isinstance(number, sympy.Rational):
        return number
    fraction = decimal_fraction(sympy.Float(number))
    return sympy.Rational(fraction.numerator, fraction.denominator)


def is_conserved(vector: Sequence[sympy.Expr], ode: Mapping[str, sympy.Expr], states: Sequence[str]) -> bool:
    """Whether c · f ≡ 0 holds exactly."""
    return LawProbe(ode, states).holds(vector)


def spans(declared: Sequence[Sequence[sympy.Expr]], law: Sequence[sympy.Expr]) -> bool:
    """Whether `law` is a linear combination of the declared vectors (exact, modulo primes)."""
    if not declared:
        return all(c == 0 for c in law)
    prime = int(PRIMES[0])
    base = np.array([[_residue(c, prime) for c in v] for v in declared], dtype=np.int64)
    extended = np.vstack([base, [[_residue(c, prime) for c in law]]])
    return rank_mod(base, prime) == rank_mod(extended, prime)


def _expression(value) -> sympy.Expr:
    """A sympy expression or number built by poise (parsed study expressions, Python
    numbers, fractions) as a sympy object; text is refused, never parsed here."""
    if isinstance(value, str):
        raise TypeError("conservation analysis takes expressions built by poise, not text")
    return sympy.sympify(value)  # safe: text refused above; numbers and sympy objects only


def _residue(number: sympy.Expr, prime: int) -> int:
    rational = exact(_expression(number))
    return int(rational.p) % prime * pow(int(rational.q) % prime, -1, prime) % prime


def extra_laws(declared: Mapping[str, sympy.Expr], derived: Mapping[str, sympy.Expr],
               states: Sequence[str], requires: Mapping[str, Sequence[str]] | None = None,
               varying: Sequence[str] = ()) -> list[str]:
    """The derived laws (total name -> combination) to add to the declared ones.

    A user's declarations and the laws derived from an SBML file combine: declared
    ones come first; a derived law is kept unless it is a combination of those
    before it, or it holds only at the values of parameters (`requires`) that vary.
    Combinations that are not linear in the states are kept (the check of the
    study reports them).
    """
    vectors = [v for v in (law_vector(c, states) for c in declared.values()) if v is not None]
    kept = []
    for total, combination in derived.items():
        if set((requires or {}).get(total, ())) & set(varying):
            continue
        vector = law_vector(combination, states)
        if vector is None or not spans(vectors, vector):
            kept.append(total)
            if vector is not None:
                vectors.append(vector)
    return kept


def format_law(law: Mapping[str, sympy.Rational]) -> str:
    """A law as study-file text, e.g. "E + C", "2*A + B" or "X + 4.3e-06*Y"."""
    parts = []
    for state, c in law.items():
        magnitude = abs(sympy.Rational(c))
        term = state if magnitude == 1 else f"{_number_text(magnitude)}*{state}"
        parts.append(("- " if c < 0 else "+ ") + term)
    text = " ".join(parts)
    return text[2:] if text.startswith("+ ") else "-" + text[2:]


def _number_text(value: sympy.Rational) -> str:
    """Whole numbers as such; decimal fractions in float notation; others as p/q."""
    if value.q == 1:
        return str(value.p)
    as_float = float(value)
    if Fraction(repr(as_float)) == Fraction(int(value.p), int(value.q)):
        return repr(as_float)
    return f"({value.p}/{value.q})"
