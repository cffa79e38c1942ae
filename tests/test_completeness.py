"""The completeness check of Newton runs: bounded, visible, and set by `[solver] check_sets`.

Contract tests (issue "Real models, part 2", item 3; no outside reference needed): the
numbers checked follow the rule stated in poise.analysis.completeness, the check is
deterministic, and the reference is never a method "auto" would refuse as too large.
"""

from __future__ import annotations

import json

import pytest

from conftest import TOGGLE_MODEL
from helpers import write_study
from poise import load_study, run_study

TOGGLE = TOGGLE_MODEL + """\
    [[claims]]
    name = "bistable"
    holds = "count(stable) >= 2"
    [sampling]
    size = 64
    design = "random"
    seed = 3
    [sensitivity]
    method = "none"
    [solver]
    method = "newton"
"""


def _completeness(tmp_path, extra: str, name: str) -> dict:
    study = load_study(write_study(tmp_path, TOGGLE + extra, f"{name}.toml"))
    result = run_study(study, tmp_path / name, jobs=1, report=False)
    return result.summary["solver"]["completeness"]


@pytest.mark.slow
def test_check_sets_fixes_the_number_and_zero_turns_it_off(tmp_path):
    fixed = _completeness(tmp_path, "    check_sets = 12\n", "fixed")
    assert fixed["checked"] == 12 and fixed["reference"] == "homotopy continuation"
    off = _completeness(tmp_path, "    check_sets = 0\n", "off")
    assert off["checked"] == 0 and "check_sets = 0" in off["note"]


def test_the_default_check_is_bounded_and_the_same_on_every_run(tmp_path):
    first = _completeness(tmp_path, "", "one")
    second = _completeness(tmp_path, "", "two")
    assert json.dumps(first, sort_keys=True) == json.dumps(second, sort_keys=True)
    assert 10 <= first["checked"] <= 64
    if first["checked"] < 64:
        assert "25%" in first["note"]


def test_a_negative_check_sets_is_refused(tmp_path):
    from poise.errors import InputError
    import pytest
    with pytest.raises(InputError, match="check_sets"):
        load_study(write_study(tmp_path, TOGGLE + "    check_sets = -3\n", "bad.toml"))
