"""The symbolic system on its conservation class.

Where linear conservation laws c · x = T hold, one state per law is eliminated
(x_pivot written through the total T and the other states). The steady states are
solved for the remaining ("free") states, and stability is judged on the Jacobian of
the reduced right-hand side — the Jacobian restricted to the conservation class, so
structural zero eigenvalues never appear.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping, Sequence

import sympy

from poise.errors import InputError
from poise.model.conservation import LawProbe, exact, exact_numbers, format_law, law_vector, spans
from poise.study.expressions import to_text
from poise.study.spec import Study


@dataclass(frozen=True)
class ReducedSystem:
    """The model ready for compilation.

    Attributes
    ----------
    states : all states, in study order.
    free : the states solved for (after eliminating one state per conservation law).
    eliminated : state -> expression in the free states and the totals.
    rhs : reduced right-hand sides, one per free state.
    parameters : parameters left symbolic (the varying ones), in kernel column order.
    domain : state -> (low, high), for every state.
    scales : state -> a bound on the state's size known from the model (conserved total
        or finite domain limit) as an expression in parameters, or None.
    """

    states: tuple[str, ...]
    free: tuple[str, ...]
    eliminated: dict[str, sympy.Expr]
    rhs: tuple[sympy.Expr, ...]
    parameters: tuple[str, ...]
    domain: dict[str, tuple[float, float]]
    scales: dict[str, sympy.Expr | None]

    @property
    def jacobian(self) -> sympy.Matrix:
        return sympy.Matrix(self.rhs).jacobian(sympy.Matrix(self.free_symbols))

    @property
    def free_symbols(self) -> list[sympy.Symbol]:
        return [sympy.Symbol(s, real=True) for s in self.free]

    @property
    def parameter_symbols(self) -> list[sympy.Symbol]:
        return [sympy.Symbol(p, real=True) for p in self.parameters]


def check_conservation(study: Study, values: Mapping[str, float] | None = None,
                       varying: Sequence[str] | None = None) -> list[dict[str, sympy.Expr]]:
    """Verify declared totals and demand that every law of the model is declared.

    A declared law is verified on the model as it is solved: parameters not in
    `varying` are substituted by their `values` first (by default the uncertain
    parameters vary and every other one keeps its fixed value), so a law that holds
    only for particular fixed values (compartment sizes as coefficients) is accepted.
    Every law that holds for all parameter values must be declared. The result is
    cached: one analysis per model and set of fixed values.

    Returns
    -------
    list of dict
        The declared laws, in declaration order, as {state: exact coefficient}.

    Raises
    ------
    InputError
        A declaration that is not a linear combination of states, is not conserved
        (naming the uncertain parameters it depends on when it holds at their nominal
        values), or follows from the others; or a law of the model left undeclared.
    """
    varying = tuple(study.uncertain) if varying is None else tuple(varying)
    values = study.nominal_values() if values is None else values
    fixed = tuple(sorted((p, float(v)) for p, v in values.items() if p not in varying))
    key = (str(study.path), tuple(study.states), tuple(study.ode[s] for s in study.states),
           tuple(study.conserved.items()), fixed, varying)
    if key not in _CHECKED:
        if len(_CHECKED) >= 32:
            _CHECKED.pop(next(iter(_CHECKED)))
        _CHECKED[key] = _checked_laws(study, dict(fixed), varying)
    return [dict(law) for law in _CHECKED[key]]


_CHECKED: dict[tuple, tuple] = {}


def _checked_laws(study: Study, fixed: dict[str, float], varying: tuple[str, ...]) -> tuple:
    states = study.states
    where = {"file": str(study.path), "table": "model.conserved"}
    probe = LawProbe(_substituted(study, fixed), states)
    declared = []
    for total, combination in study.conserved.items():
        vector = law_vector(combination, states)
        if vector is None or all(c == 0 for c in vector):
            raise InputError("expected a linear combination of states with numeric coefficients, e.g. \"E + C\"",
                             key=total, **where)
        if not probe.holds(vector):
            raise InputError(_not_conserved(study, combination, vector, fixed, varying), key=total, **where)
        if spans(declared, vector):
            raise InputError("this total follows from the other declared totals; remove it", key=total, **where)
        declared.append(vector)
    # laws for any parameter values: a law that only particular fixed values make (r = 0
    # in x' = r*x) may be declared, but is not demanded
    generic = LawProbe(study.ode, states)
    if not all(spans(declared, [law.get(s, 0) for s in states]) for law in generic.laws(tidy=False)):
        law = next(law for law in generic.laws() if not spans(declared, [law.get(s, 0) for s in states]))
        name = ("_".join(law) if len(law) <= 4 else "_".join(list(law)[:3]) + "_etc") + "_total"
        raise InputError(
            f"the model conserves {format_law(law)}, so its steady states form continua unless the total is fixed; "
            f"add the line  {name} = \"{format_law(law)}\"  and give {name} a value in [parameters]",
            key=name, **where)
    return tuple(tuple((s, c) for s, c in zip(states, v)) for v in declared)


def _substituted(study: Study, values: Mapping[str, float]) -> dict[str, sympy.Expr]:
    numbers = {sympy.Symbol(p, real=True): exact(sympy.Float(v)) for p, v in values.items()}
    return {s: exact_numbers(study.ode[s]).xreplace(numbers) for s in study.states}


def _not_conserved(study: Study, combination: sympy.Expr, vector, fixed, varying) -> str:
    """Why a declared law fails; names the parameters that left their nominal values
    when the law holds at those values."""
    text = f"{to_text(combination)} is not conserved by the model: the weighted sum of its equations is not zero"
    nominal_values = study.nominal_values()
    moved = [p for p in study.parameters if p in varying or fixed.get(p, nominal_values[p]) != nominal_values[p]]
    if not moved or not LawProbe(_substituted(study, nominal_values), study.states).holds(vector):
        return text
    involved = set()
    for state, c in zip(study.states, vector):
        if c != 0:
            involved |= {str(s) for s in study.ode[state].free_symbols}
    names = ", ".join(p for p in moved if p in involved) or ", ".join(moved)
    return (f"{to_text(combination)} is conserved only while {names} keep their nominal values, but they "
            f"vary (a distribution, or --at): keep them fixed, or remove this total")


def reduce(study: Study, values: Mapping[str, float], varying: Sequence[str]) -> ReducedSystem:
    """Substitute fixed parameter values, eliminate conserved states.

    Parameters
    ----------
    study : Study
    values : values for every parameter not in `varying`.
    varying : parameters kept symbolic, in the column order of the kernels.
    """
    laws = check_conservation(study, values, varying)
    state_symbols = {s: sympy.Symbol(s, real=True) for s in study.states}
    substitution = {sympy.Symbol(p, real=True): _number(v) for p, v in values.items() if p not in varying}

    eliminated: dict[str, sympy.Expr] = {}
    if laws:
        pivots = _pivots(laws, study.states)
        equations = [sum(c * state_symbols[s] for s, c in law.items()) - sympy.Symbol(total, real=True)
                     for law, total in zip(laws, study.conserved)]
        solution = sympy.solve(equations, [state_symbols[p] for p in pivots], dict=True)[0]
        eliminated = {p: sympy.simplify(solution[state_symbols[p]]).xreplace(substitution) for p in pivots}
    free = tuple(s for s in study.states if s not in eliminated)
    elimination = {state_symbols[s]: e for s, e in eliminated.items()}
    # xreplace: one simultaneous pass, far faster than subs on large rate laws
    rhs = tuple(study.ode[s].xreplace(elimination).xreplace(substitution) for s in free)
    scales = _scales(study, laws, substitution)
    return ReducedSystem(states=study.states, free=free, eliminated=eliminated, rhs=rhs,
                         parameters=tuple(varying), domain=dict(study.domain), scales=scales)


def _pivots(laws, states) -> list[str]:
    """One state per law to eliminate: row-reduce the law matrix and take pivot columns,
    preferring states that come late in the study's order (keep the first states free)."""
    reversed_states = list(reversed(states))
    matrix = sympy.Matrix([[law.get(s, 0) for s in reversed_states] for law in laws])
    _, pivot_columns = matrix.rref()
    return [reversed_states[i] for i in pivot_columns]


def _scales(study: Study, laws, substitution) -> dict[str, sympy.Expr | None]:
    """A size bound for each state: T/c from a law with non-negative coefficients, or a
    finite domain limit."""
    scales: dict[str, sympy.Expr | None] = {}
    for state in study.states:
        bound = None
        for law, total in zip(laws, study.conserved):
            # c . x = T with every c >= 0 over states that cannot be negative: x <= T / c
            present = {s: c for s, c in law.items() if c != 0}
            if (present.get(state, 0) > 0 and all(c > 0 for c in present.values())
                    and all(study.domain[s][0] >= 0 for s in present)):
                bound = (sympy.Symbol(total, real=True) / law[state]).subs(substitution)
                break
        low, high = study.domain[state]
        if bound is None and math.isfinite(high) and math.isfinite(low):
            bound = sympy.Float(max(abs(low), abs(high)))
        scales[state] = bound
    return scales


def _number(value: float) -> sympy.Expr:
    """Whole numbers stay integers so that x**n remains a polynomial power."""
    if float(value).is_integer() and abs(value) < 2**53:
        return sympy.Integer(int(value))
    return sympy.Float(value)
