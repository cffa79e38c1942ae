"""Two-parameter maps: the share of parameter sets where a claim holds over bins of two
parameters, the other parameters averaged out (each bin pools every set whose two
values fall in it, whatever the others are). Where the share changes from near 0 to
near 1 lies the boundary of the claim, e.g. a stability boundary."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

__all__ = ["MIN_CELL", "MAX_PAIRS", "map_pairs", "bin_edges", "bins_per_axis",
           "probability_grid", "grid_frame", "probability_map_figure"]

MIN_CELL = 5          # fewer sets than this in a bin: no share is shown there
MAX_PAIRS = 3
SETS_PER_CELL = 30    # aim for about this many sets per bin on average
LOG_DISTRIBUTIONS = ("loguniform", "lognormal")


def map_pairs(params: list[str], entry: dict | None, regional: dict[str, dict],
              limit: int = MAX_PAIRS) -> tuple[list[tuple[str, str]], str]:
    """The most influential pairs of parameters for one claim, and the rule used.

    By the second-order Sobol index S2 where it was computed; else all pairs among
    the three parameters with the largest total index ST; without Sobol indices,
    among the three with the largest KS distance.
    """
    entry = entry or {}
    s2 = {key: value for key, value in (entry.get("S2") or {}).items()
          if value is not None and math.isfinite(float(value))}
    if entry.get("method") == "sobol" and s2:
        pairs = []
        for key, value in sorted(s2.items(), key=lambda item: -float(item[1])):
            first, _, second = key.partition("|")
            if first in params and second in params:
                pairs.append((first, second))
        return pairs[:limit], "largest second-order Sobol index S2"
    if entry.get("method") == "sobol":
        scores, rule = entry.get("ST") or {}, "largest total Sobol index ST"
    else:
        scores = {p: r.get("ks") for p, r in regional.items()}
        rule = "largest KS distance"

    def score(name: str) -> float:
        value = scores.get(name)
        value = math.nan if value is None else float(value)
        return -math.inf if math.isnan(value) else value

    top = sorted(params, key=lambda p: (-score(p), params.index(p)))[:3]
    pairs = [(top[i], top[j]) for i in range(len(top)) for j in range(i + 1, len(top))]
    return pairs[:limit], f"parameters with the {rule}"


def bins_per_axis(n_sets: int) -> int:
    """Bins per parameter so that a bin holds about `SETS_PER_CELL` sets on average."""
    return int(np.clip(math.floor(math.sqrt(max(n_sets, 1) / SETS_PER_CELL)), 3, 10))


def is_log(spec: dict, values: np.ndarray) -> bool:
    """Log bins for parameters drawn on a log scale (and only positive values)."""
    return spec.get("dist") in LOG_DISTRIBUTIONS and bool(np.all(values > 0))


def bin_edges(values: np.ndarray, spec: dict, count: int) -> tuple[np.ndarray, bool]:
    """Equal bins on the parameter's own scale (logarithmic for log-distributed
    parameters), spanning its stated bounds where it has finite ones, else the data.

    Returns
    -------
    (edges, log) : the ``count + 1`` bin edges, and whether they are logarithmic.
    """
    finite = values[np.isfinite(values)]
    lo = float(spec["low"]) if _finite(spec.get("low")) else float(finite.min())
    hi = float(spec["high"]) if _finite(spec.get("high")) else float(finite.max())
    lo, hi = min(lo, float(finite.min())), max(hi, float(finite.max()))
    if hi <= lo:
        hi = lo + (abs(lo) or 1.0)
    if is_log(spec, finite) and lo > 0:
        return np.geomspace(lo, hi, count + 1), True
    return np.linspace(lo, hi, count + 1), False


def _finite(value) -> bool:
    try:
        return math.isfinite(float(value))
    except (TypeError, ValueError):
        return False


def probability_grid(x: np.ndarray, y: np.ndarray, holds: np.ndarray, x_edges: np.ndarray,
                     y_edges: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Sets, sets where the claim holds, and their share, per bin.

    Returns
    -------
    (sets, successes, share) : arrays of shape ``(len(x_edges) - 1, len(y_edges) - 1)``;
        ``share`` is NaN where a bin holds fewer than `MIN_CELL` sets. Bins are closed
        on the right at the last edge, as in ``numpy.histogram2d``.
    """
    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    holds = np.asarray(holds, dtype=bool)
    sets, _, _ = np.histogram2d(x, y, bins=[x_edges, y_edges])
    successes, _, _ = np.histogram2d(x[holds], y[holds], bins=[x_edges, y_edges])
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(sets >= MIN_CELL, successes / sets, np.nan)
    return sets.astype(np.int64), successes.astype(np.int64), share


def grid_frame(claim: str, pair: tuple[str, str], x_edges, y_edges, sets, successes,
               share) -> pd.DataFrame:
    """One row per bin (for ``tables/probability_map_claimNN.csv``)."""
    i, j = np.meshgrid(np.arange(len(x_edges) - 1), np.arange(len(y_edges) - 1), indexing="ij")
    i, j = i.ravel(), j.ravel()
    return pd.DataFrame({
        "claim": claim, "x": pair[0], "x_low": np.asarray(x_edges)[i],
        "x_high": np.asarray(x_edges)[i + 1], "y": pair[1], "y_low": np.asarray(y_edges)[j],
        "y_high": np.asarray(y_edges)[j + 1], "sets": sets.ravel(), "holds": successes.ravel(),
        "share": share.ravel()})


def probability_map_figure(claim: str, values: pd.DataFrame, outcome: pd.Series,
                           pairs: list[tuple[str, str]], specs: dict):
    """Heat maps of the share of sets where the claim holds, one panel per pair, with
    the number of sets written in each bin. Returns (figure, grids) or (None, [])
    when the claim never varies or no pair is left."""
    from matplotlib.colors import Normalize

    from .style import SHARE_COLORMAP, label_text, log_ticks, new_figure

    known = outcome.notna().to_numpy()
    holds = outcome.fillna(False).astype(bool).to_numpy()[known]
    pairs = [(a, b) for a, b in pairs if a in values.columns and b in values.columns]
    if not pairs or holds.all() or not holds.any():
        return None, []
    frame = values.loc[known]
    count = bins_per_axis(len(frame))
    fig = new_figure(0.6 + 3.0 * len(pairs), 3.4)
    axes = fig.subplots(1, len(pairs), squeeze=False)[0]
    norm = Normalize(0.0, 1.0)
    grids, mesh = [], None
    for ax, (a, b) in zip(axes, pairs):
        xa, yb = frame[a].to_numpy(dtype=float), frame[b].to_numpy(dtype=float)
        x_edges, x_log = bin_edges(xa, specs.get(a, {}), count)
        y_edges, y_log = bin_edges(yb, specs.get(b, {}), count)
        sets, successes, share = probability_grid(xa, yb, holds, x_edges, y_edges)
        grids.append(((a, b), x_edges, y_edges, sets, successes, share))
        mesh = ax.pcolormesh(x_edges, y_edges, np.ma.masked_invalid(share.T), cmap=SHARE_COLORMAP,
                             norm=norm, edgecolors="white", linewidth=0.3)
        ax.set_facecolor("#DDDDDD")  # bins with too few sets stay grey
        _write_counts(ax, sets, share, _centres(x_edges, x_log), _centres(y_edges, y_log))
        if x_log:
            log_ticks(ax.xaxis, ax.set_xscale)
        if y_log:
            log_ticks(ax.yaxis, ax.set_yscale)
        ax.set_xlim(x_edges[0], x_edges[-1])
        ax.set_ylim(y_edges[0], y_edges[-1])
        ax.set_xlabel(label_text(a, 22, 1))
        ax.set_ylabel(label_text(b, 22, 1))
        ax.tick_params(labelsize=7)
    fig.colorbar(mesh, ax=list(axes), label="share of sets where the claim holds", shrink=0.9)
    fig.suptitle("Claim: " + label_text(claim, 70, 1) + "   (number in a bin, or above a panel "
                 "whose bins all hold the same number: sets there)", x=0.02, ha="left", fontsize=9)
    return fig, grids


def _write_counts(ax, sets: np.ndarray, share: np.ndarray, cx: np.ndarray, cy: np.ndarray) -> None:
    """The number of sets in each bin. A balanced design (a Sobol' sequence puts exactly
    as many points in every such bin) gives one number for all bins: it is written once
    above the panel instead of in each of them, which saves drawing time."""
    if sets.min() == sets.max():
        ax.set_title(f"{int(sets.flat[0])} sets in every bin", fontsize=7, loc="left",
                     color="#333333")
        return
    for i in range(sets.shape[0]):
        for j in range(sets.shape[1]):
            dark = not np.isnan(share[i, j]) and share[i, j] < 0.35  # cividis is dark at 0
            ax.text(cx[i], cy[j], str(sets[i, j]), ha="center", va="center", fontsize=5.5,
                    color="white" if dark else "black").set_in_layout(False)


def _centres(edges: np.ndarray, log: bool) -> np.ndarray:
    edges = np.asarray(edges, dtype=float)
    if log:
        return np.sqrt(edges[:-1] * edges[1:])  # geometric centres of log bins
    return (edges[:-1] + edges[1:]) / 2
