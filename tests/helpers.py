"""Small helpers shared by tests: write a study file, run the CLI in-process."""

from __future__ import annotations

import contextlib
import io
import textwrap
from pathlib import Path

from poise.cli import main


def write_study(folder: Path, text: str, name: str = "study.toml") -> Path:
    path = Path(folder) / name
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


def run_cli(*args: str) -> tuple[int, str, str]:
    """Run `poise ARGS` in this process; return (exit status, stdout, stderr)."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            status = main(list(args))
        except SystemExit as exc:  # argparse exits on bad arguments
            status = exc.code if isinstance(exc.code, int) else 1
    return status, out.getvalue(), err.getvalue()
