"""Turn checkpointed parts into the run directory's tables, streaming.

One pass over the chunks in design order: each chunk's rows are appended to
samples.parquet, outcomes.parquet and equilibria.parquet (one row group per chunk)
and its steady states are tallied on the way. Only the compact per-set outcomes the
summary needs (flags, counts, claim values: a few bytes per set) stay in memory;
steady states and failure reasons never accumulate. The work per chunk stays in
Arrow (no pandas round trip), as it runs in the parent, after all workers are done.
"""

from __future__ import annotations

import sys
from collections import Counter, defaultdict
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from poise.engine.storage import atomic_file

FIXED_SET_COLUMNS = ("sample_id", "status", "reason", "n_steady", "n_stable")
NULLABLE_COUNTS = ("n_steady", "n_stable")
STATUS = pd.CategoricalDtype(["failed", "ok"])


@dataclass
class Tallies:
    """Counts over the independent, successfully analysed sets."""

    presence: dict[str, int]                 # label -> sets having a steady state with it
    classes: dict[str, dict[str, int]]       # label -> class -> steady states


def assemble(directory: Path, manifest: dict, samples: pd.DataFrame) -> tuple[pd.DataFrame, Tallies]:
    """Write samples.parquet, outcomes.parquet and equilibria.parquet.

    Parameters
    ----------
    directory : the run directory.
    manifest : lists every chunk's part files (``manifest["chunks"]``), covering the
        design without gaps.
    samples : sample_id (0..n-1 in order), block, independent and one column per
        uncertain parameter.

    Returns
    -------
    outcomes : the per-set outcomes (sample_id, block, independent, status, n_steady,
        n_stable as Int64, one boolean column per claim), block and status
        categorical to keep memory small.
    tallies : label presence and class counts over independent ok sets.

    Raises
    ------
    RuntimeError
        If the parts do not cover the design exactly (a bug, never user error).
    """
    design = pa.Table.from_pandas(samples, preserve_index=False)   # sliced per chunk, no copies
    presence: Counter = Counter()
    classes: dict[str, Counter] = defaultdict(Counter)
    kept: list[pa.Table] = []
    start = 0
    with _Streamed(directory / "samples.parquet") as samples_out, \
            _Streamed(directory / "outcomes.parquet") as outcomes_out, \
            _Streamed(directory / "equilibria.parquet") as equilibria_out:
        for key in sorted(manifest["chunks"], key=int):
            record = manifest["chunks"][key]
            sets = pq.read_table(directory / record["sets"]["file"])
            stop = start + sets.num_rows
            if stop > len(samples) or not np.array_equal(sets["sample_id"].to_numpy(), np.arange(start, stop)):
                raise RuntimeError(f"chunk {key} does not hold sets {start}.. in order; the parts are inconsistent")
            rows = design.slice(start, stop - start)

            samples_out.write(rows.append_column("status", sets["status"]).append_column("reason", sets["reason"]))
            outcomes = pa.table({"sample_id": rows["sample_id"], "block": rows["block"],
                                 "independent": rows["independent"],
                                 **{name: sets[name] for name in sets.column_names
                                    if name not in ("sample_id", "reason")}})
            outcomes_out.write(outcomes)
            kept.append(outcomes.set_column(1, "block", pc.dictionary_encode(outcomes["block"])))

            usable = pc.and_(rows["independent"], pc.equal(sets["status"], "ok"))
            part = pq.read_table(directory / record["equilibria"]["file"])
            equilibria_out.write(part, pandas_types=False)
            _tally(part, usable.to_numpy(zero_copy_only=False), start, presence, classes)
            start = stop
        if start != len(samples):
            raise RuntimeError(f"the parts hold {start} sets, the design {len(samples)}")
    outcomes = _to_pandas(kept)
    del kept
    pa.default_memory_pool().release_unused()   # hand Arrow's cached buffers back before the summary
    return outcomes, Tallies(presence=dict(presence), classes={k: dict(v) for k, v in classes.items()})


def _to_pandas(tables: list[pa.Table]) -> pd.DataFrame:
    """The per-set outcomes with pandas' nullable types and categorical labels."""
    if not tables:
        return pd.DataFrame()
    frame = pa.concat_tables(tables).to_pandas()
    for column in frame.columns:
        if column in NULLABLE_COUNTS:
            frame[column] = frame[column].astype("Int64")
        elif column not in ("sample_id", "block", "independent", "status"):
            frame[column] = frame[column].astype("boolean")   # one per claim
    frame["status"] = frame["status"].astype(STATUS)
    return frame


def _tally(part: pa.Table, usable: np.ndarray, start: int, presence: Counter, classes: dict) -> None:
    """Count labels (once per set) and classes of the steady states of usable sets."""
    owners = part["sample_id"].to_numpy() - start
    states = part.select(["sample_id", "label", "class"]).filter(pa.array(usable[owners], pa.bool_()))
    counted = states.group_by(["label", "class"]).aggregate([([], "count_all")]).to_pydict()
    for label, name, count in zip(counted["label"], counted["class"], counted["count_all"]):
        classes[label][name] += count
    having = states.group_by(["sample_id", "label"]).aggregate([]).group_by("label")
    counted = having.aggregate([([], "count_all")]).to_pydict()
    for label, count in zip(counted["label"], counted["count_all"]):
        presence[label] += count


def _pandas_schema(table: pa.Table) -> pa.Schema:
    """`table`'s schema with pandas metadata, so that pandas reads the nullable counts
    back as Int64 and claim columns as boolean (the run directory contract)."""
    template = table.slice(0, 0).to_pandas()
    for column in template.columns:
        if column in NULLABLE_COUNTS:
            template[column] = template[column].astype("Int64")
        elif pa.types.is_boolean(table.schema.field(column).type) and column not in ("independent", "oscillatory"):
            template[column] = template[column].astype("boolean")
    return pa.Schema.from_pandas(template, preserve_index=False)


class _Streamed:
    """A parquet file written a row group at a time into a temporary file of
    `atomic_file` (random name, created exclusively), then fsynced and renamed into
    place: readers never see half a table."""

    def __init__(self, target: Path):
        self.temporary = atomic_file(target, sync_folder=False)
        self.writer: pq.ParquetWriter | None = None

    def __enter__(self):
        self.file = self.temporary.__enter__()
        return self

    def write(self, table: pa.Table, pandas_types: bool = True) -> None:
        if self.writer is None:
            schema = _pandas_schema(table) if pandas_types else table.schema
            self.writer = pq.ParquetWriter(self.file, schema)
        self.writer.write_table(table.cast(self.writer.schema))

    def __exit__(self, kind, value, trace) -> None:
        try:
            if self.writer is not None:
                self.writer.close()
            elif kind is None:
                pq.write_table(pa.table({}), self.file)
        except BaseException:
            self.temporary.__exit__(*sys.exc_info())   # removes the temporary
            raise
        self.temporary.__exit__(kind, value, trace)    # renamed into place, or removed on an error
