"""Which steady-state finder a study uses."""

from __future__ import annotations

from poise.model import CompiledModel
from poise.study.spec import Study


def choose_method(study: Study, model: CompiledModel) -> str:
    """"newton" or "homotopy", from `[solver] method` ("auto" picks Newton for now)."""
    method = study.solver.method
    return "newton" if method == "auto" else method
