"""Which steady-state finder a study uses.

Homotopy continuation finds every isolated root of a polynomial system with
probability one; multistart Newton can miss steady states with thin basins. "auto"
prefers homotopy when the model qualifies and homotopy is not much slower: its
predicted throughput is at least half of Newton's.

The prediction compares *counted work*, not time, so two runs of one study choose
alike, with any number of workers (it is made once, before the work is split). Both
finders solve the
same fixed probe design (64 Sobol points over the study's distributions): Newton's
iterations per set (over all starts and deflation rounds) against the homotopy's
evaluations per set, an evaluation counted as `EVALUATION_COST` Newton iterations.
That ratio was measured with benchmarks/bench_homotopy.py: 1.7 to 4.2 on the bundled
studies (a homotopy evaluation is complex, in homogeneous coordinates, one path at a
time, and carries the per-set polishing); with 3, the rule picks homotopy on the bundled
studies where it clearly meets the half-speed mark and Newton on the toggle switch,
which sits right at it. "newton" and "homotopy" force a method.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from poise.equilibria.polynomial import PolynomialSystem, polynomial_form
from poise.errors import InputError
from poise.model import CompiledModel
from poise.study.spec import Study

EVALUATION_COST = 3.0   # Newton iterations one homotopy evaluation is worth
ACCEPTABLE_SPEED = 0.5  # homotopy's predicted throughput relative to Newton's, at least
PROBE_SETS = 64
PROBE_SEED = 2          # the hubs use seed 1: the probe sets are other points
# beyond these, even the probe would take long: auto then stays with Newton
MAX_BEZOUT = 4096       # total-degree bound (paths of the once-per-system start solve)
MAX_PATHS = 256         # generic root count (paths per set from the generic start)


@dataclass(frozen=True)
class WorkEstimate:
    """Counted work per parameter set on the probe design, and the predicted ratio of
    homotopy's throughput to Newton's."""

    newton_iterations: float
    homotopy_evaluations: float
    predicted_speed: float

    def as_dict(self) -> dict:
        return {"rule": f"homotopy when its predicted throughput is at least {ACCEPTABLE_SPEED:g} of "
                        f"Newton's (work counted on {PROBE_SETS} probe sets, one homotopy "
                        f"evaluation = {EVALUATION_COST:g} Newton iterations)",
                "newton_iterations_per_set": round(self.newton_iterations, 1),
                "homotopy_evaluations_per_set": round(self.homotopy_evaluations, 1),
                "predicted_speed": round(self.predicted_speed, 3)}


def polynomial_system(model: CompiledModel) -> PolynomialSystem | None:
    """The model's reduced system with denominators cleared, or None."""
    return _polynomial(model.system.rhs, tuple(model.system.free_symbols), tuple(model.system.parameter_symbols))


@lru_cache(maxsize=8)
def _polynomial(rhs, states, params):
    if not states:
        return None
    return polynomial_form(list(rhs), list(states), list(params))


def choose_method(study: Study, model: CompiledModel) -> str:
    """"newton" or "homotopy", from `[solver] method` (see the module doc for "auto")."""
    return choose(study, model)[0]


def choose(study: Study, model: CompiledModel) -> tuple[str, WorkEstimate | None]:
    """The method and, for "auto" on a qualifying model, the work estimate behind it."""
    method = study.solver.method
    if method == "newton":
        return "newton", None
    system = polynomial_system(model)
    if method == "homotopy":
        if system is None:
            raise InputError("homotopy needs right-hand sides that are polynomial (or rational) in the "
                             "states; use method = \"auto\" or \"newton\"",
                             file=str(study.path), table="solver", key="method")
        return "homotopy", None
    estimate = None if system is None else work_estimate(study, model, system)
    if estimate is not None and estimate.predicted_speed >= ACCEPTABLE_SPEED:
        return "homotopy", estimate
    return "newton", estimate


def work_estimate(study: Study, model: CompiledModel, system: PolynomialSystem) -> WorkEstimate | None:
    """Both finders' counted work on the probe design; None when nothing varies, a
    varying parameter has no distribution (no hubs, no probe design), the system needs
    more than MAX_BEZOUT start paths or has a generic root count above MAX_PATHS, or the
    probe's homotopy fails (then Newton runs; the failure is not the run's concern)."""
    from poise.equilibria.continuation import SEED, hub_parameters
    from poise.equilibria.finder import newton_work
    from poise.equilibria.homotopy import generic_root_count, solve_batch

    if not model.varying or system.path_count > MAX_BEZOUT or generic_root_count(system, seed=SEED) > MAX_PATHS:
        return None
    hubs = hub_parameters(study.uncertain, model.varying)
    probe = hub_parameters(study.uncertain, model.varying, count=PROBE_SETS, seed=PROBE_SEED)
    if hubs is None or probe is None:
        return None
    settings = study.solver
    newton = newton_work(model.kernels, probe, model.domain_low, model.domain_high,
                         starts=settings.starts, deflation_rounds=settings.deflation_rounds,
                         max_iterations=settings.max_iterations)
    try:
        homotopy = float(solve_batch(system, probe, seed=SEED, hubs=hubs).evaluations.mean())
    except (ValueError, FloatingPointError, ArithmeticError, np.linalg.LinAlgError):
        return None
    speed = newton / max(EVALUATION_COST * homotopy, 1e-300)
    return WorkEstimate(newton_iterations=newton, homotopy_evaluations=homotopy, predicted_speed=speed)
