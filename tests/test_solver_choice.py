"""Which finder runs, and the miss-rate check that Newton runs carry."""

from __future__ import annotations

import numpy as np
import pytest

from poise.api import run_study
from poise.equilibria.choice import ACCEPTABLE_SPEED, EVALUATION_COST, choose, choose_method
from poise.model import compile_model
from poise.report import load_run
from poise.report.content import study_table
from poise.study.loader import load_study

from helpers import run_cli, write_study

COMPETITION = """
    title = "two competing species"
    [model]
    states = ["x", "y"]
    [model.ode]
    x = "x*(r1 - x - a12*y)"
    y = "y*(r2 - a21*x - y)"
    [parameters]
    r1 = {{ dist = "uniform", low = 1, high = 3 }}
    r2 = {{ dist = "uniform", low = 1, high = 3 }}
    a12 = {{ dist = "uniform", low = 0.2, high = 2.5 }}
    a21 = {{ dist = "uniform", low = 0.2, high = 2.5 }}
    [[claims]]
    name = "coexistence"
    holds = "any(x > 0 and y > 0)"
    [sampling]
    size = {size}
    design = "random"
    seed = 4
    [sensitivity]
    method = "none"
    [solver]
    {solver}
"""


def test_auto_chooses_by_counted_work_and_homotopy_is_refused_for_non_rational_models(tmp_path):
    # design requirement: "auto" takes homotopy exactly when its predicted throughput
    # (counted work on a fixed probe design) is at least half of Newton's; the choice
    # is reproducible and recorded in summary.json with the numbers behind it
    rational = load_study(write_study(tmp_path, COMPETITION.format(size=8, solver=""), "a.toml"))
    model = compile_model(rational)
    method, estimate = choose(rational, model)
    assert estimate is not None and estimate.newton_iterations > 0 and estimate.homotopy_evaluations > 0
    assert estimate.predicted_speed == pytest.approx(
        estimate.newton_iterations / (EVALUATION_COST * estimate.homotopy_evaluations))
    assert (method == "homotopy") == (estimate.predicted_speed >= ACCEPTABLE_SPEED)
    assert choose(rational, compile_model(rational)) == (method, estimate)
    run = run_study(rational, tmp_path / "auto", jobs=1, report=False).summary["solver"]
    assert run["method"] == method and run["requested"] == "auto"
    assert run["choice"]["predicted_speed"] == round(estimate.predicted_speed, 3)
    rows = dict(study_table(load_run(tmp_path / "auto")).rows)
    assert rows["Steady-state solver"].startswith(f"{method} (chosen automatically")

    forced = load_study(write_study(tmp_path, COMPETITION.format(size=8, solver='method = "homotopy"'), "d.toml"))
    assert choose(forced, compile_model(forced)) == ("homotopy", None)
    newton = load_study(write_study(tmp_path, COMPETITION.format(size=8, solver='method = "newton"'), "e.toml"))
    assert choose_method(newton, compile_model(newton)) == "newton"
    transcendental = load_study(write_study(tmp_path, COMPETITION.format(size=8, solver="").replace(
        'x = "x*(r1 - x - a12*y)"', 'x = "x*(r1 - exp(x) - a12*y)"'), "b.toml"))
    assert choose(transcendental, compile_model(transcendental)) == ("newton", None)
    forced = write_study(tmp_path, COMPETITION.format(size=8, solver='method = "homotopy"').replace(
        'x = "x*(r1 - x - a12*y)"', 'x = "x*(r1 - exp(x) - a12*y)"'), "c.toml")
    status, _, err = run_cli("check", str(forced))
    assert status == 2 and "[solver]" in err and "method" in err


def test_a_resumed_run_keeps_the_finder_its_saved_chunks_used(tmp_path, monkeypatch):
    # design requirement: nothing mixes two finders in one run, even if "auto" would
    # decide differently when the run is resumed; the saved choice is reported again
    # and the choice's probe is not run a second time
    import json

    import poise.equilibria.choice as choice
    study = load_study(write_study(tmp_path, COMPETITION.format(size=40, solver=""), "r.toml"))
    out = tmp_path / "run"
    first = run_study(study, out, jobs=1, report=False, chunk_size=10).summary["solver"]
    other = "newton" if first["method"] == "homotopy" else "homotopy"
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["solver_choice"]["predicted_speed"] == pytest.approx(first["choice"]["predicted_speed"],
                                                                         abs=5e-4)
    manifest.update(solver=other, complete=False)
    manifest["chunks"].pop(sorted(manifest["chunks"])[-1])
    (out / "manifest.json").write_text(json.dumps(manifest))

    def no_probe(*args, **kwargs):
        raise AssertionError("the choice was made again on resume")

    monkeypatch.setattr(choice, "choose", no_probe)
    resumed = run_study(study, out, jobs=1, report=False, chunk_size=10, resume=True).summary["solver"]
    assert resumed["method"] == other and resumed["choice"] == first["choice"]


def test_homotopy_and_newton_agree_with_the_closed_form(tmp_path):
    # source: closed form of the Lotka–Volterra competition steady states (e.g. Strogatz
    # 1994 §6.4): (0,0), (r1,0), (0,r2) and, when positive, the interior point
    # ((r1 - a12 r2)/(1 - a12 a21), (r2 - a21 r1)/(1 - a12 a21)).
    for solver in ('method = "homotopy"', 'method = "newton"'):
        study = load_study(write_study(tmp_path, COMPETITION.format(size=150, solver=solver)))
        result = run_study(study, tmp_path / solver.split('"')[1], jobs=1, report=False)
        s = result.samples.set_index("sample_id")
        r1, r2, a12, a21 = (s[k].to_numpy() for k in ("r1", "r2", "a12", "a21"))
        det = 1 - a12 * a21
        interior = ((r1 - a12 * r2) / det > 0) & ((r2 - a21 * r1) / det > 0)
        expected = 3 + interior.astype(int)
        assert np.array_equal(result.outcomes["n_steady"].to_numpy(dtype=int), expected), solver
        assert np.array_equal(result.outcomes["coexistence"].to_numpy(dtype=bool), interior)


def test_newton_runs_report_how_often_a_steady_state_was_missed(tmp_path):
    # A deliberately starved Newton search (one start, no deflation) misses steady states;
    # the completeness check re-solves a random subsample by homotopy continuation and
    # must report misses. The truth per set comes from the closed form above. The run is
    # so cheap that the default budget would pick a cheaper reference and fewer sets, so
    # the number of checked sets is fixed, which keeps homotopy as the reference.
    starved = 'method = "newton"\n    starts = 1\n    deflation_rounds = 0\n    check_sets = 120'
    study = load_study(write_study(tmp_path, COMPETITION.format(size=120, solver=starved)))
    result = run_study(study, tmp_path / "starved", jobs=1, report=False)
    check = result.summary["solver"]["completeness"]
    assert result.summary["solver"]["method"] == "newton"
    assert check["reference"] == "homotopy continuation"
    assert check["checked"] == 120
    s = result.samples.set_index("sample_id")
    r1, r2, a12, a21 = (s[k].to_numpy() for k in ("r1", "r2", "a12", "a21"))
    det = 1 - a12 * a21
    expected = 3 + (((r1 - a12 * r2) / det > 0) & ((r2 - a21 * r1) / det > 0)).astype(int)
    truly_missed = int((result.outcomes["n_steady"].to_numpy(dtype=int) < expected).sum())
    assert truly_missed > 0
    assert check["missed"] == truly_missed
    lo, hi = check["ci95"]
    assert lo <= check["fraction"] <= hi
