"""How each claim's probability and its interval settle as the sample grows."""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..analysis.intervals import wilson_interval

__all__ = ["wilson", "convergence_frame", "checkpoints"]


def wilson(successes, n, confidence: float = 0.95):
    """Wilson score interval (Wilson 1927) as numpy arrays (`analysis.intervals`).

    Returns
    -------
    (lo, hi) : numpy arrays shaped like the broadcast of the inputs.
    """
    lo, hi = wilson_interval(successes, n, confidence)
    return np.asarray(lo, dtype=float), np.asarray(hi, dtype=float)


def checkpoints(n_total: int, count: int = 120) -> np.ndarray:
    """Sample sizes at which to report the running estimate: roughly even on a
    log scale from 10 (or fewer) up to and always including ``n_total``."""
    if n_total <= 0:
        return np.zeros(0, dtype=np.int64)
    start = min(10, n_total)
    points = np.unique(np.geomspace(start, n_total, num=count).round().astype(np.int64))
    return np.union1d(points, [n_total])


def convergence_frame(outcomes: pd.DataFrame, claims: list[str], count: int = 120) -> pd.DataFrame:
    """Running probability and 95 % Wilson interval of each claim.

    Parameters
    ----------
    outcomes : DataFrame
        Independent, successfully analysed sets in the order they were drawn
        (``RunData.independent_ok()``), one boolean column per claim.
    claims : list of str
        Claim columns to follow.

    Returns
    -------
    DataFrame with columns ``claim, n, successes, probability, ci95_low, ci95_high``;
    the last row of each claim uses the full sample. Sets whose claim value is
    missing are skipped, as in the summary.
    """
    frames = []
    for claim in claims:
        if claim not in outcomes.columns:
            continue
        values = outcomes[claim].dropna().astype(bool).to_numpy()
        sizes = checkpoints(values.size, count)
        if sizes.size == 0:
            continue
        running = np.cumsum(values)[sizes - 1]
        lo, hi = wilson(running, sizes)
        frames.append(pd.DataFrame({
            "claim": claim, "n": sizes, "successes": running,
            "probability": running / sizes, "ci95_low": lo, "ci95_high": hi,
        }))
    if not frames:
        return pd.DataFrame(columns=["claim", "n", "successes", "probability", "ci95_low", "ci95_high"])
    return pd.concat(frames, ignore_index=True)
