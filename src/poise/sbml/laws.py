"""Conservation laws of an imported model, declared automatically.

The laws come from the same exact analysis that checks study files
(`poise.model.conservation.find_laws`), applied to the imported equations with every
named sub-expression inlined and constant compartment sizes replaced by their
values: reactions conserve amounts, so species in compartments of different sizes
are conserved with the sizes as coefficients (e.g. ``A + 4.3e-06*B``). Laws made
by the kinetics (two equations sharing a rate term) or by a rate rule are found
alike. Each total is a parameter named ``<first state>_total``, valued from the
initial state; a user can give it a distribution.
"""

from __future__ import annotations

from typing import Callable, Mapping, Sequence

import sympy

from poise.model.conservation import exact, find_laws, format_law


def conservation_laws(ode: Mapping[sympy.Symbol, sympy.Expr], states: Sequence[sympy.Symbol],
                      sizes: Mapping[sympy.Symbol, float],
                      initial: Callable[[sympy.Symbol], float],
                      fresh_name: Callable[[str], str]) -> tuple[dict[str, str], dict[str, float]]:
    """Laws as {total name: linear combination of states, as text} and their totals.

    Parameters
    ----------
    ode : mapping
        state symbol -> right-hand side with named sub-expressions inlined.
    states : sequence of sympy.Symbol
        Column order (the first state of a law names its total).
    sizes : mapping
        Constant compartment size symbols -> values.
    initial : callable
        Initial value of a state symbol.
    fresh_name : callable
        A wanted name -> an unused one.
    """
    numbers = {symbol: exact(sympy.Float(value)) for symbol, value in sizes.items()}
    names = [s.name for s in states]
    equations = {s.name: ode[s].xreplace(numbers) for s in states}
    laws, totals = {}, {}
    for law in find_laws(equations, names):
        members = [(c, s) for c, s in zip([law.get(n, 0) for n in names], states) if c != 0]
        total = fresh_name(f"{members[0][1].name}_total")
        laws[total] = format_law({s.name: c for c, s in members})
        totals[total] = float(sum(float(c) * initial(s) for c, s in members))
    return laws, totals
