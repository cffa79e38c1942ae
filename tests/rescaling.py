"""Rewrite a study in other units, as text: the metamorphic tests' transformation.

With new states ``X_i = d_i x_i`` and new time ``T = t_unit * t``, the equations become
``dX_i/dT = (d_i / t_unit) f_i(X / d)``; domains and conserved combinations follow, and
claims see ``X_i / d_i`` where they saw ``x_i``. Parameters, their distributions and the
design are untouched, so set k of either study is the same parameter set. The result
is a study file text, read back by poise's own loader: end to end, as a user would.
"""

from __future__ import annotations

import ast
import json
import math

import sympy

from poise.study.expressions import to_text


def rescaled_study_text(study, state_units: dict[str, float], time_unit: float) -> str:
    """TOML text of `study` written with states in `state_units` and time in `time_unit`."""
    symbol = {s: sympy.Symbol(s, real=True) for s in study.states}
    back = {symbol[s]: symbol[s] / _number(state_units[s]) for s in study.states}
    lines = [f"title = {json.dumps(study.title + ' (other units)')}", "", "[model]",
             f"states = {json.dumps(list(study.states))}", "", "[model.ode]"]
    for s in study.states:
        expr = _number(state_units[s]) / _number(time_unit) * _exact(study.ode[s]).xreplace(back)
        lines.append(f"{s} = {json.dumps(to_text(expr))}")
    lines += ["", "[model.domain]"]
    for s in study.states:
        low, high = study.domain[s]
        lines.append(f"{s} = [{_toml_float(low * state_units[s])}, {_toml_float(high * state_units[s])}]")
    if study.initial:   # an SBML model's own initial state: a start and a size for Newton
        lines += ["", "[model.initial]"]
        for s in study.states:
            lines.append(f"{s} = {_toml_float(study.initial[s] * state_units[s])}")
    if study.conserved:
        lines += ["", "[model.conserved]"]
        for total, expr in study.conserved.items():
            lines.append(f"{total} = {json.dumps(to_text(_exact(expr).xreplace(back)))}")
    lines += ["", "[parameters]"]
    for name, value in study.fixed.items():
        lines.append(f"{name} = {_toml_float(value)}")
    for name, dist in study.uncertain.items():
        table = ", ".join(f"{k} = {json.dumps(v) if isinstance(v, str) else _toml_float(v)}"
                          for k, v in dist.as_dict().items())
        lines.append(f"{name} = {{ {table} }}")
    for claim in study.claims:
        lines += ["", "[[claims]]", f"name = {json.dumps(claim.name)}",
                  f"holds = {json.dumps(_rescaled_claim(claim.holds, state_units))}"]
    sampling = study.sampling
    lines += ["", "[sampling]", f"size = {sampling.size}", f"design = {json.dumps(sampling.design)}",
              f"seed = {sampling.seed}", "", "[sensitivity]", 'method = "none"',
              "", "[solver]", f"method = {json.dumps(study.solver.method)}"]
    return "\n".join(lines) + "\n"


def _rescaled_claim(text: str, state_units: dict[str, float]) -> str:
    """The claim with each state name s replaced by (s / d_s), via Python's syntax tree
    (the text is only parsed and printed, never run)."""
    tree = ast.parse(text, mode="eval")

    class Swap(ast.NodeTransformer):
        def visit_Name(self, node):
            if node.id in state_units:
                return ast.BinOp(left=node, op=ast.Div(), right=ast.Constant(state_units[node.id]))
            return node

    return ast.unparse(Swap().visit(tree))


def _exact(expr: sympy.Expr) -> sympy.Expr:
    """Each decimal number as the exact fraction it denotes, so that products with the
    units are exact (a conservation law of an imported model holds exactly in its
    decimals, and must still hold after the rewrite)."""
    return expr.xreplace({f: sympy.Rational(repr(float(f))) for f in expr.atoms(sympy.Float)})


def _number(value: float) -> sympy.Expr:
    """A power of ten exactly (a Rational), so decimal coefficients and conservation
    laws stay exact as a user writing the model in those units would have them; any
    other value as the shortest decimal that reads back as the same double."""
    exponent = round(math.log10(abs(value))) if value else 0
    if value and 10.0 ** exponent == abs(value):
        return (1 if value > 0 else -1) * sympy.Rational(10) ** exponent
    return sympy.Float(repr(float(value)))


def _toml_float(value: float) -> str:
    if math.isinf(value):
        return "inf" if value > 0 else "-inf"
    return repr(float(value))
