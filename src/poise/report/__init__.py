"""Reports of a finished run: tables (Markdown, HTML, CSV, LaTeX), figures and the
self-contained HTML report, rebuilt from the run directory without recomputing."""

from .load import RunData, load_run
from .regional import ks_regional
from .text import main_table_text
from .write import write_report

__all__ = ["write_report", "main_table_text", "ks_regional", "load_run", "RunData"]
