"""Split a design into chunks, run them on local processes or a Dask cluster, and
checkpoint each finished chunk so that a killed run resumes where it stopped.

The parent process alone writes files: workers return parquet bytes, the parent
writes each part atomically and records it (with its hash) in manifest.json.

Retries: a chunk whose function raised or whose worker process died is tried once
more; after two failed attempts its sets are recorded as failed, with the reason.
When a worker dies while several chunks are in flight nobody can tell which one
killed it, so those chunks are retried one at a time: a second death is then the
chunk's own, and the innocent ones go through.
"""

from __future__ import annotations

import os
import signal
import threading
import time
from collections import Counter
from concurrent.futures import FIRST_COMPLETED, wait
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Iterator

import numpy as np

from poise.engine.storage import part_is_valid, part_paths, sha256, write_atomic, write_manifest
from poise.engine.worker import ChunkOutput, prepared, run_chunk

ATTEMPTS = 2                 # first try and one retry
# Starting a pool of workers (each imports the numeric stack and compiles the model)
# costs about this many seconds of wall time. With jobs = 0 (all cores, the default)
# the parent times the first chunk itself and starts workers only if they would save
# more than that. Measured on a 2-core machine with benchmarks/bench_scale.py (1.5-3 s);
# common practice, no source.
WORKER_START_SECONDS = 3.0
# Each worker computes with one thread: the kernels work on many tiny matrices, where
# BLAS threads only compete with the other workers for the cores.
WORKER_ENV = {"OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}
# Local workers beyond this many per core are capped: the chunks are CPU-bound, so
# more processes than cores only add start-up cost and memory (5,000 on 2 cores ran
# the load to over 100). Twice leaves room for cores the system undercounts; common
# practice, no source.
JOBS_PER_CORE = 2


def usable_cores() -> int:
    """Cores this process may run on (its CPU affinity where the system tells)."""
    try:
        return max(len(os.sched_getaffinity(0)), 1)
    except (AttributeError, OSError):
        return os.cpu_count() or 1


def capped_jobs(jobs: int) -> tuple[int, str | None]:
    """`jobs` capped at `JOBS_PER_CORE` times the usable cores, and the note saying so
    (None when nothing was capped)."""
    cores = usable_cores()
    if jobs <= JOBS_PER_CORE * cores:
        return jobs, None
    return JOBS_PER_CORE * cores, (f"jobs {jobs} is more than {JOBS_PER_CORE} per core on this "
                                   f"machine ({cores} cores); using {JOBS_PER_CORE * cores}")


@dataclass(frozen=True)
class ChunkTask:
    """Rows ``start:stop`` of the design, checkpointed as chunk `index`."""

    index: int
    start: int
    stop: int

    @property
    def size(self) -> int:
        return self.stop - self.start


@dataclass
class Outcome:
    """What came back for one task: the worker's output, or why there is none.

    `shared` marks a chunk lost together with others when a worker died: it may not
    have caused the death, so it is retried alone.
    """

    task: ChunkTask
    output: ChunkOutput
    shared: bool = False


def plan_chunks(n_rows: int, chunk_size: int) -> list[ChunkTask]:
    """Consecutive chunks of `chunk_size` rows (the last one shorter)."""
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
            progress: Callable[..., None] | None = None) -> dict:
    """Run every unfinished chunk and record it in the manifest.

    Parameters
    ----------
    directory : the run directory (parts go to ``directory/parts``).
    manifest : the run's manifest; ``chunk_size`` and ``chunks`` are read and updated.
    study_path, study_text : what workers compile (once per process).
    params : (n_sets, m) values of the uncertain parameters in design order.
    method : the steady-state finder.
    jobs : local worker processes; 1 = in this process; 0 = up to one per core, started
        only when the first chunk's time shows they pay off (`worth_processes`).
    scheduler : address of a Dask scheduler; when given, chunks run on its workers.
    progress : called with the number of sets just finished (and ``True`` for sets
        found finished on resume).

    Returns
    -------
    dict
        The updated manifest, one record per chunk (failed chunks included).
    """
    tasks = plan_chunks(params.shape[0], manifest["chunk_size"])
    done = finished_chunks(directory, manifest) & {t.index for t in tasks}
    manifest["chunks"] = {str(i): manifest["chunks"][str(i)] for i in sorted(done)}
    write_manifest(directory, manifest)
    if progress:
        progress(sum(t.size for t in tasks if t.index in done), True)
    pending = [t for t in tasks if t.index not in done]
    if not pending:
        return manifest

    def arguments(task: ChunkTask) -> tuple:
        return (study_path, study_text, task.index, np.arange(task.start, task.stop, dtype=np.int64),
                params[task.start:task.stop], method)

    attempts: Counter = Counter()
    workers = 1 if scheduler else (jobs or usable_cores())

    def settle(outcome: Outcome) -> bool:
        """Record a finished (or finally failed) chunk; True if it is to be tried again."""
        task, output = outcome.task, outcome.output
        if output.error:
            attempts[task.index] += 1
            if attempts[task.index] < ATTEMPTS:
                return True
            output = _failed_chunk(study_path, study_text, task, output.error)
        _record(directory, manifest, output)
        if progress:
            progress(task.size)
        return False

    if not scheduler and jobs == 0 and workers > 1 and len(pending) > 1:
        # Automatic: time the first chunk here, then decide whether workers pay off.
        first, pending = pending[0], pending[1:]
        prepared(study_path, study_text)     # compiling is not part of the chunk's time
        started = time.perf_counter()
        pending = [o.task for o in _InProcess().run([first], arguments) if settle(o)] + pending
        if not worth_processes(time.perf_counter() - started, len(pending), workers):
            workers = 1
    with _backend(workers, scheduler, len(pending)) as backend:
        while pending:
            retry, alone = [], []
            for outcome in backend.run(pending, arguments):
                if settle(outcome):
                    (alone if outcome.shared else retry).append(outcome.task)
            for task in alone:  # lost when a worker died: alone, a second death is its own
                for outcome in backend.run([task], arguments, alone=True):
                    if settle(outcome):
                        retry.append(task)
            pending = sorted(retry, key=lambda t: t.index)
    return manifest


def _record(directory: Path, manifest: dict, output: ChunkOutput) -> None:
    """Write a chunk's parts atomically, then list them in the manifest (in that order,
    so the manifest never names a part that is not on disk)."""
    sets_file, eq_file = part_paths(output.index)
    write_atomic(directory / sets_file, output.sets, sync_folder=False)
    write_atomic(directory / eq_file, output.equilibria, sync_folder=False)
    manifest["chunks"][str(output.index)] = {
        "sets": {"file": sets_file, "sha256": sha256(output.sets)},
        "equilibria": {"file": eq_file, "sha256": sha256(output.equilibria)},
    }
    write_manifest(directory, manifest)


def _failed_chunk(study_path: str, study_text: str, task: ChunkTask, error: str) -> ChunkOutput:
    """Every set of a chunk that failed twice, recorded as failed with the reason."""
    import pandas as pd

    from poise.engine.storage import frame_bytes
    from poise.engine.worker import equilibria_schema, sets_schema

    study, model = prepared(study_path, study_text)
    ids = np.arange(task.start, task.stop, dtype=np.int64)
    missing = pd.array([pd.NA] * ids.size, dtype="Int64")
    sets = pd.DataFrame({"sample_id": ids, "status": "failed",
                         "reason": f"the chunk failed twice: {error}",
                         "n_steady": missing, "n_stable": missing.copy()})
    for claim in study.claims:
        sets[claim.name] = pd.array([pd.NA] * ids.size, dtype="boolean")
    schema = equilibria_schema(study.states, model.dimension)
    empty = schema.empty_table().to_pandas()
    return ChunkOutput(index=task.index, sets=frame_bytes(sets, sets_schema(study)),
                       equilibria=frame_bytes(empty, schema))


# --- where chunks run -------------------------------------------------------------

def worth_processes(chunk_seconds: float, n_chunks: int, workers: int) -> bool:
    """Whether `workers` processes finish `n_chunks` chunks of `chunk_seconds` each
    sooner than this process alone, start-up included."""
    if n_chunks < 2 or workers < 2:
        return False
    alone = n_chunks * chunk_seconds
    shared = WORKER_START_SECONDS + alone / min(workers, n_chunks)
    return shared < alone


def _backend(workers: int, scheduler: str | None, n_pending: int):
    if scheduler:
        return _DaskBackend(scheduler)
    if workers == 1 or n_pending < 2:
        return _InProcess()
    return _Processes(workers)


class _InProcess:
    """Chunks run one after the other in this process (one job, or a small run)."""

    def __enter__(self):
        return self

    def __exit__(self, *exc) -> None:
        return None

    def run(self, tasks, arguments, alone: bool = False) -> Iterator[Outcome]:
        for task in tasks:
            try:
                output = run_chunk(*arguments(task))
            except Exception as exc:  # run_chunk reports its own errors; this is a guard
                output = ChunkOutput(index=task.index, error=f"{type(exc).__name__}: {exc}")
            yield Outcome(task, output)


def _prepare_worker(parent: int) -> None:
    """Runs once in each new worker process."""
    # Ctrl-C reaches every process of the terminal's group; only the parent should
    # react (it stops the workers), so that no worker prints a traceback.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    # A parent killed outright (SIGKILL, out of memory) cannot stop its workers; they
    # would idle on as orphans, so each one leaves when it notices.
    threading.Thread(target=_exit_with_parent, args=(parent,), daemon=True).start()


def _exit_with_parent(parent: int) -> None:
    while True:
        time.sleep(1.0)
        if os.getppid() != parent:
            os._exit(1)


class _Processes:
    """Local worker processes from joblib's process executor (loky).

    At most two chunks per worker are in flight, so the parent holds only a few
    results at a time and knows exactly which chunks a dying worker took with it.
    """

    def __init__(self, workers: int):
        self.workers = workers
        self.current = None

    def __enter__(self):
        return self

    def __exit__(self, kind, value, trace) -> None:
        if kind is not None and self.current is not None:
            # Interrupted or failed: stop the work in flight now. (After a normal end
            # the idle workers stay a minute for the next run in this process.)
            self.current.shutdown(wait=False, kill_workers=True)

    def _executor(self):
        from joblib.externals.loky import get_reusable_executor
        self.current = get_reusable_executor(max_workers=self.workers, timeout=60, env=WORKER_ENV,
                                             initializer=_prepare_worker, initargs=(os.getpid(),))
        return self.current

    def run(self, tasks, arguments, alone: bool = False) -> Iterator[Outcome]:
        from joblib.externals.loky.process_executor import BrokenProcessPool

        window = 1 if alone else 2 * self.workers
        queue = list(reversed(tasks))
        flight: dict = {}
        executor = self._executor()
        while queue or flight:
            while queue and len(flight) < window:
                task = queue.pop()
                try:
                    future = executor.submit(run_chunk, *arguments(task))
                except BrokenProcessPool:
                    # A worker died since the last wait: put the task back; the chunks
                    # in flight report the death below, or a fresh pool takes over.
                    queue.append(task)
                    if flight:
                        break
                    executor = self._executor()
                    continue
                flight[future] = task
            finished, _ = wait(flight, return_when=FIRST_COMPLETED)
            outcomes, lost, death = [], [], None
            for future in finished:
                task = flight.pop(future)
                try:
                    outcomes.append(Outcome(task, future.result()))
                except BrokenProcessPool as exc:  # a worker died: the pool is gone
                    lost.append(task)
                    death = exc
                except Exception as exc:  # e.g. a result that could not be sent back
                    error = f"{type(exc).__name__}: {exc}"
                    outcomes.append(Outcome(task, ChunkOutput(index=task.index, error=error)))
            if death is not None:
                for future, task in flight.items():  # keep what finished before the death
                    if future.done() and not future.cancelled() and future.exception() is None:
                        outcomes.append(Outcome(task, future.result()))
                    else:
                        lost.append(task)
                flight.clear()
                reason = f"a worker process died while computing this chunk ({type(death).__name__})"
                outcomes += [Outcome(task, ChunkOutput(index=task.index, error=reason), shared=len(lost) > 1)
                             for task in lost]
                executor = self._executor()  # a fresh pool for the rest
            yield from outcomes


class _DaskBackend:
    """Chunks run on the workers of a Dask distributed scheduler.

    Dask itself moves the tasks of a lost worker to other workers and gives up on a
    task that kills several workers (KilledWorker): every error that comes back here
    belongs to its own chunk. At most a few tasks per worker thread are submitted at
    a time, so neither the client nor the scheduler holds the whole design.
    """

    def __init__(self, scheduler: str):
        from poise.errors import InputError
        try:
            from distributed import Client
        except ImportError:
            raise InputError("--scheduler needs the Dask distributed package "
                             "(pip install 'poise[cluster]')") from None
        try:
            self.client = Client(scheduler, timeout=30)
        except (OSError, TimeoutError, ValueError, TypeError) as exc:
            raise InputError(f"--scheduler {scheduler}: cannot reach the Dask scheduler ({exc})") from None

    def __enter__(self):
        return self

    def __exit__(self, *exc) -> None:
        self.client.close()

    def run(self, tasks, arguments, alone: bool = False) -> Iterator[Outcome]:
        from distributed import as_completed

        threads = sum(self.client.nthreads().values()) or 1
        window = 1 if alone else 2 * threads
        queue = list(reversed(tasks))
        owner: dict = {}
        pool = as_completed()
        while queue and len(owner) < window:
            task = queue.pop()
            future = self.client.submit(run_chunk, *arguments(task), pure=False)
            owner[future.key] = task
            pool.add(future)
        for future in pool:
            task = owner.pop(future.key)
            try:
                output = future.result()
            except Exception as exc:  # the task was lost or could not run
                output = ChunkOutput(index=task.index, error=f"{type(exc).__name__}: {exc}")
            yield Outcome(task, output)
            if queue:
                task = queue.pop()
                future = self.client.submit(run_chunk, *arguments(task), pure=False)
                owner[future.key] = task
                pool.add(future)
