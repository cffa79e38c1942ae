"""Reports of a finished run: tables (Markdown, HTML, CSV, LaTeX), figures, the Methods
text with its references, and the self-contained HTML report, rebuilt from the run
directory without recomputing.

The submodules are imported on first use, so that ``from poise.report import
main_table_text`` does not load matplotlib or sympy.
"""

from __future__ import annotations

import importlib

__all__ = ["write_report", "main_table_text", "ks_regional", "load_run", "RunData"]

_HOME = {"write_report": "write", "main_table_text": "text", "ks_regional": "regional",
         "load_run": "load", "RunData": "load"}


def __getattr__(name: str):
    if name in _HOME:
        value = getattr(importlib.import_module(f"{__name__}.{_HOME[name]}"), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
