"""The run folder: where poise may write, one run at a time, and what it removes.

- poise writes only into a folder it creates, an empty one, or one holding a poise
  manifest: a folder of the user's (papers, data, another program's output) is
  refused, so that no file there is overwritten or deleted;
- a run (and `poise report`) holds an exclusive lock on the folder from start to end,
  so that two runs never write into one folder at once;
- replacing an earlier run of its own, poise removes only the files that run
  recorded in its manifest, never anything else in the folder.
"""

from __future__ import annotations

import contextlib
import errno
import os
from pathlib import Path, PurePosixPath

from poise.engine.storage import (MANIFEST, PARTS, is_poise_manifest, is_temporary, read_manifest,
                                  remove_stale_temporaries, write_manifest)
from poise.errors import InputError

try:
    import fcntl
except ImportError:  # pragma: no cover - not POSIX: runs are not locked there
    fcntl = None

LOCK = ".poise-lock"
# Files every run writes, for manifests written before runs listed their files.
CORE_FILES = ("study.toml", "summary.json", "samples.parquet", "outcomes.parquet",
              "equilibria.parquet", "report.md", "report.html")
# Folders poise writes into (temporaries of a killed run can lie in each).
SUBFOLDERS = (PARTS, "tables", "figures")


def claim_folder(directory: Path) -> None:
    """Create the run folder, or check that poise may write into the existing one.

    Raises
    ------
    InputError
        If `directory` is a file, cannot be created, or is a folder that is neither
        empty nor a poise run (a manifest.json written by poise).
    """
    if not directory.exists():
        try:
            directory.mkdir(parents=True)
            return
        except FileExistsError:
            pass   # created a moment ago, e.g. by another run: check it as any other
        except OSError as exc:
            raise InputError(f"cannot create the run folder ({exc.strerror})", file=str(directory)) from None
    if not directory.is_dir():
        raise InputError("--out names a file, not a folder", file=str(directory))
    if not is_poise_folder(directory):
        raise InputError(
            "this folder is not a poise run (it holds files but no manifest.json written "
            "by poise); poise writes only into a new or empty folder or a run of its "
            "own, so that none of your files is replaced: choose another --out",
            file=str(directory))
    for name in SUBFOLDERS:
        if (directory / name).is_symlink():
            raise InputError(f"'{name}' in this run folder is a symbolic link; poise does not "
                             "write through links inside its run folders", file=str(directory))


def is_poise_folder(directory: Path) -> bool:
    """A folder holding a poise manifest, or nothing but poise's lock and temporaries (a
    run just starting, or stopped before its manifest was written) — or nothing at all."""
    if is_poise_manifest(read_manifest(directory)):
        return True
    try:
        return all(entry.name == LOCK or is_temporary(entry.name) for entry in os.scandir(directory))
    except OSError:
        return False


class RunLock:
    """An exclusive lock on a run folder, held until the block ends (or the process
    dies: the system releases it, so a killed run never leaves the folder locked).

    The lock file `.poise-lock` holds the owner's process id, for the message a second
    run gets. It stays in the folder: removing it would let two runs lock different
    files of the same name.
    """

    def __init__(self, directory: Path):
        self.directory = directory
        self.descriptor: int | None = None

    def __enter__(self) -> "RunLock":
        path = self.directory / LOCK
        flags = os.O_RDWR | os.O_CREAT | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_CLOEXEC", 0)
        try:
            descriptor = os.open(path, flags, 0o666)
        except OSError as exc:
            raise InputError(f"cannot open the run folder's lock file {LOCK} ({exc.strerror})",
                             file=str(self.directory)) from None
        if fcntl is not None:
            try:
                fcntl.flock(descriptor, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError as exc:
                holder = _read_holder(descriptor)
                os.close(descriptor)
                if exc.errno not in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
                    raise
                raise InputError(
                    f"another poise process ({holder}) is using this run folder; wait for it "
                    "to finish, or choose another --out", file=str(self.directory)) from None
        os.ftruncate(descriptor, 0)
        os.write(descriptor, f"{os.getpid()}\n".encode())
        self.descriptor = descriptor
        return self

    def __exit__(self, *exc) -> None:
        if self.descriptor is not None:
            os.close(self.descriptor)   # releases the lock
            self.descriptor = None


def _read_holder(descriptor: int) -> str:
    with contextlib.suppress(OSError, ValueError):
        text = os.pread(descriptor, 32, 0).decode("ascii").strip()
        if text.isdigit():
            return f"process id {int(text)}"
    return "process id unknown"


def remove_stale(directory: Path) -> list[Path]:
    """Remove the temporaries a killed run left in the run folder and its subfolders
    (call only while holding the lock)."""
    removed = remove_stale_temporaries(directory)
    for name in SUBFOLDERS:
        removed += remove_stale_temporaries(directory / name)
    return removed


def recorded_files(manifest: dict) -> list[str]:
    """The files a run recorded as its own, relative to its folder: everything listed
    under ``files`` and ``chunks``, and the core outputs."""
    names = set(CORE_FILES)
    listed = manifest.get("files")
    if isinstance(listed, list):
        names.update(name for name in listed if isinstance(name, str))
    chunks = manifest.get("chunks")
    for record in (chunks.values() if isinstance(chunks, dict) else ()):
        for kind in ("sets", "equilibria"):
            with contextlib.suppress(AttributeError, KeyError, TypeError):
                names.add(record[kind]["file"])
    return sorted(name for name in names if _inside(name))


def remove_recorded(directory: Path, manifest: dict) -> None:
    """Remove an earlier run's own files (see `recorded_files`) and nothing else;
    subfolders poise made are removed only if that leaves them empty.

    The old manifest is first marked unfinished, so that a run killed half-way
    through the removal is never taken for a finished one."""
    write_manifest(directory, {**manifest, "complete": False})
    for name in recorded_files(manifest):
        path = directory / name
        if _through_link(directory, name):
            continue
        if not path.is_dir() or path.is_symlink():
            with contextlib.suppress(FileNotFoundError):
                path.unlink()
    for name in SUBFOLDERS:
        with contextlib.suppress(OSError):
            (directory / name).rmdir()   # only when empty


def _inside(name: str) -> bool:
    """A plain relative path below the run folder (a manifest is user-editable text:
    nothing it lists may lead outside the folder or to its manifest and lock)."""
    path = PurePosixPath(name)
    return (bool(name) and "\\" not in name and not path.is_absolute()
            and ".." not in path.parts and name not in (MANIFEST, LOCK))


def _through_link(directory: Path, name: str) -> bool:
    """Whether a folder on the way from `directory` to `name` is a symbolic link."""
    folder = directory
    for part in PurePosixPath(name).parts[:-1]:
        folder = folder / part
        if folder.is_symlink():
            return True
    return False
