"""Same model, any units, same answer.

Two kinds of checks:

* closed-form models whose values span many decades (large and small roots, stiff and
  slow time scales, tiny determinants): the exact steady states and classes in every
  set, with either finder;
* metamorphic: every bundled study and the closed-form models rewritten with time in
  units 10^k and each state in units 10^m (k, m drawn from -8..8, fixed seed), as text,
  and run end to end: the same number of steady states, the same classes and the same
  claim outcome in every set, the states equal after rescaling. Common practice, no
  source: a physical result does not depend on its units.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest

from helpers import write_study
from poise import load_study, run_study
from rescaling import rescaled_study_text

CONFIGS = Path(__file__).resolve().parent.parent / "configs"

LOGISTIC = """
    title = "logistic growth, a large capacity"
    [model]
    states = ["N"]
    [model.ode]
    N = "r*N*(1 - N/K)"
    [parameters]
    r = 0.5
    K = { dist = "loguniform", low = 1e9, high = 1e11 }
    [[claims]]
    name = "positive and stable"
    holds = "any(stable and N > 0)"
    [sampling]
    size = 48
    design = "random"
    seed = 3
    [sensitivity]
    method = "none"
"""

LINEAR = """
    title = "production and decay, any size"
    [model]
    states = ["x"]
    [model.ode]
    x = "a - b*x"
    [parameters]
    b = { dist = "loguniform", low = 1e-3, high = 1e6 }
    a = { dist = "loguniform", low = 1, high = 1e300 }
    [[claims]]
    name = "one stable state"
    holds = "count(stable) == 1 and count() == 1"
    [sampling]
    size = 48
    design = "random"
    seed = 4
    [sensitivity]
    method = "none"
"""

STIFF = """
    title = "a fast and a slow direction"
    [model]
    states = ["x", "y"]
    [model.ode]
    x = "-c*x + y"
    y = "a - 1e-3*y"
    [parameters]
    c = 1e6
    a = { dist = "uniform", low = 1, high = 2 }
    [[claims]]
    name = "stable"
    holds = "any(stable)"
    [sampling]
    size = 32
    design = "random"
    seed = 5
    [sensitivity]
    method = "none"
"""

SLOW = """
    title = "slow relaxation"
    [model]
    states = ["x"]
    [model.ode]
    x = "k*(a - x)"
    [parameters]
    a = 1
    k = { dist = "loguniform", low = 1e-10, high = 1e-6 }
    [[claims]]
    name = "stable"
    holds = "any(stable)"
    [sampling]
    size = 48
    design = "random"
    seed = 6
    [sensitivity]
    method = "none"
"""

SMALL_DETERMINANT = """
    title = "two slow decays"
    [model]
    states = ["x", "y"]
    [model.domain]
    x = [-inf, inf]
    y = [-inf, inf]
    [model.ode]
    x = "-1e-5*x + a"
    y = "-1e-5*y + b"
    [parameters]
    a = { dist = "uniform", low = -1, high = 1 }
    b = 0.5
    [[claims]]
    name = "stable"
    holds = "any(stable)"
    [sampling]
    size = 32
    design = "random"
    seed = 7
    [sensitivity]
    method = "none"
"""


def _run(tmp_path, text, method, name):
    solver = f'[solver]\nmethod = "{method}"\n[sensitivity]'
    study = load_study(write_study(tmp_path, text.replace("[sensitivity]", solver), f"{name}.toml"))
    return run_study(study, tmp_path / f"run_{name}", jobs=1, report=False)


METHODS = ["newton", "homotopy"]


@pytest.mark.parametrize("method", METHODS)
def test_logistic_growth_with_capacities_near_1e10(tmp_path, method):
    # closed form: N' = r N (1 - N/K) has N = 0 (eigenvalue r > 0: unstable node) and
    # N = K (eigenvalue -r: stable node), whatever the size of K
    result = _run(tmp_path, LOGISTIC, method, "logistic")
    eq = result.equilibria.merge(result.samples[["sample_id", "K"]], on="sample_id")
    assert (result.samples["status"] == "ok").all()
    assert (eq.groupby("sample_id").size() == 2).all()
    zero, capacity = eq[eq["N"] == 0], eq[eq["N"] != 0]
    assert len(zero) == len(capacity) == len(result.samples)
    assert (zero["class"] == "unstable node").all() and (capacity["class"] == "stable node").all()
    np.testing.assert_allclose(capacity["N"], capacity["K"], rtol=1e-9)
    assert result.summary["claims"]["positive and stable"]["probability"] == 1.0


@pytest.mark.parametrize("method", METHODS)
def test_production_and_decay_up_to_1e300(tmp_path, method):
    # closed form: x' = a - b x has the single steady state a/b, a stable node
    # (eigenvalue -b); the model is linear, so sizes up to 1e300 are exact in doubles
    result = _run(tmp_path, LINEAR, method, "linear")
    eq = result.equilibria.merge(result.samples[["sample_id", "a", "b"]], on="sample_id")
    assert (result.samples["status"] == "ok").all()
    assert len(eq) == len(result.samples) and (eq["class"] == "stable node").all()
    np.testing.assert_allclose(eq["x"], eq["a"] / eq["b"], rtol=1e-9)


@pytest.mark.parametrize("method", METHODS)
def test_a_small_root_is_not_zero(tmp_path, method):
    # closed form: x' = a - 1e6 x has x = a/1e6 (1e-6 to 1e-4 here), not 0
    text = LINEAR.replace('b = { dist = "loguniform", low = 1e-3, high = 1e6 }', "b = 1e6").replace(
        'a = { dist = "loguniform", low = 1, high = 1e300 }', 'a = { dist = "uniform", low = 1, high = 100 }')
    result = _run(tmp_path, text, method, "small")
    eq = result.equilibria.merge(result.samples[["sample_id", "a"]], on="sample_id")
    assert len(eq) == len(result.samples) and (eq["x"] > 0).all()
    np.testing.assert_allclose(eq["x"], eq["a"] / 1e6, rtol=1e-9)


@pytest.mark.parametrize("method", METHODS)
def test_a_stiff_pair_is_a_stable_node(tmp_path, method):
    # closed form: J = [[-1e6, 1], [0, -1e-3]], eigenvalues -1e6 and -1e-3 (triangular):
    # a stable node at y = 1e3 a, x = y / 1e6
    result = _run(tmp_path, STIFF, method, "stiff")
    eq = result.equilibria.merge(result.samples[["sample_id", "a"]], on="sample_id")
    assert len(eq) == len(result.samples) and (eq["class"] == "stable node").all()
    np.testing.assert_allclose(eq["y"], 1e3 * eq["a"], rtol=1e-9)
    np.testing.assert_allclose(eq["x"], 1e3 * eq["a"] / 1e6, rtol=1e-9)
    np.testing.assert_allclose(np.sort(eq[["eig_re_0", "eig_re_1"]].to_numpy(), axis=1),
                               np.tile([-1e6, -1e-3], (len(eq), 1)), rtol=1e-9)


@pytest.mark.parametrize("per", [1.0, 3.15576e7])
def test_slow_rates_per_second_or_per_year(tmp_path, per):
    # closed form: x' = k (a - x), eigenvalue -k, a stable node for every k > 0, whether
    # k is 1e-10..1e-6 per second or the same rate per year (x 3.15576e7, a Julian year)
    text = SLOW.replace("low = 1e-10, high = 1e-6", f"low = {1e-10 * per!r}, high = {1e-6 * per!r}")
    result = _run(tmp_path, text, "auto", f"slow{int(per)}")
    assert (result.equilibria["class"] == "stable node").all() and len(result.equilibria) == len(result.samples)
    assert result.summary["claims"]["stable"]["probability"] == 1.0


@pytest.mark.parametrize("method", METHODS)
def test_a_determinant_of_1e_10_is_not_a_continuum(tmp_path, method):
    # closed form: J = -1e-5 I, determinant 1e-10: an isolated stable node at (1e5 a, 1e5 b)
    result = _run(tmp_path, SMALL_DETERMINANT, method, "det")
    eq = result.equilibria
    assert len(eq) == len(result.samples)
    assert (eq["class"] == "stable node").all() and not eq["continuum"].any()


# ------------------------------------------------------------------------ metamorphic

def _compare(study, rescaled, units, time_unit, size, tmp_path):
    quiet = dataclasses.replace(study.sensitivity, method="none")
    study = dataclasses.replace(study, sensitivity=quiet)
    a = run_study(study, tmp_path / "a", size=size, jobs=1, report=False)
    b = run_study(rescaled, tmp_path / "b", size=size, jobs=1, report=False)
    assert a.samples["status"].tolist() == b.samples["status"].tolist()
    ea, eb = a.equilibria, b.equilibria
    assert ea["sample_id"].tolist() == eb["sample_id"].tolist(), "steady states per set differ"
    assert ea["label"].tolist() == eb["label"].tolist()
    assert ea["class"].tolist() == eb["class"].tolist()
    for state in study.states:
        np.testing.assert_allclose(eb[state] / units[state], ea[state], rtol=1e-6, atol=0)
    np.testing.assert_allclose(eb["margin"] * time_unit, ea["margin"], rtol=1e-6)
    claims = [c.name for c in study.claims]
    assert (a.outcomes[claims] == b.outcomes[claims]).all().all()


CASES = {
    "reef_grazing": CONFIGS / "reef_grazing.toml",
    "toggle_switch": CONFIGS / "toggle_switch.toml",
    "phospho_cycle": CONFIGS / "phospho_cycle.toml",
    "sbml_enzyme": CONFIGS / "sbml_enzyme" / "study.toml",
}
TEXTS = {"logistic": LOGISTIC, "stiff": STIFF, "slow": SLOW, "small_determinant": SMALL_DETERMINANT}


@pytest.mark.slow
@pytest.mark.parametrize("name", list(CASES) + list(TEXTS))
@pytest.mark.parametrize("draw", [0, 1])
def test_results_do_not_depend_on_units(tmp_path, name, draw):
    path = CASES[name] if name in CASES else write_study(tmp_path, TEXTS[name], f"{name}.toml")
    study = load_study(path)
    rng = np.random.default_rng([len(name), draw])
    time_unit = 10.0 ** int(rng.integers(-8, 9))
    units = {s: 10.0 ** int(rng.integers(-8, 9)) for s in study.states}
    text = rescaled_study_text(study, units, time_unit)
    rescaled = load_study(write_study(tmp_path, text, f"{name}_rescaled.toml"))
    _compare(study, rescaled, units, time_unit, 64, tmp_path)


HUGE_WHOLE_NUMBERS = STIFF.replace('x = "-c*x + y"', 'x = "-10000000000000000*x + 100000000000000000000*y"').replace(
    "c = 1e6\n", "")


@pytest.mark.parametrize("method", METHODS)
def test_whole_numbers_beyond_64_bits_in_the_equations(tmp_path, method):
    # closed form: x' = -1e16 x + 1e20 y, y' = a - 1e-3 y: y = 1e3 a, x = 1e7 a, eigenvalues
    # -1e16 and -1e-3 (triangular Jacobian); 10^16 and 10^20 written out are exact whole
    # numbers, beyond what numpy's integer arithmetic takes
    result = _run(tmp_path, HUGE_WHOLE_NUMBERS, method, "huge")
    eq = result.equilibria.set_index("sample_id")
    a = result.samples.set_index("sample_id").loc[eq.index, "a"]
    np.testing.assert_allclose(eq["x"], 1e7 * a, rtol=1e-9)
    np.testing.assert_allclose(eq["y"], 1e3 * a, rtol=1e-9)
    assert (eq["class"] == "stable node").all()
