"""What a study file and the command line may hold: names that would collide with the
run's table columns, control characters, a byte-order mark, seeds, jobs, unused
distributions, SBML studies without [parameters]; each refusal is one line naming the
file, table and key, with exit status 2.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from poise.cli import build_parser
from poise.engine.runner import JOBS_PER_CORE, capped_jobs, usable_cores

from helpers import run_cli, write_study
from conftest import GRAZING_STUDY as CLI_STUDY

BIN = Path(sys.executable).parent

# the grazing model of test_cli.py, with a title, a claim and a small design
GOOD = ('title = "grazing"\n' + textwrap.dedent(CLI_STUDY).lstrip()
        + '[[claims]]\nname = "grazers persist"\nholds = "any(stable and G > 0)"\n'
        + '[sampling]\nsize = 16\ndesign = "random"\n[sensitivity]\nmethod = "none"\n')


def _refused(path: Path, *pieces: str, command: str = "check") -> str:
    status, out, err = run_cli(command, str(path))
    assert status == 2, err
    assert out == "" and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1, err
    assert str(path) in err
    for piece in pieces:
        assert piece in err, (piece, err)
    return err


# --- names that a run's tables use ----------------------------------------------------------

@pytest.mark.parametrize("name", ["block", "status", "reason", "sample_id", "independent",
                                  "n_steady", "n_stable", "label", "trace"])
def test_a_parameter_named_after_a_table_column_is_refused(tmp_path, name):
    # A parameter `block` overwrote the design's block column of samples.parquet.
    text = GOOD.replace("c = 0.5", f"c = 0.5\n{name} = 1.0").replace("- d*G", f"- d*G*{name}")
    _refused(write_study(tmp_path, text), "[parameters]", f"'{name}'", "column")


@pytest.mark.parametrize("name", ["index", "label", "trace", "determinant", "discriminant",
                                  "stability", "continuum", "eig_im_1", "eig_re_0", "status"])
def test_a_state_named_after_a_table_column_is_refused(tmp_path, name):
    # A state `index` or `eig_im_1` collided with equilibria.parquet's own columns and
    # crashed the run after the whole computation.
    text = GOOD.replace('"G"]', f'"{name}"]').replace("G = ", f"{name} = ").replace("*G", f"*{name}")
    text = text.replace("G > 0", f"{name} > 0")
    _refused(write_study(tmp_path, text), "[model]", "states", f"'{name}'", "column")


def test_a_let_name_may_be_a_table_word(tmp_path):
    # [model.let] names are inlined and never become columns
    text = GOOD.replace("[model.ode]", '[model.let]\ntrace = "c*A*G"\n[model.ode]').replace(
        'G = "c*A*G - d*G"', 'G = "trace - d*G"')
    status, _, err = run_cli("check", str(write_study(tmp_path, text)))
    assert status == 0, err


# --- control and text-direction characters ----------------------------------------------------

HOSTILE_TEXT = [
    # (replace, with (TOML escapes, so the file itself is plain ASCII), table, key, shown as)
    ('title = "grazing"', 'title = "\\u001b[2J\\u001b[Hok: the study is valid"', None, "title", "\\x1b"),
    ('title = "grazing"', 'title = "grazing\\u0000"', None, "title", "\\x00"),
    ('name = "grazers persist"', 'name = "grazers \\u202eesrever"', "claims[1]", "name", "\\u202e"),
    ('name = "grazers persist"', 'name = "ok\\u001b[1A\\u001b[2Kok"', "claims[1]", "name", "\\x1b"),
    ('name = "grazers persist"', 'name = "two\\nlines"', "claims[1]", "name", "\\n"),
    ('A = "r*A', 'A = "\\u001b[2J r*A', "model.ode", "A", "\\x1b"),
    ("d = 0.2", 'd = 0.2\n"\\u001b[31m" = 1', "parameters", None, "\\x1b"),
]


@pytest.mark.parametrize("old,new,table,key,shown", HOSTILE_TEXT, ids=range(len(HOSTILE_TEXT)))
@pytest.mark.parametrize("command", ["check", "inspect"])
def test_control_characters_are_refused_and_never_printed_raw(tmp_path, old, new, table, key, shown, command):
    # Before, `check` printed an ESC sequence from a title raw: a study could clear the
    # terminal and print a fake "ok".
    assert old in GOOD
    path = write_study(tmp_path, GOOD.replace(old, new))
    err = _refused(path, shown, command=command)
    assert all(ord(char) >= 32 and char not in "\u202e\x7f" for char in err.rstrip("\n"))
    if table:
        assert f"[{table}]" in err
    if key:
        assert f"key '{key}'" in err


def test_tabs_in_expressions_are_still_accepted(tmp_path):
    text = GOOD.replace('A = "r*A*(1 - A/K) - c*A*G"', 'A = "r*A*(1 - A/K)\t- c*A*G"')
    status, _, err = run_cli("check", str(write_study(tmp_path, text)))
    assert status == 0, err


# --- a byte-order mark, seeds and jobs ------------------------------------------------------

def test_a_utf8_byte_order_mark_is_accepted(tmp_path):
    # Some editors start UTF-8 files with EF BB BF (Unicode standard, section 23.8).
    path = tmp_path / "bom.toml"
    path.write_bytes(b"\xef\xbb\xbf" + GOOD.encode())
    status, out, err = run_cli("check", str(path))
    assert status == 0, err
    assert "ok: the study is valid" in out


def test_the_command_line_and_the_study_file_accept_the_same_seeds(tmp_path):
    largest = 2**63 - 1
    assert build_parser().parse_args(["run", "s.toml", "--seed", str(largest)]).seed == largest
    assert run_cli("run", "s.toml", "--seed", str(largest + 1))[0] == 2
    for seed, status in ((largest, 0), (largest + 1, 2)):
        path = write_study(tmp_path, GOOD.replace('design = "random"', f'design = "random"\nseed = {seed}'))
        assert run_cli("check", str(path))[0] == status


def test_jobs_are_capped_at_twice_the_cores_with_a_message(tmp_path):
    cores = usable_cores()
    assert capped_jobs(JOBS_PER_CORE * cores) == (JOBS_PER_CORE * cores, None)
    jobs, note = capped_jobs(5000)
    assert jobs == JOBS_PER_CORE * cores and "5000" in note
    path = write_study(tmp_path, GOOD)
    status, out, err = run_cli("run", str(path), "--out", str(tmp_path / "run"), "--jobs", "5000", "--quiet")
    assert status == 0, err
    assert err.strip().splitlines() == [f"poise: warning: {note}"]
    # the study file's [run] jobs too
    capped = write_study(tmp_path, GOOD + "[run]\njobs = 4096\n", "capped.toml")
    status, _, err = run_cli("run", str(capped), "--out", str(tmp_path / "run2"), "--quiet")
    assert status == 0 and "jobs 4096" in err


def test_several_values_after_one_at(tmp_path):
    path = write_study(tmp_path, GOOD)
    status, out, err = run_cli("inspect", str(path), "--json", "--at", "K=4", "c=0.25", "--at", "d=0.1")
    assert status == 0, err
    values = json.loads(out)["parameters"]
    assert (values["K"], values["c"], values["d"]) == (4.0, 0.25, 0.1)


# --- distributions on names the model does not use ------------------------------------------

def test_a_distribution_on_a_name_the_model_does_not_use_is_an_error(tmp_path):
    text = GOOD.replace("d = 0.2", 'd = 0.2\nspare = { dist = "uniform", low = 1, high = 2 }')
    _refused(write_study(tmp_path, text), "[parameters]", "key 'spare'", "distribution")


def test_a_parameter_used_only_by_a_claim_counts_as_used(tmp_path):
    text = GOOD.replace("d = 0.2", 'd = 0.2\nthreshold = { dist = "uniform", low = 0.1, high = 1 }')
    text = text.replace("G > 0", "G > threshold")
    status, _, err = run_cli("check", str(write_study(tmp_path, text)))
    assert status == 0 and err == ""


# --- SBML studies without [parameters] -----------------------------------------------------

SBML_NO_PARAMETERS = """<?xml version="1.0" encoding="UTF-8"?>
<sbml xmlns="http://www.sbml.org/sbml/level2/version4" level="2" version="4">
  <model id="inflow_and_decay">
    <listOfCompartments><compartment id="cell" size="1"/></listOfCompartments>
    <listOfSpecies>
      <species id="A" compartment="cell" initialAmount="0" hasOnlySubstanceUnits="true"/>
    </listOfSpecies>
    <listOfReactions>
      <reaction id="make" reversible="false">
        <listOfProducts><speciesReference species="A"/></listOfProducts>
        <kineticLaw><math xmlns="http://www.w3.org/1998/Math/MathML"><cn>1</cn></math></kineticLaw>
      </reaction>
      <reaction id="lose" reversible="false">
        <listOfReactants><speciesReference species="A"/></listOfReactants>
        <kineticLaw><math xmlns="http://www.w3.org/1998/Math/MathML">
          <apply><times/><cn>0.5</cn><ci>A</ci></apply></math></kineticLaw>
      </reaction>
    </listOfReactions>
  </model>
</sbml>
"""


def test_an_sbml_study_without_parameters_runs_on_the_files_values(tmp_path):
    (tmp_path / "model.xml").write_text(SBML_NO_PARAMETERS)
    path = write_study(tmp_path, 'title = "inflow and decay"\n[model]\nsbml = "model.xml"\n'
                                 '[[claims]]\nname = "stable"\nholds = "all(stable)"\n')
    status, out, err = run_cli("inspect", str(path), "--json")
    assert status == 0, err
    (state,) = json.loads(out)["equilibria"]
    # dA/dt = 1 - 0.5 A: one steady state A = 2, eigenvalue -0.5 (elementary algebra)
    assert state["state"]["A"] == pytest.approx(2.0)
    assert state["eigenvalues"] == [[pytest.approx(-0.5), 0.0]] and state["stability"] == "stable"
    status, out, err = run_cli("run", str(path), "--out", str(tmp_path / "run"), "--size", "8", "--quiet")
    assert status == 0, err
    summary = json.loads((tmp_path / "run" / "summary.json").read_text())
    assert summary["claims"]["stable"]["probability"] == 1.0


# --- the console script: no leaked library warnings, a clean public API ------------------------

@pytest.mark.slow
def test_scipy_sobol_balance_warning_does_not_reach_the_terminal(tmp_path):
    # 100 Newton starts: a Sobol' sequence cut at a size that is not a power of 2, for
    # which scipy warns; --jobs 2 with small chunks puts the finder in worker processes.
    text = GOOD + '[solver]\nmethod = "newton"\nstarts = 100\n[run]\nchunk_size = 4\n'
    path = write_study(tmp_path, text)
    poise = str(BIN / "poise")
    for args in (["inspect", str(path)], ["run", str(path), "--out", str(tmp_path / "run"), "--jobs", "2", "--quiet"]):
        result = subprocess.run([poise, *args], capture_output=True, text=True, timeout=180)
        assert result.returncode == 0, result.stderr
        assert "balance" not in result.stderr and "Warning" not in result.stderr, result.stderr


def test_dir_of_poise_shows_the_public_api():
    code = ("import json, poise, poise.api, poise.cli, poise.engine.runner\n"
            "print(json.dumps([dir(poise), poise.__all__, all(getattr(poise, n) is not None for n in poise.__all__)]))")
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120,
                            env={**os.environ, "PYTHONWARNINGS": "error::DeprecationWarning:poise"})
    shown, public, resolved = json.loads(result.stdout)
    assert shown == sorted(public) and resolved
    assert {"load_study", "run_study", "open_run", "inspect_point", "RunResult"} <= set(shown)
    assert not {"api", "cli", "engine", "study"} & set(shown)


@pytest.mark.parametrize("value", ["[" * 50_000 + "]" * 50_000, "{a=" * 5000 + "1" + "}" * 5000])
def test_deeply_nested_toml_gives_one_line(tmp_path, value):
    # Python's TOML reader recurses once per nesting level (RecursionError before)
    path = write_study(tmp_path, GOOD.replace("d = 0.2", f"d = 0.2\nq = {value}"))
    _refused(path, "nested too deeply")
