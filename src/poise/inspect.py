"""What `poise inspect` prints: every steady state at one parameter point."""

from __future__ import annotations

import dataclasses
from typing import Mapping

import numpy as np

from poise.engine.chunk import analyse_sets
from poise.equilibria.choice import choose_method
from poise.model import compile_model
from poise.study.spec import Study


def inspect_point(study: Study, overrides: Mapping[str, float] | None = None) -> dict:
    """Every steady state at the nominal point (or with `overrides`), JSON-ready.

    Returns
    -------
    dict
        {"parameters": {...}, "free_states": [...], "equilibria": [{"state", "label",
        "jacobian", "eigenvalues", "class", "stability", "margin", "trace",
        "determinant", "discriminant"}], "status": "ok" | reason}
    """
    from poise.errors import quiet_sobol_balance
    quiet_sobol_balance()
    values = study.nominal_values()
    values.update(overrides or {})
    model = compile_model(study, values, varying=())
    method = choose_method(study, model)
    # claims are not shown here: a claim undefined at this point must not hide the states
    result = analyse_sets(dataclasses.replace(study, claims=()), model, np.array([0]),
                          np.zeros((1, 0)), solver_method=method)
    table = result.equilibria
    two_d = model.dimension == 2
    equilibria = []
    for i, row in table.iterrows():
        entry = {
            "state": {s: float(row[s]) for s in study.states},
            "label": row["label"],
            "jacobian": result.jacobians[i].tolist(),
            "eigenvalues": [[float(row[f"eig_re_{j}"]), float(row[f"eig_im_{j}"])] for j in range(model.dimension)],
            "class": row["class"],
            "stability": row["stability"],
            "margin": float(row["margin"]),
            "continuum": bool(row["continuum"]),
        }
        if two_d:
            entry.update(trace=float(row["trace"]), determinant=float(row["determinant"]),
                         discriminant=float(row["discriminant"]))
        equilibria.append(entry)
    status = result.sets["status"].iloc[0]
    return {"parameters": {k: float(v) for k, v in values.items()},
            "solver": method,
            "free_states": list(model.system.free),
            "status": "ok" if status == "ok" else result.sets["reason"].iloc[0],
            "equilibria": equilibria}


def inspect_text(study: Study, result: dict) -> str:
    """An aligned, readable listing of `inspect_point`'s result."""
    lines = [f"{study.title}", "parameters: " + ", ".join(f"{k} = {v:g}" for k, v in result["parameters"].items()), ""]
    if result["status"] != "ok":
        return "\n".join(lines + [f"could not analyse this point: {result['status']}"])
    found = result["equilibria"]
    lines.append(f"{len(found)} steady state{'s' if len(found) != 1 else ''} in the domain")
    if result["free_states"] != list(study.states):
        lines.append("(Jacobian and eigenvalues on the conservation class, in the states "
                     + ", ".join(result["free_states"]) + ")")
    for number, eq in enumerate(found, 1):
        lines.append("")
        state = "  ".join(f"{k} = {_num(v)}" for k, v in eq["state"].items())
        lines.append(f"#{number}  {state}   [{eq['label']}]")
        lines.append(f"    class       {eq['class']} ({eq['stability']}), margin {_num(eq['margin'])}")
        if eq["continuum"]:
            lines.append("    not isolated: it lies on a continuum (curve or surface) of steady states")
        eigen = ", ".join(_complex(re, im) for re, im in eq["eigenvalues"])
        lines.append(f"    eigenvalues {eigen}")
        if "trace" in eq:
            lines.append(f"    trace {_num(eq['trace'])}, determinant {_num(eq['determinant'])}, "
                         f"trace^2 - 4 det {_num(eq['discriminant'])}")
        rows = [[_num(v) for v in row] for row in eq["jacobian"]]
        width = max((len(c) for row in rows for c in row), default=1)
        for k, row in enumerate(rows):
            lead = "    Jacobian    " if k == 0 else "                "
            lines.append(lead + "[ " + "  ".join(c.rjust(width) for c in row) + " ]")
    return "\n".join(lines)


def _num(value: float) -> str:
    return f"{value:.6g}"


def _complex(re: float, im: float) -> str:
    if im == 0:
        return _num(re)
    sign = "+" if im > 0 else "-"
    return f"{_num(re)} {sign} {_num(abs(im))}i"
