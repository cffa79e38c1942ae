"""Time courses of a few representative oscillating sets, for the report's figure.

After a run, the independent sets whose trajectories ended on a periodic orbit are
ranked by period; the sets at the 10th, 50th and 90th percentile are integrated again
from the start of that trajectory with scipy's ``solve_ivp`` (Radau, the model's own
Jacobian, tight tolerances: an integrator independent of poise's own) and their last
`PERIODS_SHOWN` periods are stored in timecourses.parquet, so that ``poise report``
draws the figure without recomputing. A handful of sets: a plain loop is fine here.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

PERCENTILES = (10, 50, 90)
PERIODS_SHOWN = 4
POINTS_PER_PERIOD = 200
RTOL = 1e-8

__all__ = ["representative_sets", "time_courses", "PERCENTILES", "PERIODS_SHOWN"]


def representative_sets(outcomes: pd.DataFrame) -> list[tuple[int, int]]:
    """(percentile, sample_id) of the independent oscillating sets at `PERCENTILES` of the
    period (order statistics of the sets sorted by period, then sample id; each set once)."""
    usable = ((outcomes["status"] == "ok") & outcomes["independent"].astype(bool)
              & outcomes["cycles"].fillna(False).astype(bool))
    found = outcomes.loc[usable, ["sample_id", "period"]].sort_values(["period", "sample_id"], kind="stable")
    if found.empty:
        return []
    chosen: list[tuple[int, int]] = []
    for q in PERCENTILES:
        sample_id = int(found["sample_id"].iloc[int(round(q / 100 * (len(found) - 1)))])
        if sample_id not in [s for _, s in chosen]:
            chosen.append((q, sample_id))
    return chosen


def time_courses(directory: Path, study, model, outcomes: pd.DataFrame, params: np.ndarray) -> pd.DataFrame:
    """The last `PERIODS_SHOWN` periods of each representative set's orbit.

    Parameters
    ----------
    directory : the run directory (trajectories.parquet is read from it).
    study, model : the study and its compiled model (`params`' columns are ``model.varying``).
    outcomes : per-set outcomes of the run.
    params : (n_sets, m) parameter values in sample-id order.

    Returns
    -------
    DataFrame
        ``sample_id, percentile, period, time`` (from the window's start) and one column
        per state; empty when no set oscillates.
    """
    from scipy.integrate import solve_ivp

    chosen = representative_sets(outcomes)
    columns = ["sample_id", "percentile", "period", "time", *study.states]
    if not chosen:
        return pd.DataFrame({name: pd.Series(dtype=float) for name in columns})
    import pyarrow.parquet as pq
    import pyarrow.compute as pc
    ids = [s for _, s in chosen]
    table = pq.read_table(directory / "trajectories.parquet",
                          filters=pc.field("sample_id").isin(ids) & (pc.field("outcome") == "cycles"))
    trajectories = table.to_pandas()
    kernels, free = model.kernels, list(model.kernels.free_columns)
    pieces = []
    for percentile, sample_id in chosen:
        row = trajectories.loc[trajectories["sample_id"] == sample_id].iloc[0]
        p = params[sample_id][None, :]
        start = np.array([row[f"start({s})"] for s in study.states])[free]
        period, t_end = float(row["period"]), float(row["time"]) + PERIODS_SHOWN * float(row["period"])
        scale = np.maximum(np.abs([row[f"max({s})"] for s in study.states]), np.abs(start).max())[free]
        solution = solve_ivp(lambda t, x: kernels.rhs(x[None, :], p)[0], (0.0, t_end), start,
                             method="Radau", jac=lambda t, x: kernels.jacobian(x[None, :], p)[0],
                             rtol=RTOL, atol=RTOL * 1e-2 * scale, dense_output=True)
        if solution.status != 0:
            continue
        times = np.linspace(t_end - PERIODS_SHOWN * period, t_end, PERIODS_SHOWN * POINTS_PER_PERIOD + 1)
        values = kernels.full_states(solution.sol(times).T, np.repeat(p, times.size, axis=0))
        piece = pd.DataFrame({"sample_id": sample_id, "percentile": percentile, "period": period,
                              "time": times - times[0]})
        for j, state in enumerate(study.states):
            piece[state] = values[:, j]
        pieces.append(piece)
    if not pieces:
        return pd.DataFrame({name: pd.Series(dtype=float) for name in columns})
    return pd.concat(pieces, ignore_index=True)[columns]
