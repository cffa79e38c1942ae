"""Figures of the long-run section: representative time courses and the spread of
period and amplitude over the sets that oscillate."""

from __future__ import annotations

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from .style import OKABE_ITO, label_text, log_ticks, new_figure

__all__ = ["time_courses_figure", "distributions_figure", "MAX_STATES_SHOWN"]

MAX_STATES_SHOWN = 6      # states per time-course panel (the largest relative amplitudes)
_LINE_COLOURS = [OKABE_ITO[c] for c in ("blue", "vermillion", "bluish green", "reddish purple", "orange", "sky blue")]
_LINE_STYLES = ["-", "--", "-.", ":", (0, (5, 1)), (0, (3, 1, 1, 1, 1, 1))]
_BINS = 30


def _shown_states(courses: pd.DataFrame, states: list[str]) -> list[str]:
    """The states with the largest swing relative to their own size, at most MAX_STATES_SHOWN."""
    def swing(state: str) -> float:
        values = courses[state].to_numpy(dtype=float)
        top = np.nanmax(np.abs(values))
        return float((np.nanmax(values) - np.nanmin(values)) / top) if top > 0 else 0.0
    ranked = sorted(states, key=lambda s: (-swing(s), states.index(s)))
    return [s for s in states if s in ranked[:MAX_STATES_SHOWN]]


def time_courses_figure(courses: pd.DataFrame, states: list[str]) -> Figure | None:
    """One panel per representative set: each state divided by its largest value over
    the window, so states of different sizes share an axis (the legend gives the sizes)."""
    if courses.empty:
        return None
    sets = list(dict.fromkeys(courses["sample_id"].tolist()))
    shown = _shown_states(courses, states)
    fig = new_figure(6.4, 0.7 + 1.9 * len(sets))
    axes = fig.subplots(len(sets), 1, squeeze=False)[:, 0]
    for ax, sample_id in zip(axes, sets):
        part = courses.loc[courses["sample_id"] == sample_id]
        time = part["time"].to_numpy(dtype=float)
        for k, state in enumerate(shown):
            values = part[state].to_numpy(dtype=float)
            top = np.nanmax(np.abs(values))
            ax.plot(time, values / top if top > 0 else values, color=_LINE_COLOURS[k % 6],
                    linestyle=_LINE_STYLES[k % 6], linewidth=1.3,
                    label=label_text(f"{state} (max {top:.3g})", 28, 1))
        percentile, period = int(part["percentile"].iloc[0]), float(part["period"].iloc[0])
        ax.set_title(f"{percentile}th percentile of the period: set {sample_id}, period {period:.4g}", loc="left")
        ax.set_ylabel("value / its max")
        ax.set_ylim(min(-0.05, ax.get_ylim()[0]), 1.08)
        ax.legend(loc="center left", bbox_to_anchor=(1.0, 0.5))
    axes[-1].set_xlabel("time (model units, from the start of the window shown)")
    return fig


def _histogram(ax, values: np.ndarray, label: str) -> None:
    values = values[np.isfinite(values) & (values > 0)]
    if values.size == 0:
        ax.set_visible(False)
        return
    wide = values.max() > 20 * values.min()
    edges = (np.geomspace(values.min(), values.max(), _BINS + 1) if wide
             else np.linspace(values.min(), values.max(), _BINS + 1))
    if edges[0] == edges[-1]:
        edges = np.array([edges[0] * 0.95, edges[0] * 1.05])
    ax.hist(values, bins=edges, color=OKABE_ITO["sky blue"], edgecolor=OKABE_ITO["black"], linewidth=0.5,
            hatch="..")
    if wide:
        log_ticks(ax.xaxis, ax.set_xscale)
    median = float(np.median(values))
    ax.axvline(median, color=OKABE_ITO["black"], linestyle="--", linewidth=0.9)
    ax.set_title(label_text(f"{label}: median {median:.3g}", 40, 1), loc="left")
    ax.set_ylabel("sets")


def distributions_figure(outcomes: pd.DataFrame, states: list[str]) -> Figure | None:
    """Histograms of the period and of each state's amplitude (at most five states, the
    first in model order) over the independent sets where an orbit was found."""
    if outcomes.empty or "period" not in outcomes.columns:
        return None
    oscillating = outcomes.loc[outcomes["cycles"].fillna(False).astype(bool)]
    if oscillating.empty:
        return None
    panels = [("period", "period")] + [(f"amplitude({s})", f"amplitude of {s}") for s in states[:5]]
    panels = [(column, label) for column, label in panels if column in oscillating.columns]
    columns = 2 if len(panels) > 1 else 1
    rows = -(-len(panels) // columns)
    fig = new_figure(6.4, 0.4 + 2.1 * rows)
    axes = fig.subplots(rows, columns, squeeze=False).ravel()
    for ax, (column, label) in zip(axes, panels):
        _histogram(ax, oscillating[column].to_numpy(dtype=float), label)
    for ax in axes[len(panels):]:
        ax.set_visible(False)
    return fig
