"""How often does the steady-state finder miss a steady state?

Multistart Newton can miss steady states with thin basins of attraction. A random
subsample of the analysed sets is solved again by a much more thorough reference —
homotopy continuation where the model is polynomial after clearing denominators and
small enough for "auto" to consider it, else Newton with many more starts and deflation
rounds, else (when that would be too dear) Newton with four times the usual starts — and
the fraction of sets where the reference finds more steady states is
reported with a Wilson interval.

The check is bounded: by default it may cost at most `BUDGET` of the run's own work.
Both costs are *counted* on a few pilot sets (Newton iterations; homotopy evaluations
at `EVALUATION_COST` iterations each), not timed, so a study checks the same sets on
every machine and with any number of workers. Fewer sets are checked when the
reference is dear, the cheaper reference is used when even a few homotopy sets would
exceed the budget, and the summary says which; at least `LEAST` sets are checked. `[solver] check_sets` fixes the number
(0: no check). Progress is shown like the run's.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd

from poise.analysis.intervals import wilson_interval
from poise.model import CompiledModel
from poise.study.spec import Study

CHECKED_SETS = 200
BUDGET = 0.25      # share of the run's counted work the check may take by default
PILOT = 8          # sets on which both costs are counted
FEWEST = 20        # below this many affordable sets, the next, cheaper reference is tried
LEAST = 10         # a check covers at least this many sets (small runs may exceed the budget)
BLOCK = 16         # sets per progress step


def reference_settings(study: Study, model: CompiledModel, wider: bool = False):
    """A far more thorough Newton search than the study's own; with `wider`, the cheaper
    reference: four times the starts of a default search and one more deflation round."""
    if wider:
        starts = 4 * (study.solver.starts or 64 * max(model.dimension, 1))
        return dataclasses.replace(study.solver, starts=starts, deflation_rounds=study.solver.deflation_rounds + 1)
    starts = max(400, 200 * model.dimension)
    return dataclasses.replace(study.solver, starts=starts, deflation_rounds=max(4, study.solver.deflation_rounds + 2),
                               max_iterations=max(100, study.solver.max_iterations))


def completeness_check(study: Study, model: CompiledModel, outcomes: pd.DataFrame,
                       params: np.ndarray, seed: int, progress: bool = False) -> dict:
    """Re-solve a random subsample of ok sets with a reference method and count misses.

    Returns
    -------
    dict
        {"checked", "missed", "fraction", "ci95", "reference", "note"} (JSON-ready).
    """
    from poise.engine.chunk import analyse_sets
    from poise.engine.progress import Progress

    ok_ids = outcomes.loc[outcomes["status"] == "ok", "sample_id"].to_numpy()
    rng = np.random.default_rng([seed, 20151])
    order = rng.permutation(ok_ids) if ok_ids.size else ok_ids
    method, wanted, note = _plan(study, model, params, order, len(outcomes))
    chosen = np.sort(order[:min(wanted, order.size)])
    if chosen.size == 0:
        return {"checked": 0, "missed": 0, "fraction": None, "ci95": [0.0, 1.0], "reference": method,
                "note": note or "no analysed set to check"}
    reference_study, description = _reference(study, model, method)
    bar = Progress(chosen.size, label="checked sets", enabled=progress)
    counts = []
    for start in range(0, chosen.size, BLOCK):
        block = chosen[start:start + BLOCK]
        result = analyse_sets(reference_study, model, block, params[block],
                              solver_method="homotopy" if method == "homotopy" else "newton")
        counts.append(result.sets["n_steady"].fillna(0).to_numpy(dtype=int))
        bar(block.size)
    reference_counts = np.concatenate(counts)
    found_counts = outcomes.set_index("sample_id").loc[chosen, "n_steady"].fillna(0).to_numpy(dtype=int)
    missed = int((reference_counts > found_counts).sum())
    lo, hi = wilson_interval(missed, chosen.size)
    return {"checked": int(chosen.size), "missed": missed, "fraction": missed / chosen.size,
            "ci95": [float(lo), float(hi)], "reference": description, "note": note}


def _plan(study: Study, model: CompiledModel, params: np.ndarray, order: np.ndarray,
          total: int) -> tuple[str, int, str]:
    """The reference method, how many sets to check and a note on why."""
    from poise.equilibria.choice import EVALUATION_COST, MAX_BEZOUT, polynomial_system
    from poise.equilibria.finder import newton_work

    system = polynomial_system(model)
    references = (["homotopy"] if system is not None and system.path_count <= MAX_BEZOUT else []) + ["newton", "wider"]
    requested = study.solver.check_sets
    if requested >= 0:
        return references[0], requested, "" if requested else "not checked ([solver] check_sets = 0)"
    if order.size == 0:
        return references[0], 0, ""
    pilot = np.sort(order[:PILOT])
    settings = study.solver
    own = newton_work(model.kernels, params[pilot], model.domain_low, model.domain_high,
                      starts=settings.starts, deflation_rounds=settings.deflation_rounds,
                      max_iterations=settings.max_iterations)
    budget = BUDGET * total * own
    for method in references:
        affordable = int(budget // max(_reference_work(study, model, method, params[pilot], EVALUATION_COST,
                                                       system), 1e-9))
        if affordable >= FEWEST:
            break
    wanted = min(CHECKED_SETS, max(affordable, LEAST))
    notes = []
    if method != references[0]:
        notes.append(f"{_reference(study, model, references[0])[1]} would cost more than the check's budget")
    if affordable < LEAST:
        notes.append(f"{wanted} sets checked, the fewest poise checks, although that costs more than "
                     f"{BUDGET:.0%} of this small run's work")
    elif wanted < CHECKED_SETS:
        notes.append(f"{wanted} sets checked instead of {CHECKED_SETS}, to stay within {BUDGET:.0%} of the "
                     "run's work (counted, not timed)")
    return method, wanted, "; ".join(notes)


def _reference_work(study, model, method, pilot, evaluation_cost, system) -> float:
    """Counted work per set of the reference on the pilot sets, in Newton iterations."""
    from poise.equilibria.continuation import SEED, hub_parameters
    from poise.equilibria.finder import newton_work
    from poise.equilibria.homotopy import solve_batch

    if method == "homotopy":
        hubs = hub_parameters(study.uncertain, model.varying)
        return evaluation_cost * float(solve_batch(system, pilot, seed=SEED, hubs=hubs).evaluations.mean())
    settings = reference_settings(study, model, wider=method == "wider")
    return newton_work(model.kernels, pilot, model.domain_low, model.domain_high, starts=settings.starts,
                       deflation_rounds=settings.deflation_rounds, max_iterations=settings.max_iterations)


def _reference(study: Study, model: CompiledModel, method: str):
    """The study to solve with, and the reference's description."""
    if method == "homotopy":
        return study, "homotopy continuation"
    settings = reference_settings(study, model, wider=method == "wider")
    return (dataclasses.replace(study, solver=settings),
            f"Newton from {settings.starts} starts with {settings.deflation_rounds} deflation rounds")
