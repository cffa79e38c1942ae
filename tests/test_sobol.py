"""Tests of poise.analysis.sobol against analytic indices and scipy.stats.sobol_indices."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import stats

from poise.analysis.sobol import sobol_indices
from poise.sampling import make_design, make_distribution, map_to_parameters

NAMES = ("x1", "x2", "x3")
A_ISHIGAMI, B_ISHIGAMI = 7.0, 0.1


def ishigami(x: np.ndarray) -> np.ndarray:
    """Ishigami & Homma (1990) test function; x has shape (n, 3)."""
    return (np.sin(x[:, 0]) + A_ISHIGAMI * np.sin(x[:, 1]) ** 2
            + B_ISHIGAMI * x[:, 2] ** 4 * np.sin(x[:, 0]))


def ishigami_analytic():
    """Analytic first-order, total and x1-x3 second-order indices on U(-pi, pi)^3.

    source: closed-form partial variances of the Ishigami function (Ishigami & Homma 1990;
    Sobol' & Levitan 1999; Saltelli et al. 2008, Global Sensitivity Analysis: The Primer):
    V1 = (1 + b pi^4/5)^2 / 2, V2 = a^2/8, V3 = 0, V13 = b^2 pi^8 (1/18 - 1/50),
    V = a^2/8 + b pi^4/5 + b^2 pi^8/18 + 1/2, all other partial variances zero.
    """
    a, b, pi = A_ISHIGAMI, B_ISHIGAMI, math.pi
    v1 = 0.5 * (1 + b * pi**4 / 5) ** 2
    v2 = a**2 / 8
    v3 = 0.0
    v13 = b**2 * pi**8 * (1 / 18 - 1 / 50)
    v = a**2 / 8 + b * pi**4 / 5 + b**2 * pi**8 / 18 + 0.5
    s1 = {"x1": v1 / v, "x2": v2 / v, "x3": v3 / v}
    st = {"x1": (v1 + v13) / v, "x2": v2 / v, "x3": (v3 + v13) / v}
    s2 = {"x1|x2": 0.0, "x1|x3": v13 / v, "x2|x3": 0.0}
    return s1, st, s2


def _ishigami_outputs(n: int, seed: int, second_order: bool = False):
    design = make_design(NAMES, "sobol", n, seed=seed, sobol_indices=True,
                         second_order=second_order)
    u = make_distribution({"dist": "uniform", "low": -math.pi, "high": math.pi})
    return design, ishigami(map_to_parameters(design, {p: u for p in NAMES}))


def _inside(value, interval):
    return interval[0] <= value <= interval[1]


def test_analytic_values_are_the_known_ones():
    # source: Saltelli et al. (2008) quote S1 = (0.314, 0.442, 0), ST = (0.558, 0.442, 0.244)
    # for a = 7, b = 0.1 (from memory); guards the closed forms above against a typo
    s1, st, _ = ishigami_analytic()
    assert [round(s1[p], 3) for p in NAMES] == [0.314, 0.442, 0.0]
    assert [round(st[p], 3) for p in NAMES] == [0.558, 0.442, 0.244]


def test_ishigami_first_and_total_order():
    # source: analytic indices (ishigami_analytic) must lie in the reported 95 % intervals
    design, y = _ishigami_outputs(2**13, seed=1)
    res = sobol_indices(y, design.names, second_order=False, resamples=200, seed=3)
    s1, st, _ = ishigami_analytic()
    assert res["method"] == "sobol"
    for p in NAMES:
        assert _inside(s1[p], res["S1_ci95"][p]), (p, s1[p], res["S1_ci95"][p])
        assert _inside(st[p], res["ST_ci95"][p]), (p, st[p], res["ST_ci95"][p])
        assert res["S1_ci95"][p][0] <= res["S1"][p] <= res["S1_ci95"][p][1]
        # and the estimates themselves are close (0.02: common practice, no source)
        assert res["S1"][p] == pytest.approx(s1[p], abs=0.02)
        assert res["ST"][p] == pytest.approx(st[p], abs=0.02)
    assert "S2" not in res
    assert res["flags"] == {}  # intervals at N = 2^13 are narrower than 0.1


def test_ishigami_second_order():
    # source: analytic S13 = V13 / V, S12 = S23 = 0 (ishigami_analytic) within the 95 % intervals
    design, y = _ishigami_outputs(2**12, seed=2, second_order=True)
    res = sobol_indices(y, design.names, second_order=True, resamples=200, seed=4)
    _, _, s2 = ishigami_analytic()
    assert set(res["S2"]) == set(s2) == set(res["S2_ci95"])
    for pair, value in s2.items():
        assert _inside(value, res["S2_ci95"][pair]), (pair, value, res["S2_ci95"][pair])


def _indicator(x_rows: np.ndarray) -> np.ndarray:
    """A claim-like 0/1 output: 'the Ishigami function exceeds 2'."""
    return (ishigami(x_rows) > 2.0).astype(float)


def test_indicator_matches_scipy_on_the_same_outputs():
    # reference library: scipy.stats.sobol_indices fed our own f_A, f_B, f_AB (dict form).
    # Both use the Saltelli (2010) first-order and Jansen total-order estimators; they differ
    # only in centring the output (scipy: mean of A and B; SALib: mean of all rows). The
    # first-order estimates then differ by (shift of the mean) x mean(f_AB - f_A) / var, a
    # product of two O(1/sqrt(N)) terms, i.e. O(1/N); the total-order estimator is
    # shift-invariant. Tolerance 4/N (about 1e-3 here, far inside our interval half-widths
    # of about 0.02): common practice, no source.
    n = 2**12
    design = make_design(NAMES, "sobol", n, seed=5, sobol_indices=True)
    u = make_distribution({"dist": "uniform", "low": -math.pi, "high": math.pi})
    y = _indicator(map_to_parameters(design, {p: u for p in NAMES}))
    res = sobol_indices(y, design.names, second_order=False, resamples=200, seed=6)

    groups = y.reshape(n, len(NAMES) + 2)
    ref = stats.sobol_indices(func={"f_A": groups[:, 0], "f_B": groups[:, -1],
                                    "f_AB": groups[:, 1:-1].T[:, None, :]}, n=n)
    tol = 4 / n
    for j, p in enumerate(NAMES):
        assert res["S1"][p] == pytest.approx(ref.first_order[j], abs=tol)
        assert res["ST"][p] == pytest.approx(ref.total_order[j], abs=tol)


def test_indicator_matches_scipy_own_sampling():
    # reference library: scipy.stats.sobol_indices on the same indicator function, with its own
    # samples and its own bootstrap (BCa) intervals. Two independent estimates of the same
    # index differ by less than the sum of their 95 % half-widths with probability > 95 %
    # (the sd of the difference is at most the sum of the sds), hence the union-of-intervals
    # test. n = 2^11 keeps scipy's jackknife step quick.
    n = 2**11
    design = make_design(NAMES, "sobol", n, seed=7, sobol_indices=True)
    u = make_distribution({"dist": "uniform", "low": -math.pi, "high": math.pi})
    y = _indicator(map_to_parameters(design, {p: u for p in NAMES}))
    res = sobol_indices(y, design.names, second_order=False, resamples=300, seed=8)

    dist = stats.uniform(loc=-math.pi, scale=2 * math.pi)
    ref = stats.sobol_indices(func=lambda x: _indicator(x.T), n=n, dists=[dist] * 3,
                              rng=np.random.default_rng(9))
    boot = ref.bootstrap(confidence_level=0.95, n_resamples=300)
    for key, est, ci in (("S1", ref.first_order, boot.first_order.confidence_interval),
                         ("ST", ref.total_order, boot.total_order.confidence_interval)):
        for j, p in enumerate(NAMES):
            ours = res[key][p]
            half_ours = (res[f"{key}_ci95"][p][1] - res[f"{key}_ci95"][p][0]) / 2
            half_ref = (ci.high[j] - ci.low[j]) / 2
            assert abs(ours - est[j]) <= half_ours + half_ref, (key, p, ours, est[j])


def test_deterministic_for_a_seed_including_zero():
    design, y = _ishigami_outputs(2**8, seed=1)
    first = sobol_indices(y, design.names, False, 100, seed=0)
    second = sobol_indices(y, design.names, False, 100, seed=0)
    assert json.dumps(first) == json.dumps(second)
    other = sobol_indices(y, design.names, False, 100, seed=1)
    assert other["S1"] == first["S1"]            # the estimates do not depend on the seed
    assert other["S1_ci95"] != first["S1_ci95"]  # the bootstrap does


def test_json_ready_and_flags_for_small_samples():
    design, y = _ishigami_outputs(2**5, seed=1, second_order=True)
    res = sobol_indices(y, design.names, True, 100, seed=2)
    text = json.dumps(res, allow_nan=False)
    assert json.loads(text) == res
    for key in ("S1", "ST", "S2"):
        assert all(type(v) is float for v in res[key].values())
    # 32 base rows give intervals far wider than 0.1 (common practice threshold in the brief)
    wide = [p for p in NAMES
            if res["S1_ci95"][p][1] - res["S1_ci95"][p][0] > 0.1
            or res["ST_ci95"][p][1] - res["ST_ci95"][p][0] > 0.1]
    assert wide and sorted(res["flags"]) == sorted(wide)
    assert set(res["flags"].values()) == {"more samples needed"}


def test_constant_claim_gets_no_indices():
    k = len(NAMES)
    always = sobol_indices(np.ones(16 * (k + 2)), NAMES, False, 50, seed=1)
    assert always["method"] == "none" and "always true" in always["reason"]
    never = sobol_indices(np.zeros(16 * (k + 2)), NAMES, False, 50, seed=1)
    assert never["method"] == "none" and "never true" in never["reason"]
    # true only in cross rows: the variance over A and B is zero, nothing can be estimated
    y = np.zeros((16, k + 2))
    y[3, 1] = 1.0
    cross_only = sobol_indices(y.ravel(), NAMES, False, 50, seed=1)
    assert cross_only["method"] == "none" and "independent draws" in cross_only["reason"]
    assert sobol_indices(np.ones(8), [], False, 50, seed=1)["method"] == "none"


def test_bad_outputs_raise():
    k = len(NAMES)
    y = np.ones(16 * (k + 2))
    y[0] = 0.0
    y[5] = np.nan
    with pytest.raises(ValueError, match="NaN"):
        sobol_indices(y, NAMES, False, 50, seed=1)
    with pytest.raises(ValueError, match="groups"):
        sobol_indices(np.arange(7.0), NAMES, False, 50, seed=1)
