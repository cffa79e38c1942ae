"""The `poise` command: every bundled study checks and inspects; bad input gets one
clear message and exit status 2."""

from __future__ import annotations

import json
import subprocess
import sys
import time
from pathlib import Path

import pytest

from conftest import GRAZING_STUDY
from helpers import run_cli, write_study

ROOT = Path(__file__).resolve().parents[1]
CONFIGS = sorted(ROOT.glob("configs/**/*.toml"))


def test_there_are_bundled_studies():
    names = {p.stem for p in CONFIGS} | {p.parent.name for p in CONFIGS}
    assert {"reef_grazing", "toggle_switch", "phospho_cycle", "sbml_enzyme"} <= names


@pytest.mark.parametrize("config", CONFIGS, ids=lambda p: p.parent.name if p.stem == "study" else p.stem)
def test_every_config_passes_check_and_inspect(config):
    status, out, err = run_cli("check", str(config))
    assert status == 0, err
    assert "ok: the study is valid" in out
    status, out, err = run_cli("check", str(config), "--json")
    assert status == 0, err
    model = json.loads(out)
    assert set(model) >= {"states", "ode", "parameters", "conserved"}
    status, out, err = run_cli("inspect", str(config), "--json")
    assert status == 0, err
    result = json.loads(out)
    assert result["equilibria"], "every bundled study has at least one steady state at its nominal point"
    for eq in result["equilibria"]:
        assert set(eq["state"]) == set(model["states"])
        assert eq["class"] and eq["stability"] in {"stable", "unstable", "undetermined"}
    status, out, err = run_cli("inspect", str(config))
    assert status == 0 and "steady state" in out


def test_sbml_study_check_json_has_initial_units_and_size():
    config = ROOT / "configs" / "sbml_enzyme" / "study.toml"
    status, out, err = run_cli("check", str(config), "--json")
    assert status == 0, err
    model = json.loads(out)
    assert set(model["initial"]) == set(model["states"])
    assert set(model["units"].values()) <= {"concentration", "amount"}
    assert all(size > 0 for size in model["size"].values())
    # The enzyme forms (free, bound, locked) are conserved: found from the stoichiometry.
    assert len(model["conserved"]) == 1


GOOD = GRAZING_STUDY

BAD_STUDIES = [
    # (replace this, with this, expected pieces of the message)
    ('G = "c*A*G - d*G"', 'G = "c*A*G - d*G"\nQ = "A"', ["[model.ode]", "'Q'", "not a state"]),
    ('G = "c*A*G - d*G"', '', ["[model.ode]", "'G'", "no equation"]),
    ('d = 0.2', '', ["[model.ode]", "'d'", "not declared"]),
    ('low = 2, high = 10', 'low = 10, high = 2', ["[parameters]", "K", "low"]),
    ('K = { dist = "uniform", low = 2, high = 10 }', 'K = { dist = "normal", mean = 5, sd = -1 }',
     ["[parameters]", "sd"]),
    ('dist = "uniform"', 'dist = "gaussian"', ["[parameters]", "K", "gaussian"]),
    ('A = "r*A*(1 - A/K) - c*A*G"', 'A = "__import__(\'os\').system(\'echo hacked\')"', ["[model.ode]", "'A'"]),
    ('[parameters]', '[model.let]\nu = "w + 1"\nw = "u*2"\n[parameters]', ["[model.let]", "cycle"]),
    ('[parameters]', '[sampling]\nsize = -3\n[parameters]', ["[sampling]", "size"]),
    ('[parameters]', '[sampling]\ndesign = "grid"\n[parameters]', ["[sampling]", "design"]),
    ('r = 1.0', 'r = 1.0\nbogus_key = [1, 2]', ["[parameters]", "bogus_key"]),
    ('[model]', 'colour = "red"\n[model]', ["colour", "unknown key"]),
]


@pytest.mark.parametrize("old,new,expected", BAD_STUDIES)
def test_bad_study_gets_one_message_and_exit_2(tmp_path, old, new, expected):
    text = GOOD.replace("    ", "")
    assert old in text
    path = write_study(tmp_path, text.replace(old, new))
    status, out, err = run_cli("check", str(path))
    assert status == 2
    assert out == ""
    assert "Traceback" not in err
    assert str(path) in err
    assert len(err.strip().splitlines()) == 1
    for piece in expected:
        assert piece in err, (piece, err)


def test_claim_naming_an_unknown_symbol_is_refused(tmp_path):
    path = write_study(tmp_path, GOOD + '\n[[claims]]\nname = "x"\nholds = "any(stable and Z > 1)"\n')
    status, _, err = run_cli("check", str(path))
    assert status == 2 and "[claims[1]]" in err and "holds" in err and "Z" in err


def test_unused_parameter_is_a_warning_not_an_error(tmp_path):
    path = write_study(tmp_path, GOOD + "spare = 3.0\n")
    status, out, err = run_cli("check", str(path))
    assert status == 0
    assert "warning" in err and "spare" in err


def test_missing_and_invalid_files(tmp_path):
    status, _, err = run_cli("check", str(tmp_path / "nope.toml"))
    assert status == 2 and "no such study file" in err
    bad = tmp_path / "bad.toml"
    bad.write_text("[model\nstates = ")
    status, _, err = run_cli("check", str(bad))
    assert status == 2 and "not valid TOML" in err


def test_bad_arguments_exit_2(tmp_path):
    path = write_study(tmp_path, GOOD)
    assert run_cli("inspect", str(path), "--at", "nosuch=1")[0] == 2
    assert run_cli("inspect", str(path), "--at", "K=abc")[0] == 2
    assert run_cli("inspect", str(path), "--at", "K")[0] == 2
    assert run_cli("run", str(path), "--size", "-5")[0] == 2
    assert run_cli("frobnicate")[0] == 2
    assert run_cli("report", str(tmp_path / "not-a-run"))[0] == 2


HOSTILE = [
    "__import__('os').system('touch {marker}')",
    "().__class__.__bases__[0].__subclasses__()",
    "9**9**9**9",
    "(" * 5000 + "1" + ")" * 5000,
    "+".join(["A"] * 100_000),
    "exec('open(\"{marker}\", \"w\")')",
    "lambda: 1",
    "A.real",
    "open('{marker}', 'w')",
    "[A for A in range(10**9)]",
]


@pytest.mark.parametrize("expression", HOSTILE, ids=range(len(HOSTILE)))
def test_hostile_expressions_through_the_command(tmp_path, expression):
    # Runs the real console entry point in a subprocess: exit 2, one message, quickly,
    # and nothing ran (the marker file never appears).
    marker = tmp_path / "marker"
    text = GOOD.replace('A = "r*A*(1 - A/K) - c*A*G"', "A = " + json.dumps(expression.format(marker=marker)))
    path = write_study(tmp_path, text)
    started = time.monotonic()
    proc = subprocess.run([sys.executable, "-m", "poise.cli", "check", str(path)],
                          capture_output=True, text=True, timeout=60)
    assert time.monotonic() - started < 30   # hang guard only (includes interpreter start-up)
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stderr
    assert "[model.ode]" in proc.stderr
    assert not marker.exists()


def test_fixed_values_that_make_the_model_complex_or_undefined_are_refused(tmp_path):
    # log(-2) = log 2 + iπ and K = 0 in r x (1 - x/K) are not real rates (elementary algebra).
    complex_model = write_study(tmp_path, """
        [model]
        states = ["x"]
        [model.ode]
        x = "r - x*log(c)"
        [parameters]
        r = { dist = "uniform", low = 0.5, high = 1.5 }
        c = -2
    """, "complex.toml")
    status, _, err = run_cli("check", str(complex_model))
    assert status == 2 and "[model.ode]" in err and "'x'" in err and "c" in err
    zero_capacity = write_study(tmp_path, GOOD.replace('K = { dist = "uniform", low = 2, high = 10 }', "K = 0"),
                                "zero.toml")
    status, _, err = run_cli("check", str(zero_capacity))
    assert status == 2 and "Traceback" not in err and "[model.ode]" in err
    status, _, err = run_cli("inspect", str(write_study(tmp_path, GOOD, "good.toml")), "--at", "K=0")
    assert status == 2 and "Traceback" not in err


@pytest.mark.parametrize("name", ["independent", "status", "sample_id", "n_stable"])
def test_claim_names_that_collide_with_table_columns_are_refused(tmp_path, name):
    path = write_study(tmp_path, GOOD + f'\n[[claims]]\nname = "{name}"\nholds = "any(stable)"\n')
    status, _, err = run_cli("check", str(path))
    assert status == 2 and "[claims[1]]" in err and "name" in err


def test_claim_names_differing_only_in_spaces_are_refused(tmp_path):
    claims = ('\n[[claims]]\nname = "u wins"\nholds = "any(stable)"\n'
              '[[claims]]\nname = " u  wins"\nholds = "all(stable)"\n')
    status, _, err = run_cli("check", str(write_study(tmp_path, GOOD + claims)))
    assert status == 2 and "[claims[2]]" in err and "already called" in err and "Traceback" not in err


def test_out_that_is_a_file_and_absurd_size_exit_2(tmp_path):
    path = write_study(tmp_path, GOOD)
    afile = tmp_path / "afile"
    afile.write_text("x")
    status, _, err = run_cli("run", str(path), "--out", str(afile), "--quiet")
    assert status == 2 and "Traceback" not in err
    assert run_cli("run", str(path), "--size", "2000000000")[0] == 2
