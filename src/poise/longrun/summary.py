"""The "long_run" entry of summary.json: what the simulation found, with intervals.

Probabilities use the independent, analysed sets that were simulated (all of them, or
the stated subsample), like every other probability of the run, with 95 % Wilson
score intervals (Wilson 1927). Undetermined trajectories are counted with their
reasons, never left out.

Pooled basin shares (Menck, Heitzig, Marwan & Kurths 2013) average each set's shares
over the sets; their interval is a Wilson interval with one draw per set, because the
starts of a set share its parameters and are not independent draws of the joint
distribution. (Per start it would be too narrow when sets differ; per set it can only
be too wide, as a share in [0, 1] varies no more than a true/false outcome with the
same mean.)
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from poise.analysis.intervals import wilson_interval
from poise.longrun.basins import CYCLE_LABEL, UNBOUNDED_LABEL, UNDETERMINED_LABEL

QUANTILES = (0.05, 0.1, 0.25, 0.5, 0.75, 0.9, 0.95)
TRAJECTORY_COLUMNS = ["sample_id", "start", "outcome", "reason", "label"]

__all__ = ["long_run_summary", "QUANTILES"]


def _share(successes: float, n: int) -> dict:
    low, high = wilson_interval(successes, n)
    return {"probability": successes / n if n else None, "ci95": [float(low), float(high)],
            "successes": successes, "n": int(n)}


def _spread(values: np.ndarray) -> dict:
    values = values[np.isfinite(values)]
    if values.size == 0:
        return {"n": 0}
    return {"n": int(values.size), "min": float(values.min()), "max": float(values.max()),
            "quantiles": {f"{q:g}": float(v) for q, v in zip(QUANTILES, np.quantile(values, QUANTILES))}}


def long_run_summary(study, outcomes: pd.DataFrame, directory: Path) -> dict:
    """summary.json's "long_run" entry.

    Parameters
    ----------
    study : the study (its ``long_run`` settings, states, initial state).
    outcomes : per-set outcomes as `poise.engine.assemble.assemble` returns them.
    directory : the run directory (trajectories.parquet is read from it).
    """
    settings = study.long_run
    ok = (outcomes["status"] == "ok").to_numpy() & outcomes["independent"].to_numpy(dtype=bool)
    simulated = ok & outcomes["cycles"].notna().to_numpy()
    sets = outcomes.loc[simulated]
    n = int(simulated.sum())
    cycles = sets["cycles"].astype(bool).to_numpy()
    trajectories = _trajectories(directory)
    usable = trajectories["sample_id"].isin(sets["sample_id"]).to_numpy()
    summary = {
        "settings": {"share": settings.share, "box": {s: list(r) for s, r in settings.box.items()},
                     "box_starts": settings.box_starts, "max_steps": settings.max_steps,
                     "horizon": settings.horizon, "initial": dict(study.initial)},
        "sets": {"simulated": int((outcomes["cycles"].notna() & (outcomes["status"] == "ok")).sum()),
                 "independent": n},
        "cycles": _share(int(cycles.sum()), n),
        "several_orbits": _share(int((sets["n_orbits"].fillna(0).to_numpy() >= 2).sum()), n),
        "period": _spread(sets["period"].to_numpy(dtype=float)),
        "amplitude": {s: _spread(sets[f"amplitude({s})"].to_numpy(dtype=float)) for s in study.states},
        "trajectories": _trajectory_counts(trajectories[usable]),
    }
    if study.initial:
        first = sets["long_run"].fillna("").to_numpy(dtype=object)
        summary["initial_state"] = {name: _share(int((first == name).sum()), n)
                                    for name in ("settles", "cycles", "unbounded", "undetermined")}
    summary["no_stable_steady_state"] = _without_stable(sets, trajectories[usable])
    if settings.box_starts:
        summary["basins"] = _pooled_basins(trajectories[usable], n)
    return summary


def _trajectories(directory: Path) -> pd.DataFrame:
    path = directory / "trajectories.parquet"
    if not path.exists():
        return pd.DataFrame({name: pd.Series(dtype=object) for name in TRAJECTORY_COLUMNS})
    return pd.read_parquet(path, columns=TRAJECTORY_COLUMNS)


def _trajectory_counts(trajectories: pd.DataFrame) -> dict:
    """Every trajectory by start and outcome, and the undetermined ones by reason."""
    by_start = {start: {name: int(count) for name, count in group["outcome"].value_counts().sort_index().items()}
                for start, group in trajectories.groupby("start", sort=True)}
    undetermined = trajectories.loc[trajectories["outcome"] == "undetermined", "reason"]
    return {"count": int(len(trajectories)), "by_start": by_start,
            "undetermined_reasons": {reason: int(count) for reason, count in
                                     sorted(undetermined.value_counts().items(), key=lambda kv: (-kv[1], kv[0]))}}


def _without_stable(sets: pd.DataFrame, trajectories: pd.DataFrame) -> dict:
    """Among the sets with no stable steady state: where their trajectories went."""
    none_stable = (sets["n_stable"].to_numpy(dtype=float) == 0)
    ids = sets.loc[none_stable, "sample_id"]
    count = int(none_stable.sum())
    fate = trajectories.loc[trajectories["sample_id"].isin(ids)]
    unbounded = fate.loc[fate["outcome"] == "unbounded", "sample_id"].unique()
    cycles = sets.loc[none_stable, "cycles"].astype(bool).to_numpy()
    grows = ids.isin(unbounded).to_numpy()
    return {"sets": count, "cycles": _share(int(cycles.sum()), count),
            "unbounded": _share(int(grows.sum()), count),
            "neither": _share(int((~cycles & ~grows).sum()), count)}


def _pooled_basins(trajectories: pd.DataFrame, n_sets: int) -> dict:
    """Mean share of each set's box starts per attractor, with a Wilson interval per set."""
    box = trajectories.loc[trajectories["start"] == "box"]
    if box.empty or n_sets == 0:
        return {}
    where = box["label"].where(box["outcome"] == "settles")
    where = where.mask(box["outcome"] == "cycles", CYCLE_LABEL)
    where = where.mask(box["outcome"] == "unbounded", UNBOUNDED_LABEL)
    where = where.fillna(UNDETERMINED_LABEL)
    per_set = pd.crosstab(box["sample_id"], where, normalize="index")
    result = {}
    labels = sorted(c for c in per_set.columns if c not in (CYCLE_LABEL, UNBOUNDED_LABEL, UNDETERMINED_LABEL))
    for label in labels + [CYCLE_LABEL, UNBOUNDED_LABEL, UNDETERMINED_LABEL]:
        total = float(per_set[label].sum()) if label in per_set.columns else 0.0
        result[label] = _share(total, n_sets)
    return result
