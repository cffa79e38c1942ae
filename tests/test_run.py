"""The uncertainty study end to end: probabilities against analytic results,
reproducibility, failed sets, and the run directory contract."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
from scipy import integrate

from poise.api import run_study
from poise.study.loader import load_study

from helpers import run_cli, write_study

SELKOV = """
    title = "glycolysis oscillator"
    [model]
    states = ["x", "y"]
    [model.ode]
    x = "-x + a*y + x**2*y"
    y = "b - a*y - x**2*y"
    [parameters]
    a = {{ dist = "uniform", low = {a_low}, high = {a_high} }}
    b = {{ dist = "uniform", low = {b_low}, high = {b_high} }}
    [[claims]]
    name = "unstable"
    holds = "any(unstable)"
    [[claims]]
    name = "one steady state"
    holds = "count() == 1"
    [sampling]
    size = {size}
    design = "random"
    seed = 5
    [sensitivity]
    method = "none"
"""


def selkov_unstable_probability(a_low, a_high, b_low, b_high):
    """P(trace > 0) at the unique steady state x* = b, y* = b/(a + b²).

    source: Sel'kov (1968), Eur. J. Biochem. 4:79; Strogatz (1994) §7.3: the trace is
    τ = -(b⁴ + (2a − 1) b² + (a + a²))/(a + b²) and the determinant a + b² > 0, so the
    steady state is unstable exactly where b⁴ + (2a − 1) b² + a + a² < 0, i.e. for a
    between the roots of a² + (2b² + 1) a + b⁴ − b² = 0. Integrated with scipy.integrate.quad.
    """
    def unstable_length(b):
        disc = 1 + 8 * b * b
        lo = (-(2 * b * b + 1) - math.sqrt(disc)) / 2
        hi = (-(2 * b * b + 1) + math.sqrt(disc)) / 2
        return max(0.0, min(hi, a_high) - max(lo, a_low))

    area, _ = integrate.quad(unstable_length, b_low, b_high, limit=200, points=[0.5, 0.7, 0.9])
    return area / ((a_high - a_low) * (b_high - b_low))


def test_selkov_instability_probability_matches_analytic_boundary(tmp_path):
    box = dict(a_low=0.01, a_high=0.12, b_low=0.2, b_high=1.2)
    exact = selkov_unstable_probability(**box)
    assert 0.2 < exact < 0.8   # the box straddles the boundary
    study = load_study(write_study(tmp_path, SELKOV.format(size=2000, **box)))
    result = run_study(study, tmp_path / "run", jobs=1, report=False)
    claim = result.summary["claims"]["unstable"]
    lo, hi = claim["ci95"]
    assert lo <= exact <= hi, (exact, claim)
    # Sel'kov's model has exactly one steady state for a, b > 0 (closed form above).
    assert result.summary["claims"]["one steady state"]["probability"] == 1.0
    # and it is classified consistently with the sign of the analytic trace.
    eq = result.equilibria.merge(result.samples, on="sample_id")
    a, b = eq["a"].to_numpy(), eq["b"].to_numpy()
    trace = -(b**4 + (2 * a - 1) * b**2 + a + a**2) / (a + b**2)
    clear = np.abs(trace) > 1e-6
    assert np.array_equal((eq["stability"] == "unstable").to_numpy()[clear], trace[clear] > 0)
    assert np.allclose(eq["trace"].to_numpy(), trace, atol=1e-9)


REEF = """
    title = "two-state grazing model"
    [model]
    states = ["A", "G"]
    [model.ode]
    A = "r*A*(1 - A/K) - c*A*G/(s + A)"
    G = "e*c*A*G/(s + A) - d*G"
    [parameters]
    r = 1.0
    K = { dist = "uniform", low = 2, high = 10 }
    c = { dist = "loguniform", low = 0.2, high = 5 }
    s = { dist = "normal", mean = 1, sd = 0.2, low = 0.1 }
    e = { dist = "lognormal", median = 0.3, gsd = 1.5 }
    d = 0.1
    [[claims]]
    name = "grazers persist stably"
    holds = "any(stable and G > 1e-9)"
    [sampling]
    size = 64
    design = "sobol"
    seed = 1
    [sensitivity]
    method = "sobol"
    resamples = 100
"""


def test_same_seed_gives_identical_summary_and_chunking_does_not_matter(tmp_path):
    # common practice, no source: reproducibility is a property, checked byte for byte.
    study = load_study(write_study(tmp_path, REEF))
    first = run_study(study, tmp_path / "one", jobs=1, report=False)
    run_study(study, tmp_path / "two", jobs=1, report=False)
    rechunked = run_study(study, tmp_path / "three", jobs=1, chunk_size=37, report=False)
    text = [(tmp_path / d / "summary.json").read_bytes() for d in ("one", "two", "three")]
    assert text[0] == text[1] == text[2]
    assert first.summary["samples"]["analysed"] == 64 * (4 + 2)
    pd.testing.assert_frame_equal(first.equilibria, rechunked.equilibria)
    other_seed = run_study(study, tmp_path / "four", jobs=1, seed=2, report=False)
    assert (tmp_path / "four" / "summary.json").read_bytes() != text[0]
    assert other_seed.manifest["seed"] == 2


def test_run_directory_contract(tmp_path):
    # The keys and columns of design.md's run directory (the project's output contract).
    study = load_study(write_study(tmp_path, REEF))
    result = run_study(study, tmp_path / "run", jobs=1, report=False)
    summary = json.loads((tmp_path / "run" / "summary.json").read_text())
    assert set(summary) >= {"tool", "samples", "claims", "stable_count", "equilibria", "sensitivity"}
    assert set(summary["samples"]) == {"analysed", "failed", "independent"}
    claim = summary["claims"]["grazers persist stably"]
    assert set(claim) == {"holds", "probability", "ci95", "successes", "n"}
    assert claim["n"] == summary["samples"]["independent"] == 128
    assert claim["probability"] == pytest.approx(claim["successes"] / claim["n"])
    assert sum(v["probability"] for v in summary["stable_count"].values()) == pytest.approx(1.0)
    sens = summary["sensitivity"]["grazers persist stably"]
    assert sens["method"] == "sobol" and set(sens["S1"]) == {"K", "c", "s", "e"}
    samples, outcomes, equilibria = result.samples, result.outcomes, result.equilibria
    assert list(samples.columns[:3]) == ["sample_id", "block", "independent"]
    assert {"K", "c", "s", "e", "status", "reason"} <= set(samples.columns)
    assert {"n_steady", "n_stable", "grazers persist stably"} <= set(outcomes.columns)
    assert {"sample_id", "index", "A", "G", "label", "class", "stability", "margin",
            "eig_re_0", "eig_im_1", "trace", "determinant", "discriminant"} <= set(equilibria.columns)
    # The extinction state (0, 0) always exists and is a saddle (r > 0 growth, d > 0 loss):
    # Jacobian diag(r, -d), closed form.
    origin = equilibria[equilibria["label"] == "A=0, G=0"]
    assert len(origin) == len(samples)
    assert (origin["class"] == "saddle").all()
    assert np.allclose(origin["eig_re_0"], 1.0) and np.allclose(origin["eig_re_1"], -0.1)


OVERFLOW = """
    [model]
    states = ["x"]
    [model.ode]
    x = "a - exp(q)*x"
    [parameters]
    a = 1.0
    q = { dist = "uniform", low = 0, high = 800 }
    [[claims]]
    name = "stable"
    holds = "any(stable)"
    [sampling]
    size = 400
    design = "lhs"
    seed = 2
    [sensitivity]
    method = "none"
"""


def test_sets_that_overflow_are_recorded_as_failed(tmp_path):
    # IEEE 754: exp(q) overflows to inf for q > log(max float) ≈ 709.78 (numpy.finfo), so
    # x' = a - exp(q) x cannot be evaluated there; below it the steady state a/exp(q) is
    # a stable node (closed form), however small (down to 1e-308: the model is linear in
    # x, nothing is squared).
    study = load_study(write_study(tmp_path, OVERFLOW))
    result = run_study(study, tmp_path / "run", jobs=1, report=False)
    samples = result.samples
    limit = math.log(np.finfo(float).max)
    failed = samples["status"] == "failed"
    assert failed.to_numpy().tolist() == (samples["q"] > limit).to_numpy().tolist()
    assert failed.sum() > 0
    assert (samples.loc[failed, "reason"].str.contains("cannot be evaluated")).all()
    summary = result.summary
    assert summary["samples"]["failed"] == int(failed.sum())
    assert summary["claims"]["stable"]["n"] == int((~failed).sum())
    assert summary["claims"]["stable"]["probability"] == 1.0


def test_a_run_where_every_set_fails_reports_no_probability(tmp_path):
    # every q lies above the overflow limit of exp (IEEE 754, as above): no set can be
    # analysed, so a claim has no estimate (null), not probability 0, and the interval
    # is the uninformative [0, 1]
    study = load_study(write_study(tmp_path, OVERFLOW.replace("low = 0, high = 800", "low = 720, high = 800")
                                   .replace("size = 400", "size = 16")))
    result = run_study(study, tmp_path / "run", jobs=1, report=True)
    claim = result.summary["claims"]["stable"]
    assert result.summary["samples"]["analysed"] == 0
    assert claim["n"] == 0 and claim["probability"] is None and claim["ci95"] == [0.0, 1.0]
    assert "P(stable) = n/a" in repr(result)
    status, out, err = run_cli("run", str(study.path), "--out", str(tmp_path / "cli"), "--quiet")
    assert status == 1 and "Traceback" not in out + err and "no parameter set could be analysed" in err
    assert "n/a" in out  # the main table shows no estimate


def test_cli_run_prints_the_main_table_and_honours_size_and_seed(tmp_path):
    path = write_study(tmp_path, REEF)
    status, out, err = run_cli("run", str(path), "--out", str(tmp_path / "cli"), "--size", "16",
                               "--seed", "3", "--jobs", "1", "--quiet")
    assert status == 0, err
    assert "grazers persist stably" in out
    assert err == ""
    manifest = json.loads((tmp_path / "cli" / "manifest.json").read_text())
    assert manifest["size"] == 16 and manifest["seed"] == 3
    assert (tmp_path / "cli" / "report.html").exists()


def test_a_claim_that_divides_by_zero_fails_its_sets_instead_of_holding(tmp_path):
    # count()/0 is not a number (IEEE 754 gives inf, or NaN for 0/0): before, "inf > 1"
    # made the claim silently true in every set.
    text = REEF.replace('holds = "any(stable and G > 1e-9)"', 'holds = "count()/0 > 1"').replace(
        'design = "sobol"', 'design = "random"').replace('method = "sobol"', 'method = "none"')
    study = load_study(write_study(tmp_path, text.replace("size = 64", "size = 8")))
    result = run_study(study, tmp_path / "run", jobs=1, report=False)
    claim = result.summary["claims"]["grazers persist stably"]
    assert claim["probability"] is None and claim["n"] == 0
    assert (result.samples["status"] == "failed").all()
    assert result.samples["reason"].str.contains("claim 'grazers persist stably' is undefined").all()
    status, out, err = run_cli("inspect", str(study.path))   # the steady states are still shown
    assert status == 0 and "steady states in the domain" in out


def test_a_guarded_division_leaves_every_set_analysed(tmp_path):
    # the extinction state (A, G) = (0, 0) exists in every set (closed form): A/G is
    # undefined there, but "G > 0 and ..." settles it as false (three-valued logic)
    text = REEF.replace('holds = "any(stable and G > 1e-9)"', 'holds = "any(G > 0 and A/G > 0.1)"')
    study = load_study(write_study(tmp_path, text))
    result = run_study(study, tmp_path / "run", jobs=1, report=False)
    assert (result.samples["status"] == "ok").all()
    assert result.summary["claims"]["grazers persist stably"]["n"] == 128
