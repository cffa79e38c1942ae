"""Linear conservation laws: vectors c with c · f(x) ≡ 0 for every x and parameter.

The laws are found exactly with sympy: every right-hand side is split into terms
(numeric coefficient × the rest); c · f vanishes identically when, for every distinct
term, the coefficients of the states' equations weighted by c cancel. That is a
linear system with rational entries, solved exactly by `Matrix.nullspace`.
"""

from __future__ import annotations

from typing import Mapping, Sequence

import sympy


def _term_matrix(ode: Mapping[str, sympy.Expr], states: Sequence[str]) -> sympy.Matrix:
    """Rows: distinct non-numeric terms; columns: states; entries: numeric coefficients."""
    rows: dict[sympy.Expr, list[sympy.Expr]] = {}
    for j, state in enumerate(states):
        for term in sympy.Add.make_args(sympy.expand(ode[state])):
            coeff, rest = term.as_coeff_Mul()
            row = rows.setdefault(rest, [sympy.Integer(0)] * len(states))
            row[j] += sympy.nsimplify(coeff, rational=True)
    if not rows:
        return sympy.zeros(1, len(states))
    return sympy.Matrix(list(rows.values()))


def find_laws(ode: Mapping[str, sympy.Expr], states: Sequence[str]) -> list[dict[str, sympy.Rational]]:
    """A basis of the linear conservation laws, each as {state: coefficient}.

    Coefficients are exact rationals scaled to the smallest whole numbers.
    """
    basis = _term_matrix(ode, states).nullspace()
    laws = []
    for vector in basis:
        denominators = [sympy.fraction(v)[1] for v in vector]
        scale = sympy.ilcm(*denominators) if denominators else 1
        ints = [v * scale for v in vector]
        common = sympy.igcd(*[int(i) for i in ints if i != 0]) or 1
        sign = -1 if next(i for i in ints if i != 0) < 0 else 1
        laws.append({s: sympy.Rational(sign * i, common) for s, i in zip(states, ints) if i != 0})
    return laws


def law_vector(combination: sympy.Expr, states: Sequence[str]) -> list[sympy.Expr] | None:
    """Coefficients of a declared linear combination of states, or None if not linear
    with numeric coefficients."""
    symbols = [sympy.Symbol(s, real=True) for s in states]
    expanded = sympy.expand(combination)
    coefficients = []
    for sym in symbols:
        c = expanded.coeff(sym)
        if not c.is_number:
            return None
        coefficients.append(c)
    remainder = sympy.expand(expanded - sum(c * s for c, s in zip(coefficients, symbols)))
    if remainder != 0:
        return None
    return coefficients


def is_conserved(vector: Sequence[sympy.Expr], ode: Mapping[str, sympy.Expr], states: Sequence[str]) -> bool:
    """Whether c · f ≡ 0 holds exactly."""
    total = sum(c * ode[s] for c, s in zip(vector, states))
    return sympy.simplify(sympy.expand(total)) == 0


def spans(declared: Sequence[Sequence[sympy.Expr]], law: Sequence[sympy.Expr]) -> bool:
    """Whether `law` is a linear combination of the declared vectors."""
    if not declared:
        return all(c == 0 for c in law)
    base = sympy.Matrix([list(v) for v in declared])
    return base.rank() == base.col_join(sympy.Matrix([list(law)])).rank()


def format_law(law: Mapping[str, sympy.Rational]) -> str:
    """A law as study-file text, e.g. "E + C" or "2*A + B"."""
    parts = []
    for state, c in law.items():
        magnitude = abs(c)
        term = state if magnitude == 1 else f"{magnitude}*{state}"
        parts.append(("- " if c < 0 else "+ ") + term)
    text = " ".join(parts)
    return text[2:] if text.startswith("+ ") else "-" + text[2:]
