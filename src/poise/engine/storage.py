"""Files of a run directory that must survive a crash: atomic writes, the manifest,
checkpointed chunk parts and their verification.

Every file poise writes goes through `atomic_file` (or `write_atomic`): a temporary
file with a random name is created exclusively next to the target (never through a
symlink someone planted there), filled, fsynced and renamed over the target. A
killed run can leave such temporaries behind; `remove_stale_temporaries` clears them
(they are recognised by their name, so nothing else is touched).
"""

from __future__ import annotations

import contextlib
import hashlib
import io
import json
import os
import re
import secrets
from pathlib import Path
from typing import BinaryIO, Iterator

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

MANIFEST = "manifest.json"
PARTS = "parts"
# ".<target name>.<16 hex digits>.poise-tmp": what `atomic_file` creates, and the only
# names `remove_stale_temporaries` removes
_TEMPORARY = re.compile(r"\..+\.[0-9a-f]{16}\.poise-tmp")
# exclusive creation, never through a symlink (O_NOFOLLOW where the system has it)
_CREATE = (os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_NOFOLLOW", 0)
           | getattr(os, "O_CLOEXEC", 0) | getattr(os, "O_BINARY", 0))


@contextlib.contextmanager
def atomic_file(path: Path, sync_folder: bool = True) -> Iterator[BinaryIO]:
    """A binary stream whose content replaces `path` when the block ends without error.

    Readers see the old file or the new one, never a half-written one. The temporary
    file has a random name in the target's folder, is created exclusively (`O_EXCL`,
    `O_NOFOLLOW`: a file or symlink planted under that name is never written through)
    with the mode the umask gives (as for any other file the user creates), and is
    fsynced before the rename. On an error it is removed and the target is untouched.

    Parameters
    ----------
    path : the file to write.
    sync_folder : also make the rename durable across a power cut (an fsync of the
        folder); chunk parts skip it, as a part lost that way fails validation on
        resume and is simply recomputed.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    while True:
        temporary = path.parent / f".{path.name}.{secrets.token_hex(8)}.poise-tmp"
        try:
            descriptor = os.open(temporary, _CREATE, 0o666)
            break
        except FileExistsError:  # 64 random bits taken: draw again
            continue
    try:
        with os.fdopen(descriptor, "wb") as stream:
            yield stream
            stream.flush()
            os.fsync(stream.fileno())
        os.replace(temporary, path)
    except BaseException as exc:
        with contextlib.suppress(OSError):
            os.unlink(temporary)
        if isinstance(exc, OSError) and exc.filename is None:
            exc.filename = str(path)   # say which file could not be written
        raise
    if sync_folder:
        _sync_directory(path.parent)


def write_atomic(path: Path, data: bytes, sync_folder: bool = True) -> None:
    """Write `data` to `path` atomically (see `atomic_file`)."""
    with atomic_file(path, sync_folder) as stream:
        stream.write(data)


def is_temporary(name: str) -> bool:
    """Whether a file name is one of `atomic_file`'s temporaries."""
    return _TEMPORARY.fullmatch(name) is not None


def remove_stale_temporaries(folder: Path) -> list[Path]:
    """Remove the temporaries a killed run left in `folder` (not below it).

    Only names `atomic_file` creates are touched, and only files or symlinks (a
    symlink is removed itself, never what it points to). Call it only while holding
    the run folder's lock, so that no live writer's temporary is taken.

    Returns
    -------
    list of Path
        The files removed.
    """
    removed = []
    try:
        entries = list(os.scandir(folder))
    except (FileNotFoundError, NotADirectoryError):
        return removed
    for entry in entries:
        if is_temporary(entry.name) and not entry.is_dir(follow_symlinks=False):
            with contextlib.suppress(FileNotFoundError):
                os.unlink(entry.path)
                removed.append(Path(entry.path))
    return removed


def _sync_directory(folder: Path) -> None:
    """Make the rename itself durable (POSIX); a no-op where folders cannot be opened."""
    try:
        descriptor = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(descriptor)
    except OSError:
        pass
    finally:
        os.close(descriptor)


def sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def frame_bytes(frame: pd.DataFrame, schema: pa.Schema | None = None) -> bytes:
    """A DataFrame as parquet bytes (optionally cast to a fixed schema)."""
    table = pa.Table.from_pandas(frame, preserve_index=False)
    if schema is not None:
        table = table.cast(schema)
    buffer = io.BytesIO()
    pq.write_table(table, buffer)
    return buffer.getvalue()


def read_manifest(directory: Path) -> dict | None:
    """The run's manifest, or None when there is none (or it is unreadable)."""
    path = directory / MANIFEST
    if not path.is_file():
        return None
    try:
        manifest = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return manifest if isinstance(manifest, dict) else None


def is_poise_manifest(manifest: dict | None) -> bool:
    """Whether a manifest was written by poise (another program may use the name)."""
    tool = manifest.get("tool") if isinstance(manifest, dict) else None
    return isinstance(tool, dict) and tool.get("name") == "poise"


def write_manifest(directory: Path, manifest: dict) -> None:
    write_atomic(directory / MANIFEST, json.dumps(manifest, indent=2, sort_keys=True).encode())


def part_paths(index: int) -> tuple[str, str]:
    """Relative paths of a chunk's two part files (set outcomes, steady states)."""
    return (f"{PARTS}/chunk-{index:06d}.sets.parquet", f"{PARTS}/chunk-{index:06d}.equilibria.parquet")


def part_is_valid(directory: Path, record: dict) -> bool:
    """Whether a finished chunk's files exist, match their recorded hashes and parse."""
    try:
        for key in ("sets", "equilibria"):
            data = (directory / record[key]["file"]).read_bytes()
            if sha256(data) != record[key]["sha256"]:
                return False
            pq.read_metadata(io.BytesIO(data))
    except (OSError, KeyError, TypeError, pa.ArrowException):
        return False
    return True
