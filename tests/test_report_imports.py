"""Deferred imports in poise.report and poise.analysis (issue 18, item 6): reading a run
or printing its main table must not load the heavy libraries that only drawing,
typesetting or Sobol indices need. Checked on the modules a fresh interpreter has
loaded, not on time (timings belong in benchmarks/)."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

HEAVY = ["matplotlib", "sympy", "SALib", "scipy.stats"]


def _loaded_after(code: str) -> dict[str, bool]:
    probe = code + f"\nimport json, sys\nprint(json.dumps({{m: m in sys.modules for m in {HEAVY!r}}}))"
    done = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout.strip().splitlines()[-1])


@pytest.mark.parametrize("code", [
    "from poise.report import main_table_text, write_report, load_run",
    "import poise.analysis.intervals, poise.analysis.summary, poise.analysis.sobol",
    "from poise.report.content import claims_table",
])
def test_no_heavy_import_until_used(code):
    loaded = _loaded_after(code)
    assert not any(loaded.values()), loaded


def test_main_table_of_a_run_needs_none_of_them(tmp_path):
    from test_report import build_run
    root = build_run(tmp_path / "run")
    loaded = _loaded_after(f"from poise.report import main_table_text\n"
                           f"main_table_text({json.dumps(str(root))})")
    assert not any(loaded.values()), loaded
