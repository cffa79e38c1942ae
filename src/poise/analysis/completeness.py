"""How often does the steady-state finder miss a steady state?

Multistart Newton can miss steady states with thin basins of attraction. A random
subsample of the analysed sets is solved again by a much more thorough reference —
homotopy continuation where the model is polynomial after clearing denominators,
else Newton with many more starts and deflation rounds — and the fraction of sets
where the reference finds more steady states is reported with a Wilson interval.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd

from poise.analysis.intervals import wilson_interval
from poise.engine.chunk import analyse_sets
from poise.model import CompiledModel
from poise.study.spec import Study

CHECKED_SETS = 200


def reference_settings(study: Study, model: CompiledModel):
    """A far more thorough Newton search than the study's own."""
    starts = max(400, 200 * model.dimension)
    return dataclasses.replace(study.solver, starts=starts, deflation_rounds=max(4, study.solver.deflation_rounds + 2),
                               max_iterations=max(100, study.solver.max_iterations))


def completeness_check(study: Study, model: CompiledModel, outcomes: pd.DataFrame,
                       params: np.ndarray, reference_method: str, seed: int,
                       size: int = CHECKED_SETS) -> dict:
    """Re-solve a random subsample of ok sets with a reference method and count misses.

    Returns
    -------
    dict
        {"checked", "missed", "fraction", "ci95", "reference"} (JSON-ready).
    """
    ok_ids = outcomes.loc[outcomes["status"] == "ok", "sample_id"].to_numpy()
    rng = np.random.default_rng([seed, 20151])
    chosen = np.sort(rng.choice(ok_ids, size=min(size, ok_ids.size), replace=False)) if ok_ids.size else ok_ids
    if chosen.size == 0:
        return {"checked": 0, "missed": 0, "fraction": 0.0, "ci95": [0.0, 1.0], "reference": reference_method}
    if reference_method == "homotopy":
        reference_study = study
        description = "homotopy continuation"
    else:
        settings = reference_settings(study, model)
        reference_study = dataclasses.replace(study, solver=settings)
        description = (f"Newton from {settings.starts} starts with {settings.deflation_rounds} deflation rounds")
    result = analyse_sets(reference_study, model, chosen, params[chosen], solver_method=reference_method)
    reference_counts = result.sets["n_steady"].fillna(0).to_numpy(dtype=int)
    found_counts = outcomes.set_index("sample_id").loc[chosen, "n_steady"].fillna(0).to_numpy(dtype=int)
    missed = int((reference_counts > found_counts).sum())
    lo, hi = wilson_interval(missed, chosen.size)
    return {"checked": int(chosen.size), "missed": missed, "fraction": missed / chosen.size,
            "ci95": [float(lo), float(hi)], "reference": description}
