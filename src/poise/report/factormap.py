"""Factor mapping (Hornberger & Spear 1981): a scatter matrix of the most influential
parameters, each point a parameter set marked by whether a claim holds there. The
diagonal shows, along each parameter, the share of sets where the claim holds per bin
with its 95 % Wilson band, over the histograms of the sets where it holds and where it
fails, on the parameter's own scale (log bins for log-distributed parameters)."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from .probmap import bin_edges
from .style import OKABE_ITO, OUTCOME_STYLE, label_text, log_ticks, new_figure

__all__ = ["MAX_FACTORS", "SCATTER_POINTS", "DIAGONAL_BINS", "influential_parameters",
           "thin", "diagonal_shares", "factor_map_figure"]

MAX_FACTORS = 3   # pairs beyond these are in the two-parameter maps
SCATTER_POINTS = 4_000   # points drawn per scatter panel (a fixed random subset)
DIAGONAL_BINS = 20
THIN_SEED = 20_240_601   # fixed: the same run always gives the same picture
HISTOGRAM_HEIGHT = 0.3   # the diagonal's distribution outlines fill the bottom of the panel


def influential_parameters(params: list[str], sobol_entry: dict | None,
                           regional: dict[str, dict], limit: int = MAX_FACTORS) -> list[str]:
    """Up to ``limit`` parameters, by total Sobol index when there is one, else by KS distance."""
    def score(name: str) -> tuple:
        st = math.nan
        if sobol_entry and sobol_entry.get("method") == "sobol":
            value = (sobol_entry.get("ST") or {}).get(name)
            st = math.nan if value is None else float(value)
        ks = float(regional.get(name, {}).get("ks", math.nan))
        return (-np.nan_to_num(st, nan=-1.0), -np.nan_to_num(ks, nan=-1.0), params.index(name))
    return sorted(params, key=score)[:limit]


def thin(frame: pd.DataFrame, limit: int = SCATTER_POINTS) -> pd.DataFrame:
    """At most ``limit`` rows, a fixed random subset in the original order."""
    if len(frame) <= limit:
        return frame
    rng = np.random.default_rng(THIN_SEED)
    return frame.iloc[np.sort(rng.choice(len(frame), size=limit, replace=False))]


def diagonal_shares(values: np.ndarray, holds: np.ndarray, edges: np.ndarray):
    """Per bin: sets where the claim holds, sets where it fails, and the share holding
    (NaN in an empty bin). Bins as in ``numpy.histogram``."""
    held, _ = np.histogram(values[holds], bins=edges)
    failed, _ = np.histogram(values[~holds], bins=edges)
    total = held + failed
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(total > 0, held / total, np.nan)
    return held, failed, share


def factor_map_figure(claim: str, values: pd.DataFrame, outcome: pd.Series, names: list[str],
                      regional: dict[str, dict], specs: dict):
    """Lower triangle: pairwise scatter (thinned); diagonal: share holding along each
    parameter over the stacked histograms, with the KS distance. Returns None when the
    claim never varies or no parameter is left."""
    known = outcome.notna().to_numpy()
    holds = outcome.fillna(False).astype(bool).to_numpy()
    if not names or holds[known].all() or not holds[known].any():
        return None
    frame = values.loc[known, names].copy()
    frame["__holds__"] = holds[known]
    k = len(names)
    size = 1.9 * k + 0.8
    fig = new_figure(max(size, 4.0), max(size, 3.6))
    axes = fig.subplots(k, k, squeeze=False)
    edges = {n: bin_edges(frame[n].to_numpy(dtype=float), specs.get(n, {}), DIAGONAL_BINS)
             for n in names}
    shown = thin(frame)
    groups = {flag: shown.loc[shown["__holds__"] == flag] for flag in (False, True)}
    for i, row_name in enumerate(names):
        for j, col_name in enumerate(names):
            ax = axes[i, j]
            if j > i:
                ax.set_axis_off()
                continue
            if i == j:
                _diagonal(ax, frame, col_name, edges[col_name], regional.get(col_name, {}))
            else:
                for flag in (False, True):
                    colour, marker, _ = OUTCOME_STYLE[flag]
                    part = groups[flag]
                    ax.scatter(part[col_name], part[row_name], s=6, c=colour, marker=marker,
                               alpha=0.45, linewidths=0.7 if marker == "x" else 0, rasterized=True)
                if edges[row_name][1]:
                    log_ticks(ax.yaxis, ax.set_yscale)
                if edges[col_name][1]:
                    log_ticks(ax.xaxis, ax.set_xscale)
                ax.set_xlim(edges[col_name][0][0], edges[col_name][0][-1])
                ax.set_ylim(edges[row_name][0][0], edges[row_name][0][-1])
            if i == k - 1:
                ax.set_xlabel(label_text(col_name, 18, 1))
            else:
                ax.tick_params(labelbottom=False)
            if j == 0 and i > 0:
                ax.set_ylabel(label_text(row_name, 18, 1))
            ax.tick_params(labelsize=7)
    handles = [axes[0, 0].scatter([], [], s=20, c=OUTCOME_STYLE[f][0], marker=OUTCOME_STYLE[f][1],
                                  label=OUTCOME_STYLE[f][2]) for f in (True, False)]
    handles += axes[0, 0].plot([], [], color=OKABE_ITO["black"], marker="o", markersize=3,
                               linewidth=1.2, label="share holding, 95 % band")
    fig.legend(handles=handles, loc="outside lower center", ncols=3)
    fig.suptitle("Claim: " + label_text(claim, 60, 1), x=0.02, ha="left", fontsize=10)
    return fig


def _diagonal(ax, frame: pd.DataFrame, name: str, binning, result: dict) -> None:
    from ..analysis.intervals import wilson_interval

    edges, log = binning
    values = frame[name].to_numpy(dtype=float)
    holds = frame["__holds__"].to_numpy()
    held, failed, share = diagonal_shares(values, holds, edges)
    # the two distributions as outlines along the bottom third, each as a density so
    # their shapes compare whatever the claim's overall probability
    widths = np.diff(np.log(edges)) if log else np.diff(edges)  # per unit of the axis' scale
    densities = [counts / max(counts.sum(), 1) / widths for counts in (held, failed)]
    scale = HISTOGRAM_HEIGHT / max(float(max(d.max() for d in densities)), 1e-300)
    for flag, density in zip((True, False), densities):
        ax.stairs(density * scale, edges, color=OUTCOME_STYLE[flag][0], linewidth=1.0,
                  linestyle="-" if flag else "--")
    centres = np.sqrt(edges[:-1] * edges[1:]) if log else (edges[:-1] + edges[1:]) / 2
    lo, hi = wilson_interval(held, held + failed)
    shown = (held + failed) > 0
    ax.fill_between(centres[shown], lo[shown], hi[shown], color=OKABE_ITO["grey"], alpha=0.25,
                    linewidth=0)
    ax.plot(centres[shown], share[shown], color=OKABE_ITO["black"], marker="o", markersize=2.5,
            linewidth=1.2)
    if log:
        log_ticks(ax.xaxis, ax.set_xscale)
    ax.set_xlim(edges[0], edges[-1])
    ax.set_ylim(0, 1.02)
    ax.set_yticks([0, 0.5, 1])
    ax.yaxis.tick_right()
    ks = result.get("ks", math.nan)
    text = "KS n/a" if math.isnan(ks) else f"KS = {ks:.2f}"
    ax.set_title(text, fontsize=8, loc="left", color="#333333")
