"""Where the sampled steady states sit: trace–determinant plane (two-dimensional
models) or the rightmost eigenvalue in the complex plane (larger models)."""

from __future__ import annotations

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from .content import CLASS_ORDER
from .style import CLASS_STYLE, OKABE_ITO, OTHER_CLASS_STYLE, new_figure, subsample

__all__ = ["trace_determinant_figure", "rightmost_eigenvalue_figure"]


def _view(values: np.ndarray, pad: float = 0.08) -> tuple[float, float]:
    """Axis range holding the central 99 % of the values and zero, with margins,
    so a few extreme steady states do not squash the rest into a dot."""
    lo, hi = np.quantile(values, [0.005, 0.995]) if values.size else (0.0, 1.0)
    lo, hi = min(lo, 0.0), max(hi, 0.0)
    span = hi - lo or 1.0
    return lo - pad * span, hi + pad * span


def _scatter_by_class(ax, frame: pd.DataFrame, x: str, y: str, totals: pd.Series) -> None:
    """One marker style per class; the legend counts every steady state of the class,
    also those left out of a thinned drawing."""
    present = list(pd.unique(frame["class"]))
    ordered = [c for c in CLASS_ORDER if c in present] + sorted(set(present) - set(CLASS_ORDER))
    for klass in ordered:
        part = frame.loc[frame["class"] == klass]
        colour, marker = CLASS_STYLE.get(klass, OTHER_CLASS_STYLE)
        ax.scatter(part[x], part[y], s=12, c=colour, marker=marker, alpha=0.6,
                   linewidths=0, label=f"{klass} ({int(totals.get(klass, len(part)))})",
                   rasterized=True)


def _thinned_note(ax, shown: int, total: int) -> None:
    if shown < total:
        ax.text(0.99, 0.06, f"{shown:,} of {total:,} steady states drawn (random subset)",
                transform=ax.transAxes, ha="right", va="bottom", fontsize=7,
                color=OKABE_ITO["grey"])


def _outside_note(ax, frame: pd.DataFrame, x: str, y: str) -> None:
    (x0, x1), (y0, y1) = ax.get_xlim(), ax.get_ylim()
    inside = frame[x].between(x0, x1) & frame[y].between(y0, y1)
    hidden = int((~inside).sum())
    if hidden:
        words = "1 point lies" if hidden == 1 else f"{hidden} points lie"
        ax.text(0.99, 0.01, f"{words} outside this view", transform=ax.transAxes,
                ha="right", va="bottom", fontsize=7, color=OKABE_ITO["grey"])


def trace_determinant_figure(equilibria: pd.DataFrame) -> Figure | None:
    """Steady states on the trace–determinant plane, coloured and shaped by class,
    with both axes and the parabola det = trace²/4 (real vs complex eigenvalues)."""
    if equilibria.empty or not {"trace", "determinant", "class"} <= set(equilibria.columns):
        return None
    data = equilibria.loc[np.isfinite(equilibria["trace"]) & np.isfinite(equilibria["determinant"]),
                          ["trace", "determinant", "class"]]
    if data.empty:
        return None
    totals, total = data["class"].value_counts(), len(data)
    data = subsample(data)
    fig = new_figure(6.4, 4.8)
    ax = fig.add_subplot()
    xlim = _view(data["trace"].to_numpy())
    ylim = _view(data["determinant"].to_numpy())
    ax.axhline(0, color=OKABE_ITO["black"], linewidth=0.9)
    ax.axvline(0, color=OKABE_ITO["black"], linewidth=0.9)
    t = np.linspace(*xlim, 400)
    ax.plot(t, t * t / 4, color=OKABE_ITO["black"], linestyle="--", linewidth=1,
            label="det = trace²/4")
    _scatter_by_class(ax, data, "trace", "determinant", totals)
    _thinned_note(ax, len(data), total)
    ax.set_xlim(xlim)
    ax.set_ylim(ylim)
    grey = {"fontsize": 7.5, "color": "#444444", "style": "italic", "transform": ax.transAxes,
            "bbox": {"facecolor": "white", "alpha": 0.8, "edgecolor": "none", "pad": 1.5}}
    ax.text(0.02, 0.97, "stable side\n(trace < 0, det > 0)", va="top", **grey)
    ax.text(0.98, 0.97, "unstable side\n(trace > 0, det > 0)", va="top", ha="right", **grey)
    ax.text(0.02, 0.03, "saddles (det < 0)", va="bottom", **grey)
    ax.set_xlabel("trace of the Jacobian (sum of eigenvalues)")
    ax.set_ylabel("determinant of the Jacobian (product of eigenvalues)")
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.14), ncols=3, markerscale=1.5)
    _outside_note(ax, data, "trace", "determinant")
    return fig


def rightmost_eigenvalue_figure(equilibria: pd.DataFrame) -> Figure | None:
    """Rightmost eigenvalue of each steady state in the complex plane, by class."""
    if equilibria.empty or not {"eig_re_0", "eig_im_0", "class"} <= set(equilibria.columns):
        return None
    data = equilibria.loc[np.isfinite(equilibria["eig_re_0"]) & np.isfinite(equilibria["eig_im_0"]),
                          ["eig_re_0", "eig_im_0", "class"]]
    if data.empty:
        return None
    totals, total = data["class"].value_counts(), len(data)
    data = subsample(data)
    fig = new_figure(6.4, 4.8)
    ax = fig.add_subplot()
    xlim = _view(data["eig_re_0"].to_numpy())
    ylim = _view(data["eig_im_0"].to_numpy())
    ax.axvspan(xlim[0], 0, color=OKABE_ITO["sky blue"], alpha=0.12, linewidth=0,
               label="negative real part (stable side)")
    ax.axhline(0, color=OKABE_ITO["black"], linewidth=0.9)
    ax.axvline(0, color=OKABE_ITO["black"], linewidth=1.2)
    _scatter_by_class(ax, data, "eig_re_0", "eig_im_0", totals)
    _thinned_note(ax, len(data), total)
    ax.set_xlim(xlim)
    ax.set_ylim(ylim)
    ax.set_xlabel("real part of the rightmost eigenvalue")
    ax.set_ylabel("imaginary part")
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.14), ncols=3, markerscale=1.5)
    _outside_note(ax, data, "eig_re_0", "eig_im_0")
    return fig
