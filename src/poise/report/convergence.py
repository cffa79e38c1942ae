"""How each claim's probability and its interval settle as the sample grows."""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.stats import norm

__all__ = ["wilson", "convergence_frame", "checkpoints"]

try:  # the project's own implementation, when present
    from ..analysis.intervals import wilson_interval as _project_wilson
except ImportError:  # pragma: no cover - depends on what else is installed
    _project_wilson = None


def _local_wilson(successes, n, confidence: float = 0.95):
    """Wilson score interval (Wilson 1927), vectorised; NaN where n == 0."""
    k = np.asarray(successes, dtype=float)
    n = np.asarray(n, dtype=float)
    z = norm.ppf(0.5 + confidence / 2.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        p = k / n
        denom = 1.0 + z * z / n
        centre = (p + z * z / (2.0 * n)) / denom
        half = z / denom * np.sqrt(p * (1.0 - p) / n + z * z / (4.0 * n * n))
        lo = np.where(n > 0, np.clip(centre - half, 0.0, 1.0), np.nan)
        hi = np.where(n > 0, np.clip(centre + half, 0.0, 1.0), np.nan)
    return lo, hi


def wilson(successes, n, confidence: float = 0.95):
    """Wilson score interval; uses ``poise.analysis.intervals`` when available.

    Returns
    -------
    (lo, hi) : numpy arrays shaped like the broadcast of the inputs.
    """
    if _project_wilson is not None:
        lo, hi = _project_wilson(successes, n, confidence)
        return np.asarray(lo, dtype=float), np.asarray(hi, dtype=float)
    return _local_wilson(successes, n, confidence)


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
