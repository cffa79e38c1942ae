"""Split a design into chunks, run them on local processes or a Dask cluster, and
checkpoint each finished chunk so that a killed run resumes where it stopped.

The parent process alone writes files: workers return parquet bytes, the parent
writes each part atomically and records it (with its hash) in manifest.json.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Iterable

import numpy as np

from poise.engine.storage import part_is_valid, part_paths, sha256, write_atomic, write_manifest
from poise.engine.worker import ChunkOutput, run_chunk


@dataclass(frozen=True)
class ChunkTask:
    index: int
    start: int
    stop: int


def plan_chunks(n_rows: int, chunk_size: int) -> list[ChunkTask]:
    return [ChunkTask(i, start, min(start + chunk_size, n_rows))
            for i, start in enumerate(range(0, n_rows, chunk_size))]


def finished_chunks(directory: Path, manifest: dict) -> set[int]:
    """Chunks whose part files are present and intact (a corrupted part is redone)."""
    done = set()
    for key, record in manifest.get("chunks", {}).items():
        if part_is_valid(directory, record):
            done.add(int(key))
    return done


def execute(directory: Path, manifest: dict, study_path: str, study_text: str,
            params: np.ndarray, method: str, jobs: int, scheduler: str | None,
            progress: Callable[[int], None] | None = None) -> dict:
    """Run every unfinished chunk and record it in the manifest.

    A chunk whose function raised is retried once, then written as failed sets with
    the reason. Returns the updated manifest.
    """
    tasks = plan_chunks(params.shape[0], manifest["chunk_size"])
    done = finished_chunks(directory, manifest)
    manifest["chunks"] = {str(i): manifest["chunks"][str(i)] for i in sorted(done)}
    if progress:
        progress(sum(t.stop - t.start for t in tasks if t.index in done), True)
    pending = [t for t in tasks if t.index not in done]
    last_errors: dict[int, str] = {}
    for attempt in range(2):
        if not pending:
            break
        failed = []
        for output in _dispatch(pending, study_path, study_text, params, method, jobs, scheduler):
            task = tasks[output.index]
            if output.error:
                failed.append((task, output.error))
                continue
            _record(directory, manifest, output)
            if progress:
                progress(task.stop - task.start)
        pending = [task for task, _ in failed]
        last_errors = {task.index: error for task, error in failed}
    for task in pending:
        _record(directory, manifest, _failed_chunk(study_path, study_text, task, params,
                                                   last_errors[task.index]))
        if progress:
            progress(task.stop - task.start)
    return manifest


def _record(directory: Path, manifest: dict, output: ChunkOutput) -> None:
    sets_file, eq_file = part_paths(output.index)
    write_atomic(directory / sets_file, output.sets)
    write_atomic(directory / eq_file, output.equilibria)
    manifest["chunks"][str(output.index)] = {
        "sets": {"file": sets_file, "sha256": sha256(output.sets)},
        "equilibria": {"file": eq_file, "sha256": sha256(output.equilibria)},
    }
    write_manifest(directory, manifest)


def _failed_chunk(study_path, study_text, task: ChunkTask, params, error: str) -> ChunkOutput:
    """Every set of a chunk that failed twice, recorded as failed with the reason."""
    import pandas as pd

    from poise.engine.storage import frame_bytes
    from poise.engine.worker import equilibria_schema, prepared, sets_schema

    study, model = prepared(study_path, study_text)
    ids = np.arange(task.start, task.stop, dtype=np.int64)
    sets = pd.DataFrame({"sample_id": ids, "status": "failed",
                         "reason": f"the chunk failed twice: {error}",
                         "n_steady": pd.array([pd.NA] * ids.size, dtype="Int64"),
                         "n_stable": pd.array([pd.NA] * ids.size, dtype="Int64")})
    for claim in study.claims:
        sets[claim.name] = pd.array([pd.NA] * ids.size, dtype="boolean")
    schema = equilibria_schema(study.states, model.dimension)
    empty = pd.DataFrame({f.name: pd.Series([], dtype=f.type.to_pandas_dtype()) for f in schema})
    return ChunkOutput(index=task.index, sets=frame_bytes(sets, sets_schema(study)),
                       equilibria=frame_bytes(empty, schema))


def _dispatch(tasks: list[ChunkTask], study_path, study_text, params, method, jobs, scheduler) -> Iterable[ChunkOutput]:
    """Run tasks; yield outputs as they finish (in any order)."""
    arguments = [(study_path, study_text, t.index, np.arange(t.start, t.stop, dtype=np.int64),
                  params[t.start:t.stop], method) for t in tasks]
    if scheduler:
        yield from _dispatch_dask(arguments, scheduler)
        return
    workers = jobs or os.cpu_count() or 1
    if workers == 1 or len(tasks) == 1:
        for args in arguments:
            yield run_chunk(*args)
        return
    yield from _dispatch_processes(arguments, workers)


def _dispatch_processes(arguments, workers: int) -> Iterable[ChunkOutput]:
    from joblib import Parallel, delayed
    from joblib.externals.loky.process_executor import TerminatedWorkerError

    returned = set()
    try:
        parallel = Parallel(n_jobs=min(workers, len(arguments)), return_as="generator_unordered")
        for output in parallel(delayed(run_chunk)(*args) for args in arguments):
            returned.add(output.index)
            yield output
    except TerminatedWorkerError as exc:
        # A worker died (killed, out of memory): report what did not come back as failed
        # so the caller retries it.
        reason = f"a worker process died ({exc.__class__.__name__})"
        for args in arguments:
            if args[2] not in returned:
                yield ChunkOutput(index=args[2], error=reason)


def _dispatch_dask(arguments, scheduler: str) -> Iterable[ChunkOutput]:
    try:
        from distributed import Client, as_completed
    except ImportError:
        from poise.errors import InputError
        raise InputError("--scheduler needs the Dask distributed package: pip install 'poise[cluster]'") from None
    try:
        client = Client(scheduler, timeout=30)
    except (OSError, TimeoutError) as exc:
        from poise.errors import InputError
        raise InputError(f"--scheduler {scheduler}: cannot reach the Dask scheduler ({exc})") from None
    try:
        futures = [client.submit(run_chunk, *args, pure=False) for args in arguments]
        for future in as_completed(futures):
            try:
                yield future.result()
            except Exception as exc:  # a worker lost mid-task
                yield ChunkOutput(index=arguments[futures.index(future)][2], error=f"worker lost: {exc}")
    finally:
        client.close()
