"""The numbers of summary.json, from per-set outcomes and steady-state tallies.

Probabilities use the independent draws of the design only (every row of a plain
design; the A and B blocks of a Sobol design), with failed sets left out, and carry
95 % Wilson score intervals. Sobol indices use whole Saltelli groups: a group (one
base row and its cross rows) that holds a failed set is dropped as a whole, which
keeps the estimator's structure intact.
"""

from __future__ import annotations

from typing import Mapping, Sequence

import numpy as np
import pandas as pd

from poise.analysis.intervals import wilson_interval
from poise.analysis.sobol import sobol_indices


def _probability(successes: int, n: int) -> dict:
    """Estimate and 95 % Wilson interval; with no sets the estimate is None (JSON null),
    not 0, and the interval is the uninformative [0, 1]."""
    lo, hi = wilson_interval(successes, n)
    return {"probability": successes / n if n else None, "ci95": [float(lo), float(hi)]}


def claim_summary(outcomes: pd.DataFrame, claims: Sequence) -> dict:
    """{claim name: {holds, probability, ci95, successes, n}} over independent ok sets
    (a long-run claim: over those simulated; a set outside the long-run subsample has
    no answer, not a false one)."""
    usable = outcomes[outcomes["independent"] & (outcomes["status"] == "ok")]
    result = {}
    for claim in claims:
        values = usable[claim.name].dropna().astype(bool).to_numpy()
        successes, n = int(values.sum()), int(values.size)
        entry = {"holds": claim.holds}
        entry.update(_probability(successes, n))
        entry.update(successes=successes, n=n)
        result[claim.name] = entry
    return result


def stable_count_summary(outcomes: pd.DataFrame) -> dict:
    """{count of stable steady states: {probability, ci95}} over independent ok sets."""
    usable = outcomes[outcomes["independent"] & (outcomes["status"] == "ok")]
    counts = usable["n_stable"].astype(int).to_numpy()
    n = counts.size
    tally = np.bincount(counts) if n else np.zeros(0, int)
    return {str(k): _probability(int(c), n) for k, c in enumerate(tally) if c > 0}


def equilibria_summary(presence: Mapping[str, int], classes: Mapping[str, Mapping[str, int]], n_sets: int) -> dict:
    """{label: {present: fraction of sets having it, classes: {class: fraction of its steady states}}}."""
    result = {}
    for label in sorted(presence):
        total = sum(classes[label].values())
        result[label] = {
            "present": presence[label] / n_sets if n_sets else 0.0,
            "classes": {name: count / total for name, count in sorted(classes[label].items())},
        }
    return result


def sensitivity_summary(outcomes: pd.DataFrame, claims: Sequence, names: Sequence[str],
                        group_size: int, second_order: bool, resamples: int, seed: int,
                        method: str) -> dict:
    """Sobol S1/ST (and S2) with bootstrap intervals for each claim's indicator."""
    result = {}
    for claim in claims:
        if method != "sobol":
            result[claim.name] = {"method": "none", "reason": "sensitivity analysis is switched off ([sensitivity] method = \"none\")"}
            continue
        if not names or group_size <= 1:
            result[claim.name] = {"method": "none", "reason": "no uncertain parameter, or the design is not a Sobol design"}
            continue
        # a group is usable when every set of it was analysed and (for a long-run claim)
        # simulated: the subsample takes whole groups
        ok = ((outcomes["status"] == "ok") & outcomes[claim.name].notna()).to_numpy()
        groups = ok.reshape(-1, group_size).all(axis=1)
        if not groups.any():
            result[claim.name] = {"method": "none", "reason": "every Saltelli group holds a failed "
                                                              "(or, for a long-run claim, unsimulated) set"}
            continue
        y = outcomes[claim.name].fillna(False).astype(float).to_numpy().reshape(-1, group_size)[groups].ravel()
        entry = sobol_indices(y, list(names), second_order, resamples, seed)
        if groups.sum() < groups.size:
            entry["groups_dropped"] = int(groups.size - groups.sum())
        result[claim.name] = entry
    return result
