"""Factor mapping: scatter matrix of the most influential parameters, each point a
parameter set coloured by whether a claim holds there (Hornberger & Spear 1981)."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

from .style import OUTCOME_STYLE, label_text, new_figure, subsample

__all__ = ["MAX_FACTORS", "influential_parameters", "factor_map_figure"]

MAX_FACTORS = 4


def influential_parameters(params: list[str], sobol_entry: dict | None,
                           regional: dict[str, dict], limit: int = MAX_FACTORS) -> list[str]:
    """Up to ``limit`` parameters, by total Sobol index when there is one, else by KS distance."""
    def score(name: str) -> tuple:
        st = math.nan
        if sobol_entry and sobol_entry.get("method") == "sobol":
            value = sobol_entry.get("ST", {}).get(name)
            st = math.nan if value is None else float(value)
        ks = float(regional.get(name, {}).get("ks", math.nan))
        return (-np.nan_to_num(st, nan=-1.0), -np.nan_to_num(ks, nan=-1.0), name)
    return sorted(params, key=score)[:limit]


def _log_axis(spec: dict, values: np.ndarray) -> bool:
    """Log axes for parameters drawn on a log scale (and only positive values)."""
    return spec.get("dist") in ("loguniform", "lognormal") and bool(np.all(values > 0))


def factor_map_figure(claim: str, values: pd.DataFrame, outcome: pd.Series, names: list[str],
                      regional: dict[str, dict], specs: dict) -> Figure | None:
    """Lower triangle: pairwise scatter; diagonal: the two marginal histograms with
    the KS distance. Returns None when the claim never varies or no parameter is left."""
    known = outcome.notna().to_numpy()
    holds = outcome.fillna(False).astype(bool).to_numpy()
    if not names or holds[known].all() or not holds[known].any():
        return None
    frame = values.loc[known, names].copy()
    frame["__holds__"] = holds[known]
    frame = subsample(frame)
    k = len(names)
    size = 1.9 * k + 0.8
    fig = new_figure(max(size, 4.0), max(size, 3.6))
    axes = fig.subplots(k, k, squeeze=False)
    logs = {n: _log_axis(specs.get(n, {}), frame[n].to_numpy()) for n in names}
    groups = {flag: frame.loc[frame["__holds__"] == flag] for flag in (False, True)}
    for i, row_name in enumerate(names):
        for j, col_name in enumerate(names):
            ax = axes[i, j]
            if j > i:
                ax.set_axis_off()
                continue
            if i == j:
                _diagonal(ax, groups, col_name, logs[col_name], regional.get(col_name, {}))
            else:
                for flag in (False, True):
                    colour, marker, _ = OUTCOME_STYLE[flag]
                    part = groups[flag]
                    ax.scatter(part[col_name], part[row_name], s=6, c=colour, marker=marker,
                               alpha=0.45, linewidths=0.7 if marker == "x" else 0,
                               rasterized=len(part) > 2000)
                if logs[row_name]:
                    _log_scale(ax.yaxis, ax.set_yscale)
                if logs[col_name]:
                    _log_scale(ax.xaxis, ax.set_xscale)
            if i == k - 1:
                ax.set_xlabel(label_text(col_name, 18, 1))
            else:
                ax.tick_params(labelbottom=False)
            if j == 0 and i > 0:
                ax.set_ylabel(label_text(row_name, 18, 1))
            ax.tick_params(labelsize=7)
    handles = [axes[0, 0].scatter([], [], s=20, c=OUTCOME_STYLE[f][0], marker=OUTCOME_STYLE[f][1],
                                  label=OUTCOME_STYLE[f][2]) for f in (True, False)]
    fig.legend(handles=handles, loc="outside upper right", ncols=2)
    fig.suptitle("Claim: " + label_text(claim, 60, 1), x=0.02, ha="left", fontsize=10)
    return fig


def _log_scale(axis, set_scale) -> None:
    """Log scale with a few plain-number ticks (1, 2, 5 per decade) and no crowded minor labels."""
    set_scale("log")
    axis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
    axis.set_major_formatter(FuncFormatter(lambda value, _pos: f"{value:g}"))
    axis.set_minor_formatter(NullFormatter())


def _diagonal(ax, groups: dict, name: str, log: bool, result: dict) -> None:
    values = np.concatenate([groups[False][name].to_numpy(), groups[True][name].to_numpy()])
    lo, hi = float(np.min(values)), float(np.max(values))
    if log:
        bins = np.geomspace(lo, hi, 25) if hi > lo else 25
        _log_scale(ax.xaxis, ax.set_xscale)
    else:
        bins = np.linspace(lo, hi, 25) if hi > lo else 25
    for flag, style in ((True, "-"), (False, "--")):
        colour = OUTCOME_STYLE[flag][0]
        ax.hist(groups[flag][name], bins=bins, density=True, histtype="step", color=colour,
                linestyle=style, linewidth=1.4)
    ax.set_yticks([])
    ks = result.get("ks", math.nan)
    text = "KS n/a" if math.isnan(ks) else f"KS = {ks:.2f}"
    ax.set_title(text, fontsize=8, loc="left", color="#333333")
    ax.spines["left"].set_visible(False)
