"""Two-parameter probability maps and the factor map's diagonal (issue 18, item 5).

Outside references: counts checked by direct per-set comparison with the bin edges
(pandas.cut on each axis, a different code path from numpy.histogram2d), shares by
plain division, and the diagonal's 95 % band against scipy.stats.binomtest's Wilson
interval.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.stats import binomtest

from poise.analysis.intervals import wilson_interval
from poise.report import write_report
from poise.report.factormap import diagonal_shares, thin
from poise.report.probmap import MIN_CELL, bin_edges, bins_per_axis, probability_grid

from test_report import NASTY_CLAIM, PLAIN_CLAIM, build_run


def _reference_counts(x, y, holds, x_edges, y_edges):
    """Per-bin counts with pandas.cut (closed on the right at the last edge only, as
    numpy.histogram2d bins are: every bin is [lo, hi) but the last is [lo, hi])."""
    xi = pd.cut(x, x_edges, right=False, labels=False)
    yi = pd.cut(y, y_edges, right=False, labels=False)
    xi = np.where(x == x_edges[-1], len(x_edges) - 2, xi)
    yi = np.where(y == y_edges[-1], len(y_edges) - 2, yi)
    sets = np.zeros((len(x_edges) - 1, len(y_edges) - 1), dtype=int)
    hits = np.zeros_like(sets)
    for i, j, h in zip(xi, yi, holds):      # reference loop: fine in a test
        sets[int(i), int(j)] += 1
        hits[int(i), int(j)] += bool(h)
    return sets, hits


def test_probability_grid_counts_and_shares():
    rng = np.random.default_rng(4)
    x = rng.uniform(2, 10, 3000)
    y = np.exp(rng.uniform(np.log(0.2), np.log(5), 3000))
    holds = (x * y > 6) ^ (rng.random(3000) < 0.1)
    x_edges, _ = bin_edges(x, {"dist": "uniform", "low": 2, "high": 10}, 6)
    y_edges, log = bin_edges(y, {"dist": "loguniform", "low": 0.2, "high": 5}, 5)
    assert log and np.allclose(y_edges[1:] / y_edges[:-1], (5 / 0.2) ** (1 / 5))  # equal ratios
    assert x_edges[0] == 2 and x_edges[-1] == 10                  # the stated bounds
    sets, successes, share = probability_grid(x, y, holds, x_edges, y_edges)
    ref_sets, ref_hits = _reference_counts(x, y, holds, x_edges, y_edges)
    assert (sets == ref_sets).all() and (successes == ref_hits).all()
    assert sets.sum() == 3000
    full = ref_sets >= MIN_CELL
    assert np.allclose(share[full], ref_hits[full] / ref_sets[full])
    assert np.isnan(share[~full]).all()


def test_bins_hold_about_thirty_sets():
    # floor(sqrt(n / 30)) bins per axis, at least 3 and at most 10
    assert bins_per_axis(2048) == 8 and bins_per_axis(100) == 3 and bins_per_axis(10**7) == 10


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    root = build_run(tmp_path_factory.mktemp("maps") / "run")
    write_report(root)
    return root


def test_probability_map_table_matches_the_sets_of_the_run(run_dir):
    table = pd.read_csv(run_dir / "tables" / "probability_map_claim01.csv")
    samples = pd.read_parquet(run_dir / "samples.parquet")
    outcomes = pd.read_parquet(run_dir / "outcomes.parquet")
    usable = outcomes[(outcomes["status"] == "ok") & outcomes["independent"]]
    values = samples.set_index("sample_id").loc[usable["sample_id"]]
    holds = usable[PLAIN_CLAIM].astype(bool).to_numpy()
    assert set(table["claim"]) == {PLAIN_CLAIM}
    for (x, y), part in table.groupby(["x", "y"], sort=False):
        x_edges = np.r_[part["x_low"].unique(), part["x_high"].max()]
        y_edges = np.r_[part["y_low"].unique(), part["y_high"].max()]
        ref_sets, ref_hits = _reference_counts(values[x].to_numpy(), values[y].to_numpy(), holds,
                                               x_edges, y_edges)
        assert part["sets"].sum() == len(usable) == 263    # every independent ok set, once
        assert (part["sets"].to_numpy() == ref_sets.ravel()).all()
        assert (part["holds"].to_numpy() == ref_hits.ravel()).all()
    # the plain claim was built from K alone: by ST (invented, K 0.70) K is in the first pair
    assert "K" in set(table.iloc[0][["x", "y"]])


def test_factor_map_diagonal_shares_and_band():
    rng = np.random.default_rng(9)
    values = rng.uniform(0, 1, 800)
    holds = rng.random(800) < values
    edges = np.linspace(0, 1, 9)
    held, failed, share = diagonal_shares(values, holds, edges)
    for i in range(8):
        inside = (values >= edges[i]) & ((values < edges[i + 1]) | (i == 7))
        assert held[i] == (inside & holds).sum() and failed[i] == (inside & ~holds).sum()
        assert share[i] == pytest.approx(held[i] / inside.sum())
        # the grey band: reference scipy.stats.binomtest(...).proportion_ci("wilson")
        ref = binomtest(int(held[i]), int(inside.sum())).proportion_ci(0.95, method="wilson")
        lo, hi = wilson_interval(int(held[i]), int(inside.sum()))
        assert (lo, hi) == pytest.approx((ref.low, ref.high), abs=1e-12)


def test_scatter_thinning_keeps_a_fixed_subset_in_order():
    frame = pd.DataFrame({"v": np.arange(10_000)})
    shown = thin(frame, 4000)
    assert len(shown) == 4000 and shown["v"].is_monotonic_increasing
    assert shown.equals(thin(frame, 4000))                     # same run, same picture


def test_maps_for_every_claim_that_varies(run_dir):
    figures = {p.name for p in (run_dir / "figures").iterdir()}
    assert {"probability_map_claim01.png", "probability_map_claim02.png",
            "probability_map_claim01.svg"} <= figures
    md = (run_dir / "report.md").read_text(encoding="utf-8")
    assert md.count("](figures/probability_map_claim") == 2
    assert "number in each bin is its count of sets" in md
    assert NASTY_CLAIM  # both claims vary in the fixture


def test_bin_counts_are_written_in_each_bin_or_once_when_all_equal():
    from matplotlib.figure import Figure

    from poise.report.probmap import _write_counts
    equal, varied = np.full((3, 3), 32), np.arange(9).reshape(3, 3) + 1
    share = np.full((3, 3), 0.5)
    centres = np.array([0.5, 1.5, 2.5])
    for sets in (equal, varied):
        ax = Figure().add_subplot()
        _write_counts(ax, sets, share, centres, centres)
        if sets is equal:
            assert ax.get_title(loc="left") == "32 sets in every bin" and not ax.texts
        else:
            assert sorted(int(t.get_text()) for t in ax.texts) == list(range(1, 10))
