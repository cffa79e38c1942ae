"""Shared figure style: palette, markers, reproducible rendering, thinning.

Colours are the Okabe & Ito (2008) colour-blind-safe set; every category also gets
its own marker or hatch, so figures stay readable in greyscale. Shares from 0 to 1
use matplotlib's "cividis" map, made to read the same with colour-vision deficiency.
"""

from __future__ import annotations

import contextlib
import io
import textwrap

import matplotlib
import numpy as np
import pandas as pd
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter, LogLocator, NullLocator

from .escape import escape_mathtext

__all__ = ["OKABE_ITO", "CLASS_STYLE", "OUTCOME_STYLE", "SHARE_COLORMAP", "MAX_POINTS",
           "figure_style", "new_figure", "render_figure", "subsample", "label_text",
           "log_ticks"]

OKABE_ITO = {
    "black": "#000000", "orange": "#E69F00", "sky blue": "#56B4E9", "bluish green": "#009E73",
    "yellow": "#F0E442", "blue": "#0072B2", "vermillion": "#D55E00", "reddish purple": "#CC79A7",
    "grey": "#7F7F7F",
}

# class -> (colour, marker); stable kinds are filled shapes, unstable kinds pointed ones.
CLASS_STYLE = {
    "stable node": (OKABE_ITO["blue"], "o"),
    "stable focus": (OKABE_ITO["bluish green"], "s"),
    "unstable node": (OKABE_ITO["vermillion"], "^"),
    "unstable focus": (OKABE_ITO["reddish purple"], "v"),
    "saddle": (OKABE_ITO["orange"], "X"),
    "saddle-focus": (OKABE_ITO["sky blue"], "D"),
    "center": (OKABE_ITO["black"], "*"),
    "non-hyperbolic": (OKABE_ITO["grey"], "P"),
}
OTHER_CLASS_STYLE = (OKABE_ITO["yellow"], "h")

# claim outcome -> (colour, marker, label)
OUTCOME_STYLE = {
    True: (OKABE_ITO["blue"], "o", "claim holds"),
    False: (OKABE_ITO["orange"], "x", "claim fails"),
}

SHARE_COLORMAP = "cividis"

# Scatter plots draw at most this many points (a fixed random subset, said so in the
# caption) and embed them as an image in the SVG: tens of thousands of vector markers
# make a slow, multi-megabyte file that adds nothing at print size.
MAX_POINTS = 20_000
SUBSAMPLE_SEED = 20_240_601  # fixed: the same run always gives the same picture

_RC = {
    "font.family": "DejaVu Sans",
    "font.size": 9,
    "axes.titlesize": 10,
    "axes.labelsize": 9,
    "legend.fontsize": 8,
    "legend.frameon": False,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "svg.hashsalt": "poise-report",
    "svg.fonttype": "path",
    "path.simplify": True,
    "text.usetex": False,
}


@contextlib.contextmanager
def figure_style():
    """Fixed rc settings for building and saving figures, whatever the user's rc file says."""
    with matplotlib.rc_context(_RC):
        yield


def new_figure(width: float = 6.4, height: float = 4.0) -> Figure:
    """A figure not tied to pyplot (no global state, no GUI backend)."""
    return Figure(figsize=(width, height), layout="constrained")


def render_figure(fig: Figure) -> dict[str, bytes]:
    """The figure as PNG (150 dpi) and SVG bytes, metadata fixed for reproducible bytes."""
    png, svg = io.BytesIO(), io.BytesIO()
    fig.savefig(png, format="png", dpi=150, metadata={"Software": None})
    # The layout is settled by the first save; solving it again costs time and
    # gives the same positions.
    fig.set_layout_engine("none")
    fig.savefig(svg, format="svg", metadata={"Date": None, "Creator": None})
    return {"png": png.getvalue(), "svg": svg.getvalue()}


def subsample(frame: pd.DataFrame, max_points: int = MAX_POINTS) -> pd.DataFrame:
    """At most ``max_points`` rows, chosen with a fixed seed, original order kept."""
    if len(frame) <= max_points:
        return frame
    rng = np.random.default_rng(SUBSAMPLE_SEED)
    keep = np.sort(rng.choice(len(frame), size=max_points, replace=False))
    return frame.iloc[keep]


def label_text(text: str, width: int = 40, max_lines: int = 2) -> str:
    """User text made safe for matplotlib and wrapped to fit beside an axis."""
    lines = textwrap.wrap(str(text), width=width) or [""]
    if len(lines) > max_lines:
        lines = lines[:max_lines]
        lines[-1] = lines[-1][: max(width - 1, 1)] + "…"
    return "\n".join(escape_mathtext(line) for line in lines)


def log_ticks(axis, set_scale) -> None:
    """Log scale with a few plain-number ticks (1, 2, 5 per decade) and no crowded minor labels."""
    set_scale("log")
    axis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
    axis.set_major_formatter(FuncFormatter(lambda value, _pos: f"{value:g}"))
    # no minor ticks: eight unlabelled ticks per decade cost drawing time and add nothing
    axis.set_minor_locator(NullLocator())
