"""Regional sensitivity (factor mapping): does a parameter's distribution differ
between the sets where a claim holds and the sets where it fails?

Method: Hornberger & Spear (1981), two-sample Kolmogorov–Smirnov distance per
parameter, computed with ``scipy.stats.ks_2samp``.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

__all__ = ["ks_regional"]


def ks_regional(samples: pd.DataFrame, outcome: pd.Series, names) -> dict[str, dict]:
    """KS distance between claim-true and claim-false parameter samples.

    Parameters
    ----------
    samples : DataFrame
        Parameter values, one row per set, one column per parameter.
    outcome : Series of bool (nullable)
        Whether the claim holds in each set, aligned with ``samples`` by position.
        Missing values (failed sets) are left out.
    names : iterable of str
        Parameters to test (columns of ``samples``).

    Returns
    -------
    dict
        ``{name: {"ks": D, "p_value": p, "n_true": int, "n_false": int,
        "median_true": float, "median_false": float}}``; D and p are NaN when
        either group is empty.
    """
    from scipy.stats import ks_2samp  # scipy.stats takes a while to import: only when needed

    values = pd.array(outcome, dtype="boolean")
    known = ~np.asarray(values.isna())
    holds = np.asarray(values.fillna(False), dtype=bool)
    true_rows = known & holds
    false_rows = known & ~holds
    result: dict[str, dict] = {}
    for name in names:
        column = samples[name].to_numpy(dtype=float)
        x_true = column[true_rows]
        x_false = column[false_rows]
        x_true = x_true[np.isfinite(x_true)]
        x_false = x_false[np.isfinite(x_false)]
        if x_true.size and x_false.size:
            test = ks_2samp(x_true, x_false)
            distance, p_value = float(test.statistic), float(test.pvalue)
        else:
            distance = p_value = math.nan
        result[name] = {
            "ks": distance,
            "p_value": p_value,
            "n_true": int(x_true.size),
            "n_false": int(x_false.size),
            "median_true": float(np.median(x_true)) if x_true.size else math.nan,
            "median_false": float(np.median(x_false)) if x_false.size else math.nan,
        }
    return result
