"""Turn checkpointed parts into the run directory's tables, streaming.

Steady states are copied part by part into equilibria.parquet and tallied on the way,
so memory grows with the chunk size, not with the number of steady states. Per-set
tables (one small row per set) are gathered whole.
"""

from __future__ import annotations

from collections import Counter, defaultdict
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from poise.engine.storage import frame_bytes, write_atomic


@dataclass
class Tallies:
    """Counts over the independent, successfully analysed sets."""

    presence: dict[str, int]                 # label -> sets having a steady state with it
    classes: dict[str, dict[str, int]]       # label -> class -> steady states


def assemble(directory: Path, manifest: dict, samples: pd.DataFrame) -> tuple[pd.DataFrame, Tallies]:
    """Write samples.parquet, outcomes.parquet and equilibria.parquet.

    Parameters
    ----------
    samples : sample_id, block, independent and one column per uncertain parameter.

    Returns
    -------
    outcomes : the per-set outcomes (with block and independent).
    tallies : label presence and class counts over independent ok sets.
    """
    chunks = [manifest["chunks"][key] for key in sorted(manifest["chunks"], key=int)]
    sets = pd.concat([pd.read_parquet(directory / c["sets"]["file"]) for c in chunks], ignore_index=True)
    sets = sets.sort_values("sample_id", kind="stable").reset_index(drop=True)
    for column in ("n_steady", "n_stable"):
        sets[column] = sets[column].astype("Int64")
    outcomes = pd.concat([samples[["sample_id", "block", "independent"]], sets.drop(columns="sample_id")], axis=1)
    independent_ok = (outcomes["independent"] & (outcomes["status"] == "ok")).to_numpy()

    table = samples.copy()
    table["status"] = sets["status"].to_numpy()
    table["reason"] = sets["reason"].to_numpy()
    write_atomic(directory / "samples.parquet", frame_bytes(table))
    write_atomic(directory / "outcomes.parquet", frame_bytes(outcomes.drop(columns="reason")))
    tallies = _stream_equilibria(directory, chunks, independent_ok)
    return outcomes, tallies


def _stream_equilibria(directory: Path, chunks: list[dict], independent_ok: np.ndarray) -> Tallies:
    presence: Counter = Counter()
    classes: dict[str, Counter] = defaultdict(Counter)
    target = directory / "equilibria.parquet"
    temporary = directory / ".equilibria.parquet.tmp"
    writer = None
    try:
        for chunk in chunks:
            part = pq.read_table(directory / chunk["equilibria"]["file"])
            if writer is None:
                writer = pq.ParquetWriter(temporary, part.schema)
            writer.write_table(part)
            frame = part.select(["sample_id", "label", "class"]).to_pandas()
            frame = frame[independent_ok[frame["sample_id"].to_numpy()]]
            presence.update(frame.drop_duplicates(["sample_id", "label"])["label"].value_counts().to_dict())
            for (label, name), count in frame.groupby(["label", "class"]).size().items():
                classes[label][name] += int(count)
    finally:
        if writer is not None:
            writer.close()
    if writer is None:
        pq.write_table(pa.table({}), temporary)
    temporary.replace(target)
    return Tallies(presence=dict(presence), classes={k: dict(v) for k, v in classes.items()})
