"""The execution engine: same results on one process, two processes and a Dask
cluster; checkpoints that survive SIGKILL, Ctrl-C and damaged part files; refusal to
mix studies; retries and failed chunks.

One small study serves every test: prey with a carrying capacity K and a predator
with linear uptake,

    dx/dt = r x (1 - x/K) - a x y,    dy/dt = b x y - m y,

with K, b, m uncertain. Analytic result (derived here, not from a reference): the
interior steady state x* = m/b, y* = r (1 - x*/K)/a lies in the positive quadrant iff
b K > m, and then its Jacobian [[-r x*/K, -a x*], [b y*, 0]] has trace -r x*/K < 0
and determinant a b x* y* > 0, so it is stable (2x2 Routh-Hurwitz); when b K < m
the only steady states with y > 0 are absent. Hence "predator persists" holds iff
b K > m. That check ties every row of the assembled tables to its own parameters,
whatever order the chunks finished in.

The Saltelli design has N (k + 2) = 256 * 5 = 1280 sets (SALib documentation,
`SALib.sample.sobol.sample` with calc_second_order=False), 20 chunks of 64.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import poise
import poise.engine.runner as runner
import poise.engine.worker as worker
from poise.api import run_study
from poise.engine.storage import part_is_valid
from helpers import run_cli, write_study

STUDY = """\
title = "Prey with a ceiling and a linear predator"

[model]
states = ["x", "y"]

[model.ode]
x = "r*x*(1 - x/K) - a*x*y"
y = "b*x*y - m*y"

[parameters]
r = 1.0
a = 1.0
K = { dist = "uniform", low = 1, high = 3 }
b = { dist = "uniform", low = 0.5, high = 1.5 }
m = { dist = "uniform", low = 0.5, high = 2.0 }

[[claims]]
name = "predator persists"
holds = "any(stable and y > 1e-9)"

[sampling]
size = 256
design = "sobol"
seed = 3

[sensitivity]
method = "sobol"
resamples = 100

[run]
chunk_size = 64
"""
N_SETS = 256 * (3 + 2)       # SALib: N (k + 2) rows without second-order indices
CHUNK = 64
N_CHUNKS = N_SETS // CHUNK
HANG_GUARD = 120             # seconds; a guard against hangs, not a timing check
TABLES = ("samples", "outcomes", "equilibria")


# --- shared fixtures and helpers ----------------------------------------------------

@pytest.fixture(scope="module")
def study_path(tmp_path_factory) -> Path:
    return write_study(tmp_path_factory.mktemp("study"), STUDY)


@pytest.fixture(scope="module")
def reference(study_path, tmp_path_factory) -> Path:
    """An uninterrupted run in this process (--jobs 1): the yardstick."""
    out = tmp_path_factory.mktemp("reference") / "run"
    run_study(poise.load_study(study_path), out, jobs=1, report=False)
    return out


def _summary_bytes(directory: Path) -> bytes:
    return (directory / "summary.json").read_bytes()


def _assert_same_tables(directory: Path, reference: Path) -> None:
    for name in TABLES:
        pd.testing.assert_frame_equal(pd.read_parquet(directory / f"{name}.parquet"),
                                      pd.read_parquet(reference / f"{name}.parquet"))


def _manifest(directory: Path) -> dict:
    return json.loads((directory / "manifest.json").read_text())


def _part_stats(directory: Path, chunks: dict) -> dict:
    """(inode, mtime) of each part file: a rewritten part (atomic rename) gets new ones."""
    stats = {}
    for key, record in chunks.items():
        for kind in ("sets", "equilibria"):
            info = os.stat(directory / record[kind]["file"])
            stats[(key, kind)] = (info.st_ino, info.st_mtime_ns)
    return stats


def _environment() -> dict:
    env = dict(os.environ)
    source = str(Path(poise.__file__).resolve().parents[1])
    env["PYTHONPATH"] = os.pathsep.join([source, env.get("PYTHONPATH", "")])
    return env


def _start_cli(*args: str, new_group: bool = False) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "poise.cli", *args], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=_environment(),
                            start_new_session=new_group)


def _wait_for_chunks(directory: Path, process: subprocess.Popen, minimum: int) -> None:
    """Until manifest.json lists at least `minimum` chunks (written atomically, so a
    read sees a whole manifest or none)."""
    deadline = time.monotonic() + HANG_GUARD
    while time.monotonic() < deadline:
        if process.poll() is not None:
            _, err = process.communicate()
            pytest.fail(f"the run ended before it could be interrupted:\n{err}")
        try:
            if len(_manifest(directory)["chunks"]) >= minimum:
                return
        except (OSError, ValueError, KeyError):
            pass
        time.sleep(0.005)
    process.kill()
    pytest.fail("hang guard: no chunk was recorded")


def _descendants(pid: int) -> list:
    try:
        import psutil
    except ImportError:       # psutil is optional; the orphan check is then skipped
        return []
    return psutil.Process(pid).children(recursive=True)


def _assert_gone(processes: list) -> None:
    deadline = time.monotonic() + HANG_GUARD
    while time.monotonic() < deadline:
        if not [p for p in processes if p.is_running() and p.status() != "zombie"]:
            return
        time.sleep(0.1)
    pytest.fail(f"worker processes outlived their killed parent: {processes}")


@pytest.fixture
def computed(monkeypatch) -> list[int]:
    """Indices of the chunks computed in this process (the --jobs 1 path)."""
    indices: list[int] = []
    real = runner.run_chunk

    def counting(*args):
        indices.append(args[2])
        return real(*args)

    monkeypatch.setattr(runner, "run_chunk", counting)
    return indices


# --- the reference run is right -------------------------------------------------------

def test_reference_rows_match_the_analytic_persistence_condition(reference):
    samples = pd.read_parquet(reference / "samples.parquet")
    outcomes = pd.read_parquet(reference / "outcomes.parquet")
    assert len(samples) == N_SETS and (samples["status"] == "ok").all()
    assert (samples["sample_id"].to_numpy() == np.arange(N_SETS)).all()
    # analytic: "predator persists" iff b K > m (module docstring)
    expected = (samples["b"] * samples["K"] > samples["m"]).to_numpy()
    np.testing.assert_array_equal(outcomes["predator persists"].to_numpy(bool), expected)
    summary = json.loads(_summary_bytes(reference))
    independent = samples["independent"].to_numpy()
    assert summary["claims"]["predator persists"]["successes"] == int(expected[independent].sum())
    assert sorted(_manifest(reference)["chunks"], key=int) == [str(i) for i in range(N_CHUNKS)]


# --- same results whatever runs the chunks ----------------------------------------------

@pytest.mark.slow
def test_two_local_processes_give_identical_results(study_path, reference, tmp_path):
    run_study(poise.load_study(study_path), tmp_path / "run", jobs=2, report=False)
    assert _summary_bytes(tmp_path / "run") == _summary_bytes(reference)
    _assert_same_tables(tmp_path / "run", reference)


def test_automatic_jobs_start_no_workers_for_a_small_run(study_path, reference, tmp_path, monkeypatch):
    # jobs = 0 (all cores): the first chunk is timed here; this run is far too small
    # for worker start-up to pay off, so no pool may be created.
    class NoPool:
        def __init__(self, workers):
            raise AssertionError("a worker pool was started for a small automatic run")

    monkeypatch.setattr(runner, "_Processes", NoPool)
    monkeypatch.setattr(runner.os, "cpu_count", lambda: 2)
    run_study(poise.load_study(study_path), tmp_path / "run", jobs=0, report=False)
    assert _summary_bytes(tmp_path / "run") == _summary_bytes(reference)
    # ...while a long run is worth it: 40 chunks of 1 s on 2 workers (arithmetic)
    assert runner.worth_processes(1.0, 40, 2)
    assert not runner.worth_processes(0.05, 19, 2)


@pytest.mark.slow
def test_a_dask_cluster_gives_identical_results(study_path, reference, tmp_path):
    distributed = pytest.importorskip("distributed")
    import logging

    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", dashboard_address=None,
                                  silence_logs=logging.ERROR) as cluster:
        run_study(poise.load_study(study_path), tmp_path / "run", scheduler=cluster.scheduler_address,
                  report=False)
        with distributed.Client(cluster.scheduler_address) as client:
            # The chunks really ran on the cluster: a worker that ran one holds the
            # compiled study in its per-process cache.
            cached = client.run(lambda: len(__import__("poise.engine.worker", fromlist=["_CACHE"])._CACHE))
    assert len(cached) == 2 and sum(cached.values()) >= 1
    assert _summary_bytes(tmp_path / "run") == _summary_bytes(reference)
    _assert_same_tables(tmp_path / "run", reference)


# --- never lose work ------------------------------------------------------------------------

@pytest.mark.slow
def test_sigkill_then_resume_matches_and_recomputes_no_finished_chunk(study_path, reference, tmp_path, computed):
    out = tmp_path / "run"
    process = _start_cli("run", str(study_path), "--out", str(out), "--jobs", "2", "--quiet")
    _wait_for_chunks(out, process, minimum=2)
    workers = _descendants(process.pid)
    os.kill(process.pid, signal.SIGKILL)
    process.wait(timeout=HANG_GUARD)
    assert process.returncode == -signal.SIGKILL
    _assert_gone(workers)     # no orphaned worker processes keep running

    finished = _manifest(out)["chunks"]        # read after death: exactly what was saved
    assert 0 < len(finished) < N_CHUNKS, "the run was not interrupted part-way"
    assert all(part_is_valid(out, record) for record in finished.values())
    before = _part_stats(out, finished)

    status, _, err = run_cli("run", str(study_path), "--out", str(out), "--resume", "--jobs", "1", "--quiet")
    assert status == 0, err
    assert sorted(computed) == sorted(set(range(N_CHUNKS)) - {int(k) for k in finished})
    assert _part_stats(out, finished) == before    # finished parts untouched
    assert _summary_bytes(out) == _summary_bytes(reference)
    _assert_same_tables(out, reference)


def test_damaged_parts_are_detected_and_recomputed(reference, tmp_path, computed, study_path):
    out = tmp_path / "run"
    shutil.copytree(reference, out)
    chunks = _manifest(out)["chunks"]
    truncated = out / chunks["3"]["equilibria"]["file"]
    truncated.write_bytes(truncated.read_bytes()[: truncated.stat().st_size // 2])
    flipped = out / chunks["17"]["sets"]["file"]
    data = bytearray(flipped.read_bytes())
    middle = len(data) // 2
    data[middle:middle + 4] = bytes(b ^ 0xFF for b in data[middle:middle + 4])
    flipped.write_bytes(bytes(data))
    intact = {k: v for k, v in chunks.items() if k not in ("3", "17")}
    before = _part_stats(out, intact)

    status, _, err = run_cli("run", str(study_path), "--out", str(out), "--resume", "--jobs", "1", "--quiet")
    assert status == 0, err
    assert sorted(computed) == [3, 17]
    assert _part_stats(out, intact) == before
    after = _manifest(out)["chunks"]
    assert part_is_valid(out, after["3"]) and part_is_valid(out, after["17"])
    assert _summary_bytes(out) == _summary_bytes(reference)
    _assert_same_tables(out, reference)


def test_a_changed_study_is_refused_without_traceback(reference, tmp_path):
    out = tmp_path / "run"
    shutil.copytree(reference, out)
    changed = write_study(tmp_path, STUDY.replace("low = 1, high = 3", "low = 1, high = 4"))
    manifest_before = (out / "manifest.json").read_bytes()

    process = _start_cli("run", str(changed), "--out", str(out), "--resume", "--quiet")
    stdout, stderr = process.communicate(timeout=HANG_GUARD)
    assert process.returncode == 2
    assert "different study" in stderr and "study_sha256" in stderr
    assert "Traceback" not in stdout + stderr
    assert (out / "manifest.json").read_bytes() == manifest_before   # nothing mixed in

    # An unfinished run is protected from a plain rerun of another study as well.
    manifest = _manifest(out)
    manifest["complete"] = False
    (out / "manifest.json").write_text(json.dumps(manifest))
    status, _, err = run_cli("run", str(changed), "--out", str(out), "--quiet")
    assert status == 2 and "unfinished run of a different study" in err


@pytest.mark.slow
def test_ctrl_c_stops_cleanly_and_says_how_to_resume(study_path, reference, tmp_path):
    out = tmp_path / "run"
    # Its own process group, signalled as a whole: what Ctrl-C in a terminal does,
    # so the worker processes receive SIGINT too.
    process = _start_cli("run", str(study_path), "--out", str(out), "--jobs", "2", new_group=True)
    _wait_for_chunks(out, process, minimum=2)
    os.killpg(process.pid, signal.SIGINT)
    stdout, stderr = process.communicate(timeout=HANG_GUARD)
    assert process.returncode == 130
    assert "--resume" in stderr and str(out) in stderr
    assert "Traceback" not in stdout + stderr
    manifest = _manifest(out)
    assert not manifest["complete"]
    assert all(part_is_valid(out, record) for record in manifest["chunks"].values())

    run_study(poise.load_study(study_path), out, jobs=1, resume=True, report=False)
    assert _summary_bytes(out) == _summary_bytes(reference)


# --- retries and failed chunks ------------------------------------------------------------

BAD_SET = 3 * CHUNK + 5     # a set of chunk 3


def test_a_raising_chunk_is_retried_once_then_recorded_as_failed(study_path, reference, tmp_path, monkeypatch):
    calls: list[int] = []
    real = worker.analyse_sets

    def faulty(study, model, sample_ids, params, solver_method="newton"):
        if BAD_SET in sample_ids:
            calls.append(int(sample_ids[0]))
            raise FloatingPointError("synthetic failure in the model")
        return real(study, model, sample_ids, params, solver_method=solver_method)

    monkeypatch.setattr(worker, "analyse_sets", faulty)
    result = run_study(poise.load_study(study_path), tmp_path / "run", jobs=1, report=False)

    assert calls == [3 * CHUNK, 3 * CHUNK]               # the first try and one retry
    _assert_chunk_failed(result, reference, chunk=3, reason="synthetic failure in the model")


@pytest.mark.slow
def test_a_chunk_that_kills_its_worker_is_retried_once_then_failed(study_path, reference, tmp_path, monkeypatch):
    def deadly(*args):
        # Defined inside the test, so it is sent to the workers by value.
        import os as _os

        from poise.engine.worker import run_chunk as real_run_chunk
        if args[2] == 5:
            _os._exit(3)
        return real_run_chunk(*args)

    monkeypatch.setattr(runner, "run_chunk", deadly)
    result = run_study(poise.load_study(study_path), tmp_path / "run", jobs=2, report=False)
    _assert_chunk_failed(result, reference, chunk=5, reason="worker process died")


def _assert_chunk_failed(result, reference: Path, chunk: int, reason: str) -> None:
    rows = slice(chunk * CHUNK, (chunk + 1) * CHUNK)
    samples = result.samples
    bad = samples.iloc[rows]
    assert (bad["status"] == "failed").all()
    assert bad["reason"].str.contains(reason).all()
    others = samples.drop(index=samples.index[rows])
    assert (others["status"] == "ok").all()

    summary = result.summary
    assert summary["samples"]["failed"] == CHUNK
    assert summary["samples"]["analysed"] == N_SETS - CHUNK
    assert summary["samples"]["independent"] == int((others["independent"]).sum())
    outcomes = result.outcomes
    assert outcomes["n_steady"].iloc[rows].isna().all()
    # every other set is exactly as in the clean run
    clean = pd.read_parquet(reference / "outcomes.parquet").drop(index=range(rows.start, rows.stop))
    pd.testing.assert_frame_equal(outcomes.drop(index=range(rows.start, rows.stop)), clean)
    assert not result.equilibria["sample_id"].between(rows.start, rows.stop - 1).any()
