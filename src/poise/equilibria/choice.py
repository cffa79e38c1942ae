"""Which steady-state finder a study uses.

Homotopy continuation finds every isolated root of a polynomial system with
probability one. Its speed relative to batched multistart Newton depends on the model
(benchmarks/bench_homotopy.py: 0.2x to 8x on the bundled studies), and no cheap,
reproducible test tells in advance which is faster: a choice by timing could differ
between two runs of one study. So "auto" runs Newton, and every Newton run re-solves
a random subsample by homotopy (where the model qualifies) to report how often a
steady state was missed. "homotopy" asks for continuation on every set.
"""

from __future__ import annotations

from functools import lru_cache

from poise.equilibria.polynomial import PolynomialSystem, polynomial_form
from poise.errors import InputError
from poise.model import CompiledModel
from poise.study.spec import Study



def polynomial_system(model: CompiledModel) -> PolynomialSystem | None:
    """The model's reduced system with denominators cleared, or None."""
    return _polynomial(model.system.rhs, tuple(model.system.free_symbols), tuple(model.system.parameter_symbols))


@lru_cache(maxsize=8)
def _polynomial(rhs, states, params):
    if not states:
        return None
    return polynomial_form(list(rhs), list(states), list(params))


def choose_method(study: Study, model: CompiledModel) -> str:
    """"newton" or "homotopy", from `[solver] method` ("auto" is Newton; see above)."""
    if study.solver.method != "homotopy":
        return "newton"
    if polynomial_system(model) is None:
        raise InputError("homotopy needs right-hand sides that are polynomial (or rational) in the states; "
                         "use method = \"auto\" or \"newton\"", file=str(study.path), table="solver", key="method")
    return "homotopy"
