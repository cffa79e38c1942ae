"""Tests of poise.sampling: distributions and designs."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from scipy import stats
from SALib.sample import sobol as salib_sobol_sample

from poise.errors import InputError
from poise.sampling import (
    DISTRIBUTIONS,
    Design,
    check_parameter,
    make_design,
    make_distribution,
    map_to_parameters,
)

U = np.array([1e-9, 0.01, 0.1, 0.25, 0.5, 0.75, 0.9, 0.99, 1 - 1e-9])


# ---------------------------------------------------------------- ppf

def test_uniform_ppf_is_linear_map():
    # source: definition of the continuous uniform distribution (inverse CDF low + u (high - low))
    d = make_distribution({"dist": "uniform", "low": 2, "high": 10})
    np.testing.assert_allclose(d.ppf(U), 2 + 8 * U, rtol=1e-14)


def test_loguniform_ppf_is_uniform_in_log():
    # source: definition of the log-uniform (reciprocal) distribution: ln X ~ U(ln a, ln b)
    d = make_distribution({"dist": "loguniform", "low": 0.2, "high": 5})
    expected = np.exp(np.log(0.2) + U * (np.log(5) - np.log(0.2)))
    np.testing.assert_allclose(d.ppf(U), expected, rtol=1e-12)


def test_normal_ppf_matches_scipy():
    # reference library: scipy.stats.norm
    d = make_distribution({"dist": "normal", "mean": 1, "sd": 0.2})
    np.testing.assert_allclose(d.ppf(U), stats.norm.ppf(U, loc=1, scale=0.2), rtol=1e-13)


@pytest.mark.parametrize("bounds", [{"low": 0}, {"high": 1.1}, {"low": 0.7, "high": 1.5},
                                    {"low": 2.0}])
def test_truncated_normal_ppf_closed_form(bounds):
    # source: inverse CDF of a truncated normal, mean + sd * Phi^-1(Phi(a) + u (Phi(b) - Phi(a)))
    # (Johnson, Kotz & Balakrishnan 1994, Continuous Univariate Distributions vol. 1, §10.1);
    # Phi from the reference library scipy.stats.norm. The tail case low = 2.0 uses the
    # survival-function form of the same identity to stay accurate.
    mean, sd = 1.0, 0.2
    d = make_distribution({"dist": "normal", "mean": mean, "sd": sd, **bounds})
    a = (bounds.get("low", -np.inf) - mean) / sd
    b = (bounds.get("high", np.inf) - mean) / sd
    u = U[1:-1]
    if a > 0:
        expected = mean + sd * stats.norm.isf(stats.norm.sf(a) - u * (stats.norm.sf(a) - stats.norm.sf(b)))
    else:
        expected = mean + sd * stats.norm.ppf(stats.norm.cdf(a) + u * (stats.norm.cdf(b) - stats.norm.cdf(a)))
    np.testing.assert_allclose(d.ppf(u), expected, rtol=1e-9)
    lo, hi = bounds.get("low", -np.inf), bounds.get("high", np.inf)
    x = d.ppf(U)
    assert np.all((x >= lo) & (x <= hi))


def test_lognormal_ppf_median_and_gsd():
    # source: lognormal with ln X ~ N(ln median, ln gsd): quantile u is median * gsd ** Phi^-1(u)
    # (Limpert, Stahel & Abbt 2001, BioScience 51:341); Phi^-1 from scipy.stats.norm
    d = make_distribution({"dist": "lognormal", "median": 0.3, "gsd": 1.5})
    np.testing.assert_allclose(d.ppf(U), 0.3 * 1.5 ** stats.norm.ppf(U), rtol=1e-12)
    assert d.median == pytest.approx(0.3, rel=1e-14)


@pytest.mark.parametrize("mode", [0.05, 0.1, 0.2])
def test_triangular_ppf_closed_form(mode):
    # source: inverse CDF of the triangular distribution (Evans, Hastings & Peacock,
    # Statistical Distributions, ch. "Triangular"): a + sqrt(u (b-a)(c-a)) for u < F(c),
    # else b - sqrt((1-u)(b-a)(b-c))
    a, c, b = 0.05, mode, 0.2
    d = make_distribution({"dist": "triangular", "low": a, "mode": c, "high": b})
    fc = (c - a) / (b - a)
    expected = np.where(U < fc, a + np.sqrt(U * (b - a) * (c - a)),
                        b - np.sqrt((1 - U) * (b - a) * (b - c)))
    np.testing.assert_allclose(d.ppf(U), expected, rtol=1e-10, atol=1e-15)


# ---------------------------------------------------------------- medians, nominal, means

@pytest.mark.parametrize("mode", [0.06, 0.1, 0.19])
def test_triangular_median(mode):
    # source: median of the triangular distribution, a + sqrt((b-a)(c-a)/2) if c >= (a+b)/2,
    # else b - sqrt((b-a)(b-c)/2) (Evans, Hastings & Peacock, "Triangular")
    a, b = 0.05, 0.2
    d = make_distribution({"dist": "triangular", "low": a, "mode": mode, "high": b})
    if mode >= (a + b) / 2:
        expected = a + math.sqrt((b - a) * (mode - a) / 2)
    else:
        expected = b - math.sqrt((b - a) * (b - mode) / 2)
    assert d.median == pytest.approx(expected, rel=1e-12)
    assert d.nominal == d.median


def test_truncated_normal_median():
    # source: median of a truncated normal, mean + sd Phi^-1((Phi(a) + Phi(b)) / 2)
    # (Johnson, Kotz & Balakrishnan 1994 §10.1); Phi from scipy.stats.norm
    d = make_distribution({"dist": "normal", "mean": 1, "sd": 0.5, "low": 0.8})
    a = (0.8 - 1) / 0.5
    expected = 1 + 0.5 * stats.norm.ppf((stats.norm.cdf(a) + 1) / 2)
    assert d.median == pytest.approx(expected, rel=1e-12)
    assert d.median > 1  # truncation from below moves the median up


def test_explicit_nominal_is_kept():
    # source: design.md (nominal defaults to the median; an explicit nominal wins)
    d = make_distribution({"dist": "uniform", "low": 2, "high": 10, "nominal": 3})
    assert d.nominal == 3.0
    assert make_distribution({"dist": "uniform", "low": 2, "high": 10}).nominal == 6.0
    assert d.as_dict() == {"dist": "uniform", "low": 2, "high": 10, "nominal": 3.0}


@pytest.mark.parametrize("table, analytic_mean", [
    # source of each analytic mean: the standard closed forms (uniform (a+b)/2; log-uniform
    # (b-a)/ln(b/a); lognormal median*exp(sigma^2/2); triangular (a+b+c)/3); truncated normal
    # from the reference library scipy.stats.truncnorm.mean()
    ({"dist": "uniform", "low": 2, "high": 10}, 6.0),
    ({"dist": "loguniform", "low": 0.2, "high": 5}, (5 - 0.2) / math.log(25)),
    ({"dist": "lognormal", "median": 0.3, "gsd": 1.5}, 0.3 * math.exp(math.log(1.5) ** 2 / 2)),
    ({"dist": "triangular", "low": 0.05, "mode": 0.1, "high": 0.2}, 0.35 / 3),
    ({"dist": "normal", "mean": 1, "sd": 0.2, "low": 0.9},
     stats.truncnorm(-0.5, np.inf, loc=1, scale=0.2).mean()),
])
def test_large_sample_means(table, analytic_mean):
    # A random design of 200 000 draws: the sample mean lies within 5 standard errors of
    # the analytic mean (5 sigma: common practice, no source; fails with prob ~6e-7).
    d = make_distribution(table)
    n = 200_000
    x = map_to_parameters(make_design(["p"], "random", n, seed=11, sobol_indices=False),
                          {"p": d})[:, 0]
    sd = stats.tstd(x)
    assert abs(x.mean() - analytic_mean) < 5 * sd / math.sqrt(n)
    assert d.mean == pytest.approx(analytic_mean, rel=1e-10)


def test_describe():
    assert make_distribution({"dist": "uniform", "low": 2, "high": 10}).describe() == "uniform(2, 10)"
    text = make_distribution({"dist": "normal", "mean": 1, "sd": 0.2, "low": 0}).describe()
    assert text.startswith("normal(1, 0.2)") and "[0" in text


# ---------------------------------------------------------------- check_parameter

GOOD = [
    1.0, 3, -2.5,
    {"dist": "uniform", "low": 2, "high": 10},
    {"dist": "loguniform", "low": 0.2, "high": 5, "nominal": 1},
    {"dist": "normal", "mean": 1, "sd": 0.2},
    {"dist": "normal", "mean": 1, "sd": 0.2, "low": 0},
    {"dist": "normal", "mean": 1, "sd": 0.2, "low": 0, "high": 2, "nominal": 1.5},
    {"dist": "lognormal", "median": 0.3, "gsd": 1.5},
    {"dist": "triangular", "low": 0.05, "mode": 0.05, "high": 0.2},
]


@pytest.mark.parametrize("value", GOOD)
def test_check_parameter_accepts(value):
    assert check_parameter("K", value) == []


BAD = [
    # (value, expected key, word expected in the problem)
    (True, "K", "true/false"),
    ("3", "K", "number or a distribution"),
    ([1, 2], "K", "number or a distribution"),
    (math.inf, "K", "finite"),
    ({"low": 1, "high": 2}, "K.dist", "dist"),
    ({"dist": "gamma", "a": 1}, "K.dist", "loguniform"),          # lists the known ones
    ({"dist": "uniform", "low": 1}, "K.high", "missing"),
    ({"dist": "uniform", "low": 1, "high": 2, "mode": 1.5}, "K.mode", "unknown key"),
    ({"dist": "uniform", "low": "1", "high": 2}, "K.low", "number"),
    ({"dist": "uniform", "low": True, "high": 2}, "K.low", "number"),
    ({"dist": "uniform", "low": 1, "high": math.nan}, "K.high", "finite"),
    ({"dist": "uniform", "low": 2, "high": 2}, "K.low", "below high"),
    ({"dist": "loguniform", "low": 0, "high": 2}, "K.low", "low > 0"),
    ({"dist": "loguniform", "low": -1, "high": 2}, "K.low", "low > 0"),
    ({"dist": "normal", "mean": 1, "sd": 0}, "K.sd", "positive"),
    ({"dist": "normal", "mean": 1, "sd": -1}, "K.sd", "positive"),
    ({"dist": "normal", "mean": 1, "sd": 0.2, "low": 3, "high": 1}, "K.low", "below high"),
    # P(Z > 10) is about 7.6e-24 (source: standard normal tail; scipy.stats.norm.sf(10))
    ({"dist": "normal", "mean": 0, "sd": 1, "low": 10}, "K.low", "negligible"),
    ({"dist": "normal", "mean": 0, "sd": 1, "high": -10}, "K.high", "negligible"),
    ({"dist": "lognormal", "median": 0.3, "gsd": 1.0}, "K.gsd", "exceed 1"),
    ({"dist": "lognormal", "median": 0, "gsd": 2}, "K.median", "positive"),
    ({"dist": "triangular", "low": 0, "mode": 3, "high": 2}, "K.mode", "[low, high]"),
    ({"dist": "uniform", "low": 2, "high": 10, "nominal": 11}, "K.nominal", "outside"),
    ({"dist": "lognormal", "median": 1, "gsd": 2, "nominal": -1}, "K.nominal", "outside"),
    ({"dist": "normal", "mean": 1, "sd": 0.2, "low": 0, "nominal": -0.1}, "K.nominal", "outside"),
]


@pytest.mark.parametrize("value, key, word", BAD)
def test_check_parameter_rejects(value, key, word):
    # source: the [parameters] rules of design.md
    problems = check_parameter("K", value)
    assert problems, value
    keys = [k for k, _ in problems]
    assert key in keys
    assert any(word in p for k, p in problems if k == key)


def test_unknown_dist_lists_known_ones():
    (key, problem), = check_parameter("K", {"dist": "beta"})
    assert all(name in problem for name in DISTRIBUTIONS)


def test_make_distribution_refuses_bad_table():
    with pytest.raises(InputError) as err:
        make_distribution({"dist": "uniform", "low": 3, "high": 1}, name="K")
    assert err.value.key == "K.low" and err.value.table == "parameters"


# ---------------------------------------------------------------- designs

@pytest.mark.parametrize("kind", ["random", "lhs", "sobol"])
def test_plain_design_shape_determinism_and_range(kind):
    d = make_design(["a", "b", "c"], kind, 100, seed=3, sobol_indices=False)
    assert isinstance(d, Design)
    assert d.unit.shape == (100, 3) and d.n_rows == 100
    assert np.all(d.block == "draw") and d.independent.all()
    assert np.all((d.unit > 0) & (d.unit < 1))
    again = make_design(["a", "b", "c"], kind, 100, seed=3, sobol_indices=False)
    np.testing.assert_array_equal(d.unit, again.unit)
    other = make_design(["a", "b", "c"], kind, 100, seed=4, sobol_indices=False)
    assert not np.array_equal(d.unit, other.unit)


def test_lhs_stratification():
    # source: McKay, Beckman & Conover (1979), Technometrics 21:239 — each of the n equal
    # strata of every coordinate holds exactly one of the n points
    n = 97
    d = make_design(["a", "b", "c", "d"], "lhs", n, seed=5, sobol_indices=False)
    for j in range(4):
        np.testing.assert_array_equal(np.sort(np.floor(d.unit[:, j] * n)), np.arange(n))


def test_sobol_design_is_a_net():
    # source: Sobol' (1967) / Owen (1995): 2^m points of a (scrambled) Sobol' sequence are a
    # digital net, so every coordinate puts exactly one point in each interval [i/2^m, (i+1)/2^m)
    n = 256
    d = make_design(["a", "b", "c"], "sobol", n, seed=8, sobol_indices=False)
    for j in range(3):
        np.testing.assert_array_equal(np.sort(np.floor(d.unit[:, j] * n)), np.arange(n))


def test_sobol_design_any_size_without_warning():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        d = make_design(["a", "b"], "sobol", 100, seed=1, sobol_indices=False)
    assert d.unit.shape == (100, 2)


@pytest.mark.parametrize("second_order", [False, True])
def test_saltelli_design_reproduces_salib(second_order):
    # reference library: SALib.sample.sobol.sample on [0, 1]^k with the same seed
    names = ["a", "b", "c"]
    n = 64
    d = make_design(names, "sobol", n, seed=21, sobol_indices=True, second_order=second_order)
    problem = {"num_vars": 3, "names": names, "bounds": [[0.0, 1.0]] * 3}
    reference = salib_sobol_sample.sample(problem, n, calc_second_order=second_order,
                                          seed=np.random.default_rng(21))
    per_row = 2 * 3 + 2 if second_order else 3 + 2
    assert d.unit.shape == (n * per_row, 3) == reference.shape
    np.testing.assert_array_equal(d.unit, reference)
    assert d.base_size == n and d.second_order is second_order and d.for_sobol_indices

    expected = ["A", "AB:a", "AB:b", "AB:c"]
    if second_order:
        expected += ["BA:a", "BA:b", "BA:c"]
    expected += ["B"]
    assert list(d.block[:per_row]) == expected
    assert list(d.block) == expected * n
    np.testing.assert_array_equal(d.independent, np.isin(d.block, ["A", "B"]))


def test_saltelli_cross_structure():
    # source: Saltelli (2002), Comput. Phys. Commun. 145:280 — AB^(j) is A with column j from B,
    # BA^(j) is B with column j from A
    names = ["a", "b", "c"]
    for kind in ("sobol", "lhs", "random"):
        d = make_design(names, kind, 32, seed=2, sobol_indices=True, second_order=True)
        groups = d.unit.reshape(32, 8, 3)
        a, b = groups[:, 0], groups[:, -1]
        assert not np.allclose(a, b)
        for j in range(3):
            ab, ba = groups[:, 1 + j], groups[:, 4 + j]
            for i in range(3):
                np.testing.assert_array_equal(ab[:, i], b[:, i] if i == j else a[:, i])
                np.testing.assert_array_equal(ba[:, i], a[:, i] if i == j else b[:, i])


def test_no_uncertain_parameter():
    d = make_design([], "sobol", 10, seed=1, sobol_indices=True)
    assert d.unit.shape == (10, 0)
    assert np.all(d.block == "draw") and d.independent.all() and not d.for_sobol_indices
    assert map_to_parameters(d, {}).shape == (10, 0)


def test_bad_design_arguments():
    with pytest.raises(ValueError):
        make_design(["a"], "grid", 10, seed=1, sobol_indices=False)
    with pytest.raises(ValueError):
        make_design(["a"], "lhs", 0, seed=1, sobol_indices=False)


def test_map_to_parameters_columns_and_finiteness():
    dists = {"x": make_distribution({"dist": "normal", "mean": 0, "sd": 1}),
             "y": make_distribution({"dist": "uniform", "low": -1, "high": 3})}
    d = make_design(["y", "x"], "random", 500, seed=9, sobol_indices=False)
    values = map_to_parameters(d, dists)
    assert values.shape == (500, 2)
    # reference library: scipy.stats inverse CDFs, column order = design.names
    np.testing.assert_allclose(values[:, 0], stats.uniform(-1, 4).ppf(d.unit[:, 0]))
    np.testing.assert_allclose(values[:, 1], stats.norm.ppf(d.unit[:, 1]))
    # a design point at the clipped edge still maps to a finite value
    edge = Design(unit=np.array([[0.0, 1.0]]).clip(1e-16, 1 - 1e-16), block=np.array(["draw"]),
                  independent=np.array([True]), names=("x", "y"), kind="random",
                  base_size=1, second_order=False)
    assert np.isfinite(map_to_parameters(edge, dists)).all()
    with pytest.raises(KeyError):
        map_to_parameters(d, {"x": dists["x"]})
