"""The function a worker process runs for one chunk.

Workers receive the study's text, not compiled functions: each process parses and
compiles the study once and keeps it in a small cache, so only plain arrays and
strings cross process (or machine) boundaries.
"""

from __future__ import annotations

import hashlib
import threading
import traceback
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa

from poise.engine.chunk import analyse_sets
from poise.engine.storage import frame_bytes

_CACHE: dict[str, tuple] = {}
_CACHE_LOCK = threading.Lock()   # a Dask worker may run several chunks in threads


@dataclass
class ChunkOutput:
    """What a worker sends back: parquet bytes for both tables, or an error."""

    index: int
    sets: bytes = b""
    equilibria: bytes = b""
    error: str = ""
    trajectories: bytes = b""   # with [long_run] only


def prepared(study_path: str, study_text: str):
    """The study and its compiled model, built once per process."""
    key = hashlib.sha256((study_path + "\0" + study_text).encode()).hexdigest()
    with _CACHE_LOCK:
        if key not in _CACHE:
            from poise.model import compile_model
            from poise.engine.compile_notice import announce_compiling
            from poise.errors import quiet_sobol_balance
            from poise.study.loader import load_study
            quiet_sobol_balance()   # a worker's stderr is the user's terminal
            announce_compiling()    # only if the `poise` command asked for it
            study = load_study(Path(study_path), text=study_text)
            _CACHE.clear()  # one study per process: a long-lived worker does not pile them up
            _CACHE[key] = (study, compile_model(study))
        return _CACHE[key]


def run_chunk(study_path: str, study_text: str, index: int, sample_ids: np.ndarray,
              params: np.ndarray, method: str) -> ChunkOutput:
    """Analyse one chunk; never raises (the error text is returned instead)."""
    try:
        study, model = prepared(study_path, study_text)
        with np.errstate(all="ignore"):
            # Overflow or 0/0 in a few sets of a batch is expected and recorded per set;
            # the warnings would only garble the progress line. (errstate, unlike the
            # warnings filters, is per thread, as Dask's threaded workers need.)
            result = analyse_sets(study, model, sample_ids, params, solver_method=method)
        return ChunkOutput(
            index=index,
            sets=frame_bytes(result.sets, sets_schema(study)),
            equilibria=frame_bytes(result.equilibria, equilibria_schema(study.states, model.dimension,
                                                                        study.long_run is not None)),
            trajectories=trajectories_bytes(study, result.trajectories),
        )
    except Exception as exc:  # recorded and retried by the runner, never lost
        last = traceback.format_exception_only(type(exc), exc)[-1].strip()
        return ChunkOutput(index=index, error=last)


def sets_schema(study) -> pa.Schema:
    fields = [pa.field("sample_id", pa.int64()), pa.field("status", pa.string()),
              pa.field("reason", pa.string()), pa.field("n_steady", pa.int64()),
              pa.field("n_stable", pa.int64())]
    if study.long_run is not None:
        from poise.longrun.pipeline import set_fields
        fields += set_fields(study.states)
    fields += [pa.field(claim.name, pa.bool_()) for claim in study.claims]
    return pa.schema(fields)


def trajectories_bytes(study, frame) -> bytes:
    """trajectories.parquet rows of a chunk (empty bytes without [long_run])."""
    if study.long_run is None:
        return b""
    from poise.longrun.pipeline import trajectory_schema
    schema = trajectory_schema(study.states)
    return frame_bytes(schema.empty_table().to_pandas() if frame is None else frame, schema)


def equilibria_schema(states, dimension: int, long_run: bool = False) -> pa.Schema:
    fields = [pa.field("sample_id", pa.int64()), pa.field("index", pa.int64())]
    fields += [pa.field(s, pa.float64()) for s in states]
    fields += [pa.field("label", pa.string()), pa.field("class", pa.string()),
               pa.field("stability", pa.string()), pa.field("margin", pa.float64()),
               pa.field("complex_eigenvalues", pa.bool_()), pa.field("continuum", pa.bool_())]
    for i in range(dimension):
        fields += [pa.field(f"eig_re_{i}", pa.float64()), pa.field(f"eig_im_{i}", pa.float64())]
    fields += [pa.field(name, pa.float64()) for name in ("trace", "determinant", "discriminant")]
    if long_run:
        from poise.longrun.pipeline import steady_fields
        fields += steady_fields()
    return pa.schema(fields)
