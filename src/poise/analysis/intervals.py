"""Confidence intervals for probabilities estimated from independent draws."""

from __future__ import annotations

from statistics import NormalDist

import numpy as np


def wilson_interval(successes, n, confidence: float = 0.95):
    """Wilson score interval for a binomial proportion (Wilson 1927).

    The interval without continuity correction: the set of proportions ``p`` not
    rejected by the score test ``|k/n - p| <= z sqrt(p (1 - p) / n)``.

    Parameters
    ----------
    successes : int or array_like of int
        Number of draws where the event happened.
    n : int or array_like of int
        Number of draws (broadcast against `successes`).
    confidence : float, optional
        Two-sided confidence level, default 0.95.

    Returns
    -------
    (lo, hi)
        Python floats for scalar input, else numpy arrays of the broadcast shape.
        Limits lie in ``[0, 1]``; ``lo`` is exactly 0 when ``successes == 0`` and
        ``hi`` exactly 1 when ``successes == n``.

    Notes
    -----
    ``n == 0`` gives ``(0, 1)``: no draws, no information. This is also the limit of
    the Wilson interval as ``n -> 0``, and unlike NaN it stays valid JSON.
    """
    if not 0 < confidence < 1:
        raise ValueError(f"confidence must lie strictly between 0 and 1, got {confidence}")
    k = np.asarray(successes, dtype=float)
    n_arr = np.asarray(n, dtype=float)
    k, n_arr = np.broadcast_arrays(k, n_arr)
    if np.any(n_arr < 0) or np.any(k < 0) or np.any(k > n_arr):
        raise ValueError("need 0 <= successes <= n")

    # the standard library's normal quantile (no scipy.stats import on this path);
    # tests/test_intervals.py checks it against scipy.stats.norm.ppf
    z = NormalDist().inv_cdf(0.5 + confidence / 2)
    z2 = z * z
    empty = n_arr == 0
    n_safe = np.where(empty, 1.0, n_arr)
    p_hat = k / n_safe
    denom = n_safe + z2
    centre = (k + z2 / 2) / denom
    half = z * np.sqrt(n_safe * p_hat * (1 - p_hat) + z2 / 4) / denom
    lo = np.clip(centre - half, 0.0, 1.0)
    hi = np.clip(centre + half, 0.0, 1.0)
    # The closed form gives 0 and 1 at the ends only up to rounding.
    lo = np.where(k == 0, 0.0, lo)
    hi = np.where(k == n_arr, 1.0, hi)
    lo = np.where(empty, 0.0, lo)
    hi = np.where(empty, 1.0, hi)
    if lo.ndim == 0:
        return float(lo), float(hi)
    return lo, hi
