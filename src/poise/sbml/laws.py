"""Conservation laws of an imported model, declared automatically.

The laws come from the same exact analysis that checks study files
(`poise.model.conservation`), applied to the imported equations with every named
sub-expression inlined and every parameter at its value: reactions conserve
amounts, so species in compartments of different sizes are conserved with the
sizes as coefficients (``A + 4.3e-06*B``); laws made by the kinetics (two equations
sharing a rate term, a rate constant of 0 that switches a reaction off) are found
alike. A law that holds only at particular parameter values records those
parameters: it is dropped when a study makes one of them uncertain. Each total is a
parameter named ``<first state>_total``, valued from the initial state; a user can
give it a distribution.
"""

from __future__ import annotations

from typing import Callable, Mapping, Sequence

import sympy

from poise.model.conservation import LawProbe, exact, find_laws, format_law


def conservation_laws(ode: Mapping[sympy.Symbol, sympy.Expr], states: Sequence[sympy.Symbol],
                      values: Mapping[sympy.Symbol, float],
                      initial: Callable[[sympy.Symbol], float],
                      fresh_name: Callable[[str], str]
                      ) -> tuple[dict[str, str], dict[str, float], dict[str, tuple[str, ...]]]:
    """Laws, their totals, and the parameters each law needs at their values.

    Parameters
    ----------
    ode : mapping
        state symbol -> right-hand side with named sub-expressions inlined.
    states : sequence of sympy.Symbol
        Column order (the first state of a law names its total).
    values : mapping
        Every other symbol -> its value.
    initial : callable
        Initial value of a state symbol.
    fresh_name : callable
        A wanted name -> an unused one.

    Returns
    -------
    laws : dict
        total name -> linear combination of states, as text.
    totals : dict
        total name -> its value at the initial state.
    requires : dict
        total name -> parameters the law holds only at their values (none for a
        stoichiometric law in compartments of equal size).
    """
    names = [s.name for s in states]
    numbers = {symbol: exact(sympy.Float(value)) for symbol, value in values.items()}
    equations = {s.name: ode[s] for s in states}
    laws, totals, requires = {}, {}, {}
    for law in find_laws({n: e.xreplace(numbers) for n, e in equations.items()}, names):
        members = [(c, s) for c, s in zip([law.get(n, 0) for n in names], states) if c != 0]
        total = fresh_name(f"{members[0][1].name}_total")
        laws[total] = format_law({s.name: c for c, s in members})
        totals[total] = float(sum(float(c) * initial(s) for c, s in members))
        requires[total] = _required(equations, law, numbers)
    return laws, totals, requires


def _required(equations: Mapping[str, sympy.Expr], law: Mapping[str, sympy.Rational],
              numbers: Mapping[sympy.Symbol, sympy.Expr]) -> tuple[str, ...]:
    """Parameters whose value the law needs: with that one free (the others at their
    values), the law no longer holds."""
    members = list(law)
    vector = [law[m] for m in members]
    own = {m: equations[m] for m in members}
    if LawProbe(own, members).holds(vector):
        return ()
    involved = sorted({s for e in own.values() for s in e.free_symbols if s in numbers}, key=str)
    needed = []
    for symbol in involved:
        others = {s: v for s, v in numbers.items() if s != symbol}
        if not LawProbe({m: e.xreplace(others) for m, e in own.items()}, members).holds(vector):
            needed.append(symbol.name)
    return tuple(needed)
