"""Named sub-expressions of an SBML model, and what may go into its equations.

Assignment rules, reaction rates and parameters set once by an initialAssignment
are kept as named sub-expressions (the study file's ``[model.let]``), so every
parameter upstream of a rule stays a parameter of its own and can carry a
distribution. This module orders them, detects cycles, inlines them where a whole
expression is needed (conservation analysis, outputs), and explains, naming the
element, why an expression cannot be part of a steady-state model.
"""

from __future__ import annotations

from typing import Iterable, Mapping

import sympy

from poise.sbml.mathml import DELAY, RATE_OF, TIME, SbmlProblem

MAX_CHAIN = 100  # named sub-expressions using one another, in a chain

_JUMPS = {sympy.floor: "floor", sympy.ceiling: "ceiling", sympy.sign: "quotient or rem",
          sympy.gamma: "factorial"}
_ARC = {sympy.asin: "arcsin", sympy.acos: "arccos", sympy.atan: "arctan",
        sympy.asec: "arcsec", sympy.acsc: "arccsc", sympy.acot: "arccot"}


def dependency_order(definitions: Mapping[sympy.Symbol, sympy.Expr],
                     roots: Iterable[sympy.Symbol], origin: Mapping[sympy.Symbol, str]) -> list[sympy.Symbol]:
    """Definitions reachable from `roots`, each after those it uses (iterative DFS).

    Raises
    ------
    SbmlProblem
        When definitions refer to each other in a cycle (the message lists it).
    """
    order: list[sympy.Symbol] = []
    state: dict[sympy.Symbol, int] = {}   # 1 on the current path, 2 done
    for root in roots:
        if root not in definitions or state.get(root) == 2:
            continue
        path = [root]
        stack = [(root, iter(sorted(definitions[root].free_symbols & definitions.keys(), key=str)))]
        state[root] = 1
        while stack:
            symbol, pending = stack[-1]
            following = next(pending, None)
            if following is None:
                stack.pop()
                path.pop()
                state[symbol] = 2
                order.append(symbol)
            elif state.get(following) == 1:
                cycle = path[path.index(following):] + [following]
                raise SbmlProblem("assignment rules (or reaction rates) depend on each other in a "
                                  "cycle: " + " -> ".join(origin.get(s, s.name) for s in cycle))
            elif state.get(following) != 2:
                if len(path) >= MAX_CHAIN:
                    raise SbmlProblem(f"assignment rules (or reaction rates) use one another in a chain "
                                      f"more than {MAX_CHAIN} deep (through {origin.get(following, following.name)})")
                state[following] = 1
                path.append(following)
                stack.append((following, iter(sorted(definitions[following].free_symbols & definitions.keys(),
                                                     key=str))))
    return order


def inline_all(definitions: Mapping[sympy.Symbol, sympy.Expr],
               origin: Mapping[sympy.Symbol, str]) -> dict[sympy.Symbol, sympy.Expr]:
    """Every definition with the definitions it uses substituted (cycles refused)."""
    resolved: dict[sympy.Symbol, sympy.Expr] = {}
    for symbol in dependency_order(definitions, list(definitions), origin):
        expr = definitions[symbol]
        inner = {s: resolved[s] for s in expr.free_symbols if s in resolved}
        resolved[symbol] = expr.xreplace(inner) if inner else expr
    return resolved


def explain(expr: sympy.Basic, where: str, origins: Mapping[sympy.Basic, str],
            refused: Mapping[sympy.Symbol, SbmlProblem]) -> SbmlProblem | None:
    """Why `expr` cannot be written into the model's equations, or None if it can.

    The message names the element (`where`, or the function definition a construct
    came from) and says what the user can do.
    """
    if not isinstance(expr, sympy.Expr):
        return SbmlProblem(f"{where} is a true/false value; an equation needs a number")
    for symbol in expr.free_symbols:
        if symbol in refused:
            return refused[symbol]
    if TIME in expr.free_symbols:
        return SbmlProblem(f"{where} depends on time (the csymbol time); steady states need an "
                           "autonomous model: replace the time-dependent term by a parameter "
                           "(e.g. its value at the time of interest)")
    for node in sympy.preorder_traversal(expr):
        source = origins.get(node, where)
        if isinstance(node, sympy.Function) and node.func == DELAY:
            return SbmlProblem(f"{source} uses delay(); at a steady state delay(x, tau) equals x, but "
                               "poise does not judge the stability of delay equations: replace "
                               "delay(x, tau) by x to study the model without the delay")
        if isinstance(node, sympy.Function) and node.func == RATE_OF:
            return SbmlProblem(f"{source} uses rateOf(): write the rate it stands for explicitly")
        if isinstance(node, sympy.Function) and node.func in _JUMPS:
            return SbmlProblem(f"{source} uses {_JUMPS[node.func]}, which jumps (it is not smooth): "
                               "replace it by a smooth expression (e.g. a steep Hill function) "
                               "or by a parameter")
        if isinstance(node, sympy.Function) and node.func in _ARC:
            return SbmlProblem(f"{source} uses {_ARC[node.func]}, which poise's expressions do not "
                               "have: replace it by a parameter or an equivalent expression")
        if isinstance(node, (sympy.Xor, sympy.Implies)):
            return SbmlProblem(f"{source} uses {type(node).__name__.lower()} in a condition: "
                               "write it with and, or, not")
        if isinstance(node, sympy.Piecewise):
            for value, _condition in node.args:
                if not isinstance(value, sympy.Expr):
                    return SbmlProblem(f"{source} has a piecewise whose value is true/false; "
                                       "an equation needs a number")
    return None
