"""Which steady-state finder a study uses.

Homotopy continuation finds every isolated root of a polynomial system with
probability one, so "auto" takes it whenever the reduced system is polynomial after
clearing denominators and the number of paths stays small enough for it to be about
as fast as batched Newton (measured in benchmarks/bench_homotopy.py); otherwise it
takes multistart Newton with deflation.
"""

from __future__ import annotations

from functools import lru_cache

from poise.equilibria.polynomial import PolynomialSystem, polynomial_form
from poise.errors import InputError
from poise.model import CompiledModel
from poise.study.spec import Study

MAX_AUTO_PATHS = 64


def polynomial_system(model: CompiledModel) -> PolynomialSystem | None:
    """The model's reduced system with denominators cleared, or None."""
    return _polynomial(model.system.rhs, tuple(model.system.free_symbols), tuple(model.system.parameter_symbols))


@lru_cache(maxsize=8)
def _polynomial(rhs, states, params):
    if not states:
        return None
    return polynomial_form(list(rhs), list(states), list(params))


def choose_method(study: Study, model: CompiledModel) -> str:
    """"newton" or "homotopy", from `[solver] method`."""
    method = study.solver.method
    if method == "newton":
        return "newton"
    system = polynomial_system(model)
    if method == "homotopy":
        if system is None:
            raise InputError("homotopy needs right-hand sides that are polynomial (or rational) in the states; "
                             "use method = \"auto\" or \"newton\"", file=str(study.path), table="solver", key="method")
        return "homotopy"
    if system is not None and system.path_count <= MAX_AUTO_PATHS:
        return "homotopy"
    return "newton"
