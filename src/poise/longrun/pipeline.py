"""Long-run behaviour of one chunk's parameter sets, as columns of the run's tables.

`poise.engine.chunk.analyse_sets` calls `long_run_columns` once per chunk when the study
has a ``[long_run]`` table: one batched simulation of every chosen set (no loop over
sets), turned into

* columns of outcomes.parquet (one value per set): ``long_run``, ``long_run_reason``
  (the trajectory from the initial state), ``cycles`` (some trajectory ends on an
  attracting periodic orbit), ``period``, ``min(x)``, ``max(x)``, ``amplitude(x)`` (of
  that orbit, the initial state's first), ``n_orbits``, ``n_trajectories``,
  ``n_undetermined``;
* columns of equilibria.parquet (one per steady state): ``reached`` (the initial
  state's trajectory settles there), ``basin``, ``basin_low``, ``basin_high`` (share
  of the set's box starts that settle there, with its Wilson interval);
* trajectories.parquet: one row per trajectory.

Which sets are simulated depends only on each set's sample id (`simulated_sets`), and
every set's starts only on its own data, so results are the same for any chunking and
any number of workers. Sets not simulated get missing values (never False or 0).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
import pyarrow as pa

from poise.errors import InputError
from poise.longrun import CYCLES, INITIAL, KIND_NAMES, SETTLES, UNDETERMINED, Settings, long_run
from poise.longrun.outcomes import OUTCOME_NAMES, REASONS
from poise.longrun.starts import _uniform_hash

# hash key of the subsample: (seed ^ SUBSAMPLE_KEY, Saltelli group) -> uniform number
SUBSAMPLE_KEY = 0x6C6F6E6752756E   # "longRun" in ASCII; any fixed number would do

__all__ = ["LongRunColumns", "long_run_columns", "simulated_sets", "group_size", "check_long_run",
           "set_fields", "steady_fields", "trajectory_schema", "SUBSAMPLE_KEY"]


def group_size(study) -> int:
    """Rows of one Saltelli group of the study's design (1 for a plain design): a
    subsample takes whole groups, so that Sobol indices of long-run claims stay usable."""
    k = len(study.uncertain)
    if study.sensitivity.method != "sobol" or k == 0:
        return 1
    return 2 * k + 2 if study.sensitivity.second_order else k + 2


def simulated_sets(sample_ids: np.ndarray, share: float, seed: int, group: int) -> np.ndarray:
    """Whether each set is in the long-run subsample.

    A set is simulated when a uniform number hashed from (seed, its Saltelli group) lies
    below `share` (splitmix64 finaliser, as for the box starts): a fixed rule of the sample
    id alone, so the subsample does not depend on chunks or workers; its size is about
    `share` times the number of sets, and the run reports the exact count.
    """
    sample_ids = np.asarray(sample_ids, dtype=np.int64)
    if share >= 1.0:
        return np.ones(sample_ids.size, dtype=bool)
    groups = sample_ids // group
    key = int(seed) ^ SUBSAMPLE_KEY
    return _uniform_hash(key, groups, np.zeros_like(groups)) < share


def check_long_run(study, model) -> None:
    """Refuse a [long_run] the compiled model cannot use (InputError naming the key).

    A conserved total fixes one state of each conservation law (`model.kernels`' free
    states are the others): the box must not give it a range, and without an initial
    state it must give one to every free state.
    """
    settings = study.long_run
    if settings is None or not settings.box:
        return
    free = [study.states[c] for c in model.kernels.free_columns]
    for state in settings.box:
        if state not in free:
            raise InputError(f"'{state}' is fixed by a conserved total ([model.conserved]), so its "
                             f"starts follow from the other states; give ranges for {', '.join(free)}",
                             file=str(study.path), table="long_run.box", key=state)
    if not study.initial:
        for state in free:
            if state not in settings.box:
                raise InputError(f"'{state}' has no range and no initial value: add {state} = [low, high] "
                                 "here or give [model.initial]", file=str(study.path),
                                 table="long_run.box", key=state)


@dataclass
class LongRunColumns:
    """What `long_run_columns` returns for a chunk of B sets with R steady states.

    simulated : (B,) bool, the sets simulated.
    sets : outcomes.parquet columns, each (B,).
    steady : equilibria.parquet columns, each (R,).
    claim_sets, claim_steady : the values claims read (`poise.study.claims`), with plain
        dtypes (False / NaN where a set was not simulated; the chunk then marks the
        claim missing there).
    trajectories : rows of trajectories.parquet.
    """

    simulated: np.ndarray
    sets: dict
    steady: dict
    claim_sets: dict
    claim_steady: dict
    trajectories: pd.DataFrame


def long_run_columns(study, model, owner: np.ndarray, free: np.ndarray, jacobians: np.ndarray,
                     labels: np.ndarray, sample_ids: np.ndarray, params: np.ndarray,
                     ok: np.ndarray) -> LongRunColumns:
    """Simulate the chunk's chosen sets and tabulate where their trajectories go.

    Parameters
    ----------
    study : with ``long_run`` set.
    model : the compiled model (`params`' columns are its varying parameters).
    owner, free, jacobians, labels : (R,) set index, free states, reduced Jacobians and
        labels of the steady states found (sorted by set).
    sample_ids, params : (B,) and (B, m), the chunk's sets.
    ok : (B,) the sets analysed successfully (only those are simulated).
    """
    settings = study.long_run
    n_sets, states = sample_ids.size, study.states
    simulated = ok & simulated_sets(sample_ids, settings.share, study.sampling.seed, group_size(study))
    chosen = np.flatnonzero(simulated)
    local = np.full(n_sets, -1, dtype=np.int64)
    local[chosen] = np.arange(chosen.size)
    rows = np.flatnonzero(simulated[owner])
    kernels = model.kernels
    initial = _initial_free(study, kernels)
    low, high = _box(study, kernels, initial)
    run = long_run(kernels, params[chosen], local[owner[rows]], free[rows], jacobians[rows],
                   initial=initial, box_low=low, box_high=high, box_samples=settings.box_starts,
                   set_ids=sample_ids[chosen], seed=study.sampling.seed, steady_labels=labels[rows],
                   domain_low=model.domain_low, domain_high=model.domain_high,
                   settings=Settings(max_steps=settings.max_steps, horizon_factor=settings.horizon))
    tr = run.trajectories
    index = _index_within_set(owner)
    sets, claim_sets = _set_columns(tr, chosen, n_sets, simulated, states, initial is not None)
    steady, claim_steady = _steady_columns(run, rows, owner.size, simulated[owner])
    table = _trajectory_table(tr, kernels, params[chosen], sample_ids[chosen], rows, index, labels, states)
    return LongRunColumns(simulated=simulated, sets=sets, steady=steady, claim_sets=claim_sets,
                          claim_steady=claim_steady, trajectories=table)


def _initial_free(study, kernels) -> np.ndarray | None:
    if not study.initial:
        return None
    full = np.array([study.initial[s] for s in study.states], dtype=float)
    return full[list(kernels.free_columns)]


def _box(study, kernels, initial):
    """Box bounds over the free states; a state without a range starts at its initial value."""
    box = study.long_run.box
    if not box:
        return None, None
    free = [study.states[c] for c in kernels.free_columns]
    low = np.array([box[s][0] if s in box else initial[j] for j, s in enumerate(free)])
    high = np.array([box[s][1] if s in box else initial[j] for j, s in enumerate(free)])
    return low, high


def _index_within_set(owner: np.ndarray) -> np.ndarray:
    """Position of each steady state within its set (the ``index`` column)."""
    return np.arange(owner.size) - np.searchsorted(owner, owner, side="left")


def _set_columns(tr, chosen, n_sets, simulated, states, with_initial: bool):
    own = tr.starts.owner
    count = chosen.size
    outcome = np.full(n_sets, None, dtype=object)
    reason = np.full(n_sets, None, dtype=object)
    if with_initial:
        first = np.flatnonzero(tr.starts.kind == INITIAL)
        outcome[chosen[own[first]]] = np.asarray(OUTCOME_NAMES, dtype=object)[tr.outcome[first]]
        reason[chosen[own[first]]] = np.asarray(REASONS, dtype=object)[tr.reason[first]]
    on_orbit = np.flatnonzero(tr.outcome == CYCLES)
    # trajectories come ordered by set and kind: the first on an orbit is the initial state's if it cycles
    sets_with_orbit, first_orbit = np.unique(own[on_orbit], return_index=True)
    orbit_row = np.full(count, -1, dtype=np.int64)
    orbit_row[sets_with_orbit] = on_orbit[first_orbit]
    has = orbit_row >= 0
    period = np.full(n_sets, np.nan)
    period[chosen[has]] = tr.period[orbit_row[has]]
    low = np.full((n_sets, len(states)), np.nan)
    high = np.full((n_sets, len(states)), np.nan)
    low[chosen[has]] = tr.low[orbit_row[has]]
    high[chosen[has]] = tr.high[orbit_row[has]]
    cycles = np.zeros(n_sets, dtype=bool)
    cycles[chosen[has]] = True
    orbits = np.zeros(count, dtype=np.int64)
    np.maximum.at(orbits, own, tr.cycle + 1)
    missing = ~simulated

    def counts(values) -> pd.arrays.IntegerArray:
        full = np.zeros(n_sets, dtype=np.int64)
        full[chosen] = values
        return pd.arrays.IntegerArray(full, missing.copy())

    columns = {"long_run": outcome, "long_run_reason": reason,
               "cycles": pd.arrays.BooleanArray(cycles, missing.copy()), "n_orbits": counts(orbits),
               "period": period}
    claim = {"cycles": cycles, "period": period}
    for j, state in enumerate(states):
        columns[f"min({state})"], columns[f"max({state})"] = low[:, j], high[:, j]
        columns[f"amplitude({state})"] = claim[f"amplitude({state})"] = high[:, j] - low[:, j]
    columns["n_trajectories"] = counts(np.bincount(own, minlength=count))
    columns["n_undetermined"] = counts(np.bincount(own[tr.outcome == UNDETERMINED], minlength=count))
    return columns, claim


def _steady_columns(run, rows, n_rows, simulated_rows):
    tr = run.trajectories
    reached = np.zeros(n_rows, dtype=bool)
    first = (tr.starts.kind == INITIAL) & (tr.outcome == SETTLES) & (tr.steady >= 0)
    reached[rows[tr.steady[first]]] = True
    basin = {name: np.full(n_rows, np.nan) for name in ("basin", "basin_low", "basin_high")}
    if run.basins is not None:
        share = run.basins.per_steady
        basin["basin"][rows], basin["basin_low"][rows], basin["basin_high"][rows] = \
            share.fraction, share.low, share.high
    columns = {"reached": pd.arrays.BooleanArray(reached, ~simulated_rows), **basin}
    return columns, {"reached": reached, "basin": basin["basin"]}


def _trajectory_table(tr, kernels, params, ids, rows, index, labels, states) -> pd.DataFrame:
    own = tr.starts.owner
    steady = np.where(tr.steady >= 0, rows[np.maximum(tr.steady, 0)], -1)
    source = np.where(tr.starts.source >= 0, rows[np.maximum(tr.starts.source, 0)], -1)
    columns = {
        "sample_id": ids[own].astype(np.int64),
        "start": np.asarray(KIND_NAMES, dtype=object)[tr.starts.kind],
        "number": tr.starts.index.astype(np.int64),
        "source": _nullable(np.where(source >= 0, index[np.maximum(source, 0)], -1)),
        "outcome": tr.outcome_names(),
        "reason": tr.reason_texts(),
        "steady": _nullable(np.where(steady >= 0, index[np.maximum(steady, 0)], -1)),
        "label": _labels_at(labels, steady),
        "period": tr.period, "multiplier": tr.multiplier, "orbit": _nullable(tr.cycle),
        "time": tr.time, "steps": tr.steps.astype(np.int64),
    }
    start = (kernels.full_states(tr.starts.x, params[own]) if tr.count
             else np.zeros((0, len(states))))
    for j, state in enumerate(states):
        columns[f"start({state})"] = start[:, j]
    for j, state in enumerate(states):
        columns[f"min({state})"], columns[f"max({state})"] = tr.low[:, j], tr.high[:, j]
    return pd.DataFrame(columns)


def _nullable(values: np.ndarray) -> pd.arrays.IntegerArray:
    """Integers with -1 read as missing."""
    values = np.asarray(values, dtype=np.int64)
    return pd.arrays.IntegerArray(np.where(values >= 0, values, 0), values < 0)


def _labels_at(labels: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """The label of each steady-state row (None where the row is -1)."""
    out = np.full(rows.size, None, dtype=object)
    out[rows >= 0] = np.asarray(labels, dtype=object)[rows[rows >= 0]]
    return out


# --- schemas of the part files (poise.engine.worker) --------------------------------

def set_fields(states) -> list:
    """Fields of the long-run columns of outcomes.parquet, in the order `long_run_columns` makes them."""
    fields = [pa.field("long_run", pa.string()), pa.field("long_run_reason", pa.string()),
              pa.field("cycles", pa.bool_()), pa.field("n_orbits", pa.int64()), pa.field("period", pa.float64())]
    fields += [pa.field(f"{word}({s})", pa.float64()) for s in states for word in ("min", "max", "amplitude")]
    return fields + [pa.field(name, pa.int64()) for name in ("n_trajectories", "n_undetermined")]


def steady_fields() -> list:
    """Fields of the long-run columns of equilibria.parquet."""
    return [pa.field("reached", pa.bool_())] + [pa.field(name, pa.float64())
                                                 for name in ("basin", "basin_low", "basin_high")]


def trajectory_schema(states) -> pa.Schema:
    """Schema of trajectories.parquet (one row per trajectory)."""
    fields = [pa.field("sample_id", pa.int64()), pa.field("start", pa.string()),
              pa.field("number", pa.int64()), pa.field("source", pa.int64()),
              pa.field("outcome", pa.string()), pa.field("reason", pa.string()),
              pa.field("steady", pa.int64()), pa.field("label", pa.string()),
              pa.field("period", pa.float64()), pa.field("multiplier", pa.float64()),
              pa.field("orbit", pa.int64()), pa.field("time", pa.float64()), pa.field("steps", pa.int64())]
    fields += [pa.field(f"start({s})", pa.float64()) for s in states]
    fields += [pa.field(f"{word}({s})", pa.float64()) for s in states for word in ("min", "max")]
    return pa.schema(fields)
