"""The run folder, end to end through the installed `poise` console script: a folder
of the user's is never written into, a run replaces only its own files, two runs
never share a folder, Ctrl-C prints a resume command that works as printed, and
temporaries are never written through a planted symlink.

One small study serves these tests (the predator-prey model of test_engine.py,
whose analytic persistence condition is checked there); what is checked here is
which files exist, byte for byte, not the numbers.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

import poise
from poise.api import run_study
from poise.engine.rundir import LOCK, RunLock, recorded_files, remove_recorded
from poise.engine.storage import part_is_valid

from helpers import run_cli, write_study
from test_engine import STUDY as ENGINE_STUDY

HANG_GUARD = 180   # seconds; a guard against hangs, not a timing check
BIN = Path(sys.executable).parent
POISE = shutil.which("poise", path=str(BIN)) or shutil.which("poise")

# the predator-prey study of test_engine.py, smaller, with a second claim and Newton
STUDY = (ENGINE_STUDY.replace("size = 256", "size = 64")
         .replace("[sampling]", '[[claims]]\nname = "prey alone"\nholds = "any(stable and y == 0)"\n\n[sampling]')
         .replace("[run]", '[solver]\nmethod = "newton"\n\n[run]'))
# another study: one claim, no Sobol indices (so no Sobol table or figures)
OTHER = (STUDY.replace('[[claims]]\nname = "prey alone"\nholds = "any(stable and y == 0)"\n\n', "")
         .replace('method = "sobol"\nresamples = 100', 'method = "none"'))


def _env() -> dict:
    return {**os.environ, "PATH": os.pathsep.join([str(BIN), os.environ.get("PATH", "")])}


def _poise(*args, **kwargs) -> subprocess.CompletedProcess:
    assert POISE, "the poise console script is not installed"
    return subprocess.run([POISE, *map(str, args)], capture_output=True, text=True,
                          timeout=HANG_GUARD, env=_env(), **kwargs)


def _snapshot(folder: Path, lock: bool = True) -> dict[str, bytes]:
    """Every file below `folder` (hidden ones too) with its bytes; `lock=False` leaves
    out the lock file (it holds the id of the last process that took the lock)."""
    return {p.relative_to(folder).as_posix(): p.read_bytes()
            for p in sorted(folder.rglob("*")) if p.is_file() and (lock or p.name != LOCK)}


def _one_clear_line(result: subprocess.CompletedProcess) -> str:
    assert "Traceback" not in result.stdout + result.stderr
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1, result.stderr
    return lines[0]


@pytest.fixture(scope="module")
def studies(tmp_path_factory) -> tuple[Path, Path]:
    folder = tmp_path_factory.mktemp("studies")
    return write_study(folder, STUDY, "prey.toml"), write_study(folder, OTHER, "other.toml")


# --- 1. a folder of the user's is refused -----------------------------------------------

def _users_folder(folder: Path) -> None:
    for name, text in {"study.toml": "my own study", "report.md": "# my paper",
                       "summary.json": "{\"mine\": 1}", "tables/claims.csv": "a,b\n",
                       "figures/claims.png": "not a png", "notes.txt": "keep me",
                       "parts/keep.bin": "data"}.items():
        (folder / name).parent.mkdir(parents=True, exist_ok=True)
        (folder / name).write_text(text)


@pytest.mark.parametrize("extra", [[], ["--overwrite"], ["--resume"]])
def test_a_folder_of_the_users_is_refused_and_left_as_it_was(studies, tmp_path, extra):
    folder = tmp_path / "paper"
    _users_folder(folder)
    (folder / "manifest.json").write_text(json.dumps({"name": "another program", "version": 3}))
    before = _snapshot(folder)
    result = _poise("run", studies[0], "--out", folder, "--quiet", *extra)
    assert result.returncode == 2
    line = _one_clear_line(result)
    assert str(folder) in line and "--out" in line
    assert _snapshot(folder) == before      # nothing written, nothing deleted, no lock file


@pytest.mark.slow
def test_replacing_a_run_needs_overwrite_and_removes_only_its_own_files(studies, tmp_path):
    out = tmp_path / "run"
    out.mkdir()                         # an empty folder is taken
    first = _poise("run", studies[0], "--out", out, "--quiet", "--jobs", "1")
    assert first.returncode == 0, first.stderr
    old = json.loads((out / "manifest.json").read_text())
    mine = {"notes.txt": "keep me", "tables/mine.csv": "1,2\n", "figures/mine.png": "png",
            "parts/mine.bin": "data"}
    for name, text in mine.items():
        (out / name).write_text(text)

    before = _snapshot(out, lock=False)
    refused = _poise("run", studies[1], "--out", out, "--quiet", "--jobs", "1")
    assert refused.returncode == 2
    line = _one_clear_line(refused)
    assert "different study" in line and "--overwrite" in line
    assert _snapshot(out, lock=False) == before

    replaced = _poise("run", studies[1], "--out", out, "--quiet", "--jobs", "1", "--overwrite")
    assert replaced.returncode == 0, replaced.stderr
    new = json.loads((out / "manifest.json").read_text())
    assert new["study_sha256"] != old["study_sha256"] and new["complete"]
    for name, text in mine.items():                       # the user's files are untouched
        assert (out / name).read_text() == text
    gone = set(recorded_files(old)) - set(recorded_files(new))
    assert any(name.startswith("figures/sobol") for name in gone), gone   # the test means something
    for name in gone:                                     # the old run's own files are gone
        assert not (out / name).exists(), name
    assert set(_snapshot(out)) <= set(recorded_files(new)) | set(mine) | {"manifest.json", LOCK}


def test_recorded_files_never_lead_outside_the_folder(tmp_path):
    out = tmp_path / "run"
    (out / "tables").mkdir(parents=True)
    outside = tmp_path / "precious.txt"
    outside.write_text("precious")
    (out / "tables" / "claims.csv").write_text("old")
    (out / "linked").symlink_to(tmp_path, target_is_directory=True)
    manifest = {"tool": {"name": "poise"}, "complete": True,
                "files": ["tables/claims.csv", "../precious.txt", str(outside), "linked/precious.txt"],
                "chunks": {"0": {"sets": {"file": "../precious.txt"}}}}
    remove_recorded(out, manifest)
    assert outside.read_text() == "precious"
    assert not (out / "tables").exists()                  # emptied, so removed
    assert json.loads((out / "manifest.json").read_text())["complete"] is False


# --- 2. one run at a time ----------------------------------------------------------------

def _wait_for_lock(out: Path, pid: int, process: subprocess.Popen) -> None:
    deadline = time.monotonic() + HANG_GUARD
    while time.monotonic() < deadline:
        if process.poll() is not None:
            pytest.fail(f"the first run ended before the second started:\n{process.communicate()[1]}")
        try:
            if (out / LOCK).read_text().strip() == str(pid):
                return
        except OSError:
            pass
        time.sleep(0.01)
    pytest.fail("hang guard: the first run never took the lock")


@pytest.mark.slow
def test_two_runs_into_one_folder_the_second_is_refused_naming_the_first(studies, tmp_path):
    out = tmp_path / "run"
    first = subprocess.Popen([POISE, "run", str(studies[0]), "--out", str(out), "--jobs", "1", "--quiet"],
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=_env())
    try:
        _wait_for_lock(out, first.pid, first)
        os.kill(first.pid, signal.SIGSTOP)     # holds the lock while the second one tries
        try:
            second = _poise("run", studies[0], "--out", out, "--seed", "9", "--quiet", "--jobs", "1")
            report = _poise("report", out)
        finally:
            os.kill(first.pid, signal.SIGCONT)
        _, err = first.communicate(timeout=HANG_GUARD)
    finally:
        first.kill()
    assert second.returncode == 2 and report.returncode == 2
    assert f"process id {first.pid}" in _one_clear_line(second)
    assert first.returncode == 0, err

    # the survivor holds one run only: every chunk as an undisturbed run computes it
    reference = run_study(poise.load_study(studies[0]), tmp_path / "reference", jobs=1, report=False)
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["seed"] == 3 and manifest["chunks"] == reference.manifest["chunks"]
    assert all(part_is_valid(out, record) for record in manifest["chunks"].values())
    assert (out / "summary.json").read_bytes() == (tmp_path / "reference" / "summary.json").read_bytes()


@pytest.mark.slow
def test_a_locked_folder_is_refused_for_run_and_report(studies, tmp_path):
    out = tmp_path / "run"
    run_study(poise.load_study(studies[1]), out, jobs=1, report=False)
    before = _snapshot(out, lock=False)
    with RunLock(out):   # this test process holds the lock, as a live run would
        for args in (("run", studies[1], "--out", out, "--quiet"), ("report", out)):
            result = _poise(*args)
            assert result.returncode == 2
            assert f"process id {os.getpid()}" in _one_clear_line(result)
    assert _snapshot(out, lock=False) == before
    assert run_cli("report", str(out))[0] == 0             # free again once released


# --- Ctrl-C: the printed command resumes the run -------------------------------------------

@pytest.mark.slow
def test_the_resume_command_printed_after_ctrl_c_works_as_printed(studies, tmp_path):
    out = tmp_path / "it's a run"          # a space and a quote: the command must quote them
    args = ["run", str(studies[0]), "--out", str(out), "--size", "256", "--seed", "4", "--jobs", "2"]
    process = subprocess.Popen([POISE, *args], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                               text=True, env=_env(), start_new_session=True)
    deadline = time.monotonic() + HANG_GUARD
    while time.monotonic() < deadline and process.poll() is None:
        try:
            if len(json.loads((out / "manifest.json").read_text())["chunks"]) >= 2:
                break
        except (OSError, ValueError, KeyError):
            pass
        time.sleep(0.005)
    os.killpg(process.pid, signal.SIGINT)   # what Ctrl-C does: the whole process group
    _, err = process.communicate(timeout=HANG_GUARD)
    assert process.returncode == 130, err
    assert not json.loads((out / "manifest.json").read_text())["complete"]
    command = err.split("Continue with:")[1].strip().splitlines()[0]
    for option in ("--size 256", "--seed 4", "--jobs 2", "--resume"):
        assert option in command, command

    resumed = subprocess.run(command, shell=True, executable="/bin/sh", capture_output=True,
                             text=True, timeout=HANG_GUARD, env=_env())
    assert resumed.returncode == 0, resumed.stderr
    reference = tmp_path / "reference"
    run_study(poise.load_study(studies[0]), reference, size=256, seed=4, jobs=1, report=False)
    assert (out / "summary.json").read_bytes() == (reference / "summary.json").read_bytes()


# --- 3. temporaries: exclusive, never through a symlink, cleared after a kill ------------------

def test_a_symlink_planted_at_a_table_temporary_is_not_written_through(studies, tmp_path):
    # Before, samples.parquet was written through ".samples.parquet.<pid>.tmp": a name
    # anyone could plant a symlink at.
    out = tmp_path / "run"
    study = poise.load_study(studies[1])
    run_study(study, out, jobs=1, report=False)
    outside = tmp_path / "outside.txt"
    outside.write_text("do not touch")
    for name in ("samples", "outcomes", "equilibria"):
        (out / f".{name}.parquet.{os.getpid()}.tmp").symlink_to(outside)
    run_study(study, out, jobs=1, report=False)    # the same run again: tables rewritten
    assert outside.read_text() == "do not touch"
    assert not (out / "samples.parquet").is_symlink()


def test_a_symlink_planted_at_a_report_temporary_is_not_written_through(studies, tmp_path):
    out = tmp_path / "run"
    run_study(poise.load_study(studies[1]), out, jobs=1, report=False)
    outside = tmp_path / "outside.txt"
    outside.write_text("do not touch")
    (out / "report.md.tmp").symlink_to(outside)
    assert run_cli("report", str(out))[0] == 0
    assert outside.read_text() == "do not touch"


def test_stale_temporaries_of_a_killed_run_are_removed_and_nothing_else(studies, tmp_path):
    out = tmp_path / "run"
    study = poise.load_study(studies[1])
    run_study(study, out, jobs=1, report=False)
    stale = [out / ".summary.json.0123456789abcdef.poise-tmp",
             out / "parts" / ".chunk-000000.sets.parquet.fedcba9876543210.poise-tmp",
             out / "tables" / ".claims.csv.00000000deadbeef.poise-tmp"]
    keep = [out / "notes.tmp", out / ".summary.json.tmp", out / "tables" / "draft.poise-tmp"]
    for path in stale + keep:
        path.parent.mkdir(exist_ok=True)
        path.write_text("half")
    run_study(study, out, jobs=1, report=False)
    assert not any(path.exists() for path in stale)
    assert all(path.read_text() == "half" for path in keep)


def test_run_files_get_the_mode_the_umask_gives(studies, tmp_path):
    out = tmp_path / "run"
    old = os.umask(0o022)
    try:
        run_study(poise.load_study(studies[1]), out, jobs=1, report=False)
    finally:
        os.umask(old)
    for name in ("summary.json", "manifest.json", "study.toml", "samples.parquet"):
        assert (out / name).stat().st_mode & 0o777 == 0o644, name   # 0o666 & ~0o022


# --- 8. environment failures: one line, nothing left as if complete ----------------------------

@pytest.mark.slow
def test_a_file_size_limit_mid_run_gives_one_line_and_an_unfinished_run(studies, tmp_path):
    # RLIMIT_FSIZE makes writes past 20 kB fail (EFBIG), as a full disk fails them
    # (ENOSPC); Python ignores the SIGXFSZ signal, so the write raises OSError.
    import resource

    out = tmp_path / "run"

    def limit():
        resource.setrlimit(resource.RLIMIT_FSIZE, (20_000, 20_000))

    result = subprocess.run([POISE, "run", str(studies[0]), "--out", str(out), "--quiet", "--jobs", "1"],
                            capture_output=True, text=True, timeout=HANG_GUARD, env=_env(), preexec_fn=limit)
    assert result.returncode == 1
    line = _one_clear_line(result)
    assert "File too large" in line and str(out) in line
    manifest = json.loads((out / "manifest.json").read_text())
    assert not manifest["complete"] and not (out / "summary.json").exists()
    assert not list(out.rglob("*.poise-tmp"))              # no half-written temporaries left
    again = _poise("run", studies[0], "--out", out, "--quiet", "--jobs", "1")
    assert again.returncode == 0, again.stderr               # and the same command finishes it


def test_a_full_disk_gives_one_line(studies, tmp_path, monkeypatch):
    import errno


    import poise.engine.storage as storage

    def full(descriptor):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(storage.os, "fsync", full)
    status, out, err = run_cli("run", str(studies[1]), "--out", str(tmp_path / "run"), "--quiet", "--jobs", "1")
    assert status == 1 and "Traceback" not in err and len(err.strip().splitlines()) == 1
    assert "No space left on device" in err and "manifest.json" in err
    assert not list((tmp_path / "run").rglob("*.poise-tmp"))


def test_an_out_folder_that_cannot_be_created_gives_one_line(studies, tmp_path, monkeypatch):

    def refuse(self, *args, **kwargs):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(Path, "mkdir", refuse)
    status, _, err = run_cli("run", str(studies[1]), "--out", str(tmp_path / "ro" / "run"), "--quiet")
    assert status == 2 and "Traceback" not in err and len(err.strip().splitlines()) == 1
    assert "cannot create the run folder" in err and "Permission denied" in err


@pytest.mark.skipif(not hasattr(os, "geteuid") or os.geteuid() == 0,
                    reason="the superuser writes into read-only folders")
def test_a_read_only_out_folder_gives_one_line(studies, tmp_path):
    out = tmp_path / "run"
    assert _poise("run", studies[1], "--out", out, "--quiet", "--jobs", "1").returncode == 0
    os.chmod(out, 0o555)
    try:
        result = _poise("run", studies[1], "--out", out, "--quiet", "--jobs", "1")
    finally:
        os.chmod(out, 0o755)
    assert result.returncode in (1, 2)
    _one_clear_line(result)


def test_the_largest_size_is_refused_before_any_work_when_memory_is_short(studies, tmp_path):
    # 2^24 base rows with 3 parameters: 84 million sets, and SALib's bootstrap over
    # 2^24 x 100 resamples x 3 parameters; far beyond this machine's memory.
    out = tmp_path / "run"
    result = _poise("run", studies[0], "--out", out, "--size", str(2**24), "--quiet")
    assert result.returncode == 2
    line = _one_clear_line(result)
    assert "memory" in line and "GB" in line
    assert not out.exists()


def test_out_of_memory_gives_one_line(studies, tmp_path, monkeypatch):
    import poise.sampling


    def exhausted(*args, **kwargs):
        raise MemoryError

    monkeypatch.setattr(poise.sampling, "make_design", exhausted)
    status, _, err = run_cli("run", str(studies[1]), "--out", str(tmp_path / "run"), "--quiet")
    assert status == 1 and "Traceback" not in err
    assert re.fullmatch(r"poise: out of memory[^\n]*\n", err)


def test_a_broken_summary_under_report_gives_one_line(studies, tmp_path):
    out = tmp_path / "run"
    run_study(poise.load_study(studies[1]), out, jobs=1, report=False)
    for damage in ('{"claims": ', "[1, 2]"):
        (out / "summary.json").write_text(damage)
        status, _, err = run_cli("report", str(out))
        assert status == 2 and "Traceback" not in err and len(err.strip().splitlines()) == 1
        assert "summary.json" in err and "run the study again" in err


def test_write_atomic_never_writes_through_a_file_planted_at_its_temporary_name(tmp_path, monkeypatch):
    import poise.engine.storage as storage

    outside = tmp_path / "outside.txt"
    outside.write_text("do not touch")
    planted = tmp_path / ".summary.json.0000000000000001.poise-tmp"
    planted.symlink_to(outside)
    names = iter(["0000000000000001", "0000000000000002"])   # the first one is taken
    monkeypatch.setattr(storage.secrets, "token_hex", lambda n: next(names))
    storage.write_atomic(tmp_path / "summary.json", b"{}")
    assert outside.read_text() == "do not touch" and planted.is_symlink()
    assert (tmp_path / "summary.json").read_bytes() == b"{}"
    assert not (tmp_path / ".summary.json.0000000000000002.poise-tmp").exists()
