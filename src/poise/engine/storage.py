"""Files of a run directory that must survive a crash: atomic writes, the manifest,
checkpointed chunk parts and their verification."""

from __future__ import annotations

import hashlib
import io
import json
import os
import tempfile
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

MANIFEST = "manifest.json"
PARTS = "parts"


def write_atomic(path: Path, data: bytes, sync_folder: bool = True) -> None:
    """Write `data` to `path` so that readers see the old file or the new one, never a
    half-written one: temporary file in the same folder, flush, fsync, rename.

    `sync_folder` also makes the rename durable across a power cut (an fsync of the
    folder); chunk parts skip it, as a part lost that way fails validation on resume
    and is simply recomputed.
    """
    path.parent.mkdir(parents=True, exist_ok=True)
    handle, temporary = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(handle, "wb") as stream:
            stream.write(data)
            stream.flush()
            os.fsync(stream.fileno())
        os.replace(temporary, path)
    except BaseException:
        Path(temporary).unlink(missing_ok=True)
        raise
    if sync_folder:
        _sync_directory(path.parent)


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
    path = directory / MANIFEST
    if not path.exists():
        return None
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError):
        return None


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
