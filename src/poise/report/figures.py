"""Figures built from summary numbers: claim probabilities, stable counts, Sobol
indices and the convergence of each claim's estimate."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from .style import OKABE_ITO, label_text, log_ticks, new_figure

__all__ = ["claims_figure", "stable_count_figure", "sobol_figure", "convergence_figure"]


def _errors(values, lows, highs) -> np.ndarray:
    """Asymmetric error-bar lengths; NaN-safe and never negative."""
    v = np.asarray(values, dtype=float)
    below = np.clip(v - np.asarray(lows, dtype=float), 0, None)
    above = np.clip(np.asarray(highs, dtype=float) - v, 0, None)
    return np.nan_to_num(np.vstack([below, above]))


def _num(value) -> float:
    return math.nan if value is None else float(value)


def _pair(pair) -> tuple[float, float]:
    if not pair or len(pair) != 2 or pair[0] is None or pair[1] is None:
        return math.nan, math.nan
    return float(pair[0]), float(pair[1])


def claims_figure(claims: dict, order: list[str]) -> Figure | None:
    """Each claim's probability as a dot with its 95 % interval as a bar."""
    names = [n for n in order if n in claims]
    if not names:
        return None
    p = np.array([_num(claims[n].get("probability")) for n in names])
    if np.isnan(p).all():
        return None
    lo, hi = np.array([_pair(claims[n].get("ci95")) for n in names]).T
    fig = new_figure(6.4, 0.9 + 0.45 * len(names))
    ax = fig.add_subplot()
    y = np.arange(len(names))[::-1]
    ax.errorbar(p, y, xerr=_errors(p, lo, hi), fmt="o", color=OKABE_ITO["blue"],
                ecolor=OKABE_ITO["black"], elinewidth=1.5, capsize=4, markersize=6)
    for yi, pi in zip(y, p):
        if not math.isnan(pi):
            ax.annotate(f"{pi:.3f}", (pi, yi), xytext=(0, 7), textcoords="offset points",
                        ha="center", fontsize=8)
    ax.set_yticks(y, [label_text(n, 32) for n in names])
    ax.set_ylim(-0.7, len(names) - 0.3)
    ax.set_xlim(-0.02, 1.02)
    ax.set_xlabel("probability that the claim holds (dot) with 95 % interval (bar)")
    ax.grid(axis="x", color="#DDDDDD", linewidth=0.6)
    ax.set_axisbelow(True)
    return fig


def stable_count_figure(stable_count: dict) -> Figure | None:
    """Bar per number of stable steady states, with 95 % interval."""
    if not stable_count:
        return None
    keys = sorted(stable_count, key=lambda k: (0, int(k)) if str(k).isdigit() else (1, str(k)))
    p = np.array([_num(stable_count[k].get("probability")) for k in keys])
    lo, hi = np.array([_pair(stable_count[k].get("ci95")) for k in keys]).T
    fig = new_figure(max(3.2, 1.2 + 0.7 * len(keys)), 3.2)
    ax = fig.add_subplot()
    x = np.arange(len(keys))
    ax.bar(x, np.nan_to_num(p), color=OKABE_ITO["sky blue"], edgecolor=OKABE_ITO["black"],
           hatch="..", linewidth=0.8, width=0.6)
    ax.errorbar(x, p, yerr=_errors(p, lo, hi), fmt="none", ecolor=OKABE_ITO["black"], capsize=4)
    ax.set_xticks(x, [label_text(k, 12) for k in keys])
    ax.set_xlabel("number of stable steady states")
    ax.set_ylabel("share of parameter sets")
    ax.set_ylim(0, 1.05)
    return fig


def sobol_figure(claim: str, entry: dict, rough: dict[str, bool]) -> Figure | None:
    """First-order (solid) and total (hatched) indices per parameter, with intervals."""
    st = entry.get("ST", {})
    s1 = entry.get("S1", {})
    params = list(st or s1)
    if not params:
        return None
    params.sort(key=lambda q: (-np.nan_to_num(_num(st.get(q)), nan=-1.0), q))
    s1v = np.array([_num(s1.get(q)) for q in params])
    stv = np.array([_num(st.get(q)) for q in params])
    s1lo, s1hi = np.array([_pair(entry.get("S1_ci95", {}).get(q)) for q in params]).T
    stlo, sthi = np.array([_pair(entry.get("ST_ci95", {}).get(q)) for q in params]).T
    fig = new_figure(6.4, 1.1 + 0.5 * len(params))
    ax = fig.add_subplot()
    y = np.arange(len(params))[::-1].astype(float)
    h = 0.38
    ax.barh(y + h / 2, np.nan_to_num(s1v), height=h, color=OKABE_ITO["blue"],
            edgecolor=OKABE_ITO["black"], linewidth=0.6, label="first order S1 (alone)")
    ax.barh(y - h / 2, np.nan_to_num(stv), height=h, color="white", hatch="///",
            edgecolor=OKABE_ITO["vermillion"], linewidth=0.8,
            label="total ST (alone and with others)")
    ax.errorbar(s1v, y + h / 2, xerr=_errors(s1v, s1lo, s1hi), fmt="none",
                ecolor=OKABE_ITO["black"], capsize=3, linewidth=1)
    ax.errorbar(stv, y - h / 2, xerr=_errors(stv, stlo, sthi), fmt="none",
                ecolor=OKABE_ITO["black"], capsize=3, linewidth=1)
    labels = [label_text(q, 20, 1) + ("  (rough)" if rough.get(q) else "") for q in params]
    ax.set_yticks(y, labels)
    ax.axvline(0, color=OKABE_ITO["black"], linewidth=0.8)
    finite = np.concatenate([s1lo, stlo, s1hi, sthi, s1v, stv])
    finite = finite[np.isfinite(finite)]
    left = min(-0.05, float(finite.min()) - 0.02) if finite.size else -0.05
    right = max(0.3, float(finite.max()) + 0.05) if finite.size else 1.0
    ax.set_xlim(left, min(right, 1.1))
    ax.set_xlabel("Sobol index (bar) with 95 % interval (whisker)")
    ax.set_title("Claim: " + label_text(claim, 70), loc="left")
    fig.legend(*ax.get_legend_handles_labels(), loc="outside lower center", ncols=2)
    return fig


def convergence_figure(frame: pd.DataFrame, order: list[str]) -> Figure | None:
    """Running probability of each claim with its Wilson band, against sample size."""
    names = [n for n in order if n in set(frame["claim"])] if not frame.empty else []
    if not names:
        return None
    fig = new_figure(6.4, 0.6 + 1.7 * len(names))
    axes = fig.subplots(len(names), 1, sharex=True, squeeze=False)[:, 0]
    for ax, name in zip(axes, names):
        part = frame.loc[frame["claim"] == name]
        n = part["n"].to_numpy()
        ax.fill_between(n, part["ci95_low"], part["ci95_high"], color=OKABE_ITO["sky blue"],
                        alpha=0.45, linewidth=0, label="95 % Wilson interval")
        ax.plot(n, part["probability"], color=OKABE_ITO["blue"], linewidth=1.5,
                label="running estimate")
        final = float(part["probability"].iloc[-1])
        ax.axhline(final, color=OKABE_ITO["black"], linestyle="--", linewidth=0.8,
                   label="estimate from the full sample")
        ax.annotate(f"{final:.3f}", (1.0, final), xycoords=("axes fraction", "data"),
                    xytext=(3, 0), textcoords="offset points", va="center", fontsize=8)
        ax.set_ylim(-0.02, 1.02)
        log_ticks(ax.xaxis, ax.set_xscale)
        ax.set_ylabel("probability")
        ax.set_title("Claim: " + label_text(name, 70, 1), loc="left")
    fig.legend(*axes[0].get_legend_handles_labels(), loc="outside upper center", ncols=3)
    axes[-1].set_xlabel("number of independent parameter sets used (log scale)")
    return fig

