"""What `poise check` prints: the model as poise understands it."""

from __future__ import annotations

from poise.study.expressions import to_text
from poise.study.spec import Study
from poise.study.vocabulary import visible


def parameter_sets(study: Study, size: int | None = None) -> int:
    """How many parameter sets the study's design holds."""
    n = size or study.sampling.size
    k = len(study.uncertain)
    if study.sensitivity.method == "sobol" and k > 0:
        return n * (2 * k + 2 if study.sensitivity.second_order else k + 2)
    return n


def describe_model(study: Study) -> dict:
    """The model as JSON-ready data (`poise check --json`, docs/run-output.md)."""
    from poise.model.system import check_conservation

    check_conservation(study)
    parameters = {name: {"value": value} for name, value in study.fixed.items()}
    parameters.update({name: dist.as_dict() for name, dist in study.uncertain.items()})
    description = {
        "states": list(study.states),
        "ode": {state: to_text(expr) for state, expr in study.ode.items()},
        "parameters": parameters,
        "conserved": {total: to_text(expr) for total, expr in study.conserved.items()},
        # where a steady state counts; null for an unbounded side
        "domain": {s: [v if abs(v) != float("inf") else None for v in study.domain[s]] for s in study.states},
    }
    if study.initial:
        description["initial"] = dict(study.initial)
        description["units"] = dict(study.units)
        description["size"] = dict(study.size)
    return description


def describe_text(study: Study, description: dict) -> str:
    """A readable summary for the terminal."""
    from poise.equilibria.choice import choose_method, polynomial_system
    from poise.model import compile_model

    lines = [f"study       {study.title}", f"file        {study.path}", ""]
    lines.append("states and their equations")
    width = max(len(s) for s in study.states)
    for state, text in study.ode_text.items():
        lines.append(f"  d{state:<{width}}/dt = {visible(text)}")   # one line each, whatever was typed
    lines += ["", "domains (where a steady state counts)"]
    for state in study.states:
        low, high = study.domain[state]
        lines.append(f"  {state:<{width}}  {'(' if low == -float('inf') else '['}{low:g}, {high:g}{')' if high == float('inf') else ']'}")
    if description["conserved"]:
        lines += ["", "conserved totals"]
        for total, text in description["conserved"].items():
            lines.append(f"  {total} = {text}")
    lines += ["", "parameters"]
    pwidth = max((len(p) for p in study.parameters), default=1)
    for name, value in study.fixed.items():
        lines.append(f"  {name:<{pwidth}}  fixed      {value:g}")
    for name, dist in study.uncertain.items():
        lines.append(f"  {name:<{pwidth}}  uncertain  {dist.describe()}  (nominal {dist.nominal:g})")
    model = compile_model(study)
    if study.solver.method == "auto":  # decided when a run starts, from counted work
        solver = ("auto: homotopy or Newton, chosen at the start of a run" if polynomial_system(model)
                  else "auto: Newton (the model is not polynomial after clearing denominators)")
    else:
        solver = choose_method(study, model)
    lines += ["", f"solver      {solver}",
              f"design      {study.sampling.design}, N = {study.sampling.size}, seed {study.sampling.seed}",
              f"sets        {parameter_sets(study)}"
              + (f"  (N x ({'2k' if study.sensitivity.second_order else 'k'} + 2) for Sobol indices, "
                 f"k = {len(study.uncertain)})" if parameter_sets(study) != study.sampling.size else "")]
    if study.claims:
        lines += ["", "claims"]
        for claim in study.claims:
            lines.append(f"  {claim.name}: {visible(claim.holds)}")
    lines += ["", "ok: the study is valid"]
    return "\n".join(lines)
