"""Tests of poise.analysis.intervals (Wilson score intervals)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from poise.analysis.intervals import wilson_interval


@pytest.mark.parametrize("k, n, lo, hi", [
    # source: Newcombe (1998), Statistics in Medicine 17:857-872, Table II, method 3
    # (score method without continuity correction), 95 % limits to 4 decimals (from memory)
    (81, 263, 0.2553, 0.3662),
    (15, 148, 0.0624, 0.1605),
    (0, 20, 0.0000, 0.1611),
    (1, 29, 0.0061, 0.1718),
])
def test_newcombe_table(k, n, lo, hi):
    got = wilson_interval(k, n)
    assert got[0] == pytest.approx(lo, abs=5e-5)
    assert got[1] == pytest.approx(hi, abs=5e-5)


@pytest.mark.parametrize("confidence", [0.8, 0.95, 0.99])
def test_matches_scipy_binomtest(confidence):
    # reference library: scipy.stats.binomtest(k, n).proportion_ci(method="wilson")
    ks, ns = [], []
    for n in (1, 2, 7, 30, 263, 4096):
        for k in sorted({0, 1, n // 3, n // 2, n - 1, n}):
            ks.append(k)
            ns.append(n)
    lo, hi = wilson_interval(np.array(ks), np.array(ns), confidence)
    assert lo.shape == hi.shape == (len(ks),)
    for k, n, a, b in zip(ks, ns, lo, hi):
        ref = stats.binomtest(k, n).proportion_ci(confidence_level=confidence, method="wilson")
        assert a == pytest.approx(ref.low, abs=1e-12)
        assert b == pytest.approx(ref.high, abs=1e-12)


def test_limits_solve_the_score_equation():
    # source: Wilson (1927), JASA 22:209 — the limits are the roots p of
    # (k/n - p)^2 = z^2 p (1 - p) / n
    z = stats.norm.ppf(0.975)
    k, n = np.array([3, 40, 97]), np.array([10, 50, 1000])
    for bound in wilson_interval(k, n):
        np.testing.assert_allclose((k / n - bound) ** 2, z**2 * bound * (1 - bound) / n, rtol=1e-10)


def test_ends_and_empty():
    lo, hi = wilson_interval(0, 50)
    assert lo == 0.0 and 0 < hi < 0.1
    lo, hi = wilson_interval(50, 50)
    assert hi == 1.0 and 0.9 < lo < 1
    # n == 0: no information, the whole unit interval (documented choice)
    assert wilson_interval(0, 0) == (0.0, 1.0)
    lo, hi = wilson_interval(np.array([0, 2]), np.array([0, 4]))
    assert lo[0] == 0.0 and hi[0] == 1.0 and 0 < lo[1] < 0.5 < hi[1] < 1
    assert isinstance(wilson_interval(3, 10)[0], float)


def test_rejects_impossible_counts():
    with pytest.raises(ValueError):
        wilson_interval(5, 4)
    with pytest.raises(ValueError):
        wilson_interval(-1, 4)
    with pytest.raises(ValueError):
        wilson_interval(1, 4, confidence=1.0)
