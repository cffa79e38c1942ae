"""Every bundled study's summary.json, pinned: a refactor may not change any number.

This is a regression guard, not a correctness check: the stored copies in
tests/data/pinned/ were written by the code of the day, whose numbers the other tests
check against outside references (closed forms, scipy, sympy, SALib). Only the tool's
version is left out. Each study runs at a reduced size so that the guard stays quick;
every stage (sampling, both finders, the completeness check, classification, the
statistics) still runs.

After a change that is *meant* to move numbers, write new copies with
``POISE_REPIN=1 python -m pytest tests/test_pinned_summaries.py`` and say why in the
commit message.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import pytest

from poise import load_study, run_study

ROOT = Path(__file__).resolve().parents[1]
PINNED = Path(__file__).resolve().parent / "data" / "pinned"
STUDIES = sorted(ROOT.glob("configs/*.toml")) + sorted(ROOT.glob("configs/*/study.toml"))
SIZE = 64  # base sample size N for every study (the study files' own sizes take minutes)


def _name(path: Path) -> str:
    relative = path.relative_to(ROOT / "configs")
    return str(relative.with_suffix("")).replace(os.sep, "__")


def _summary_without_version(run_dir: Path) -> dict:
    summary = json.loads((run_dir / "summary.json").read_text(encoding="utf-8"))
    summary.pop("tool")  # name and version of poise: changes with every release
    return summary


def test_every_bundled_study_is_pinned():
    # the glob must find the four bundled studies; a study added to configs/ needs a copy
    assert len(STUDIES) >= 4
    if os.environ.get("POISE_REPIN"):
        pytest.skip("writing new copies")
    assert sorted(p.stem for p in PINNED.glob("*.json")) == sorted(_name(p) for p in STUDIES)


@pytest.mark.parametrize("path", STUDIES, ids=_name)
def test_summary_json_is_unchanged(path, tmp_path):
    # regression pin, no outside reference: identical numbers to the stored copy
    run_study(load_study(path), tmp_path / "run", size=SIZE, jobs=1, report=False)
    summary = _summary_without_version(tmp_path / "run")
    stored = PINNED / f"{_name(path)}.json"
    if os.environ.get("POISE_REPIN"):
        stored.write_text(json.dumps(summary, indent=1, ensure_ascii=False) + "\n", encoding="utf-8")
    expected = json.loads(stored.read_text(encoding="utf-8"))
    # the parsed JSON is compared exactly: floats are read back bit for bit
    assert summary == expected
