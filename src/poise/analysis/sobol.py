"""Sobol sensitivity indices of one output (a claim's indicator) via SALib.

The outputs must come in the row order of a Sobol-index design from
`poise.sampling.make_design` (SALib's order: per base row ``A``, ``AB:<p>``...,
``BA:<p>``... with second order, ``B``). Estimators are SALib's: first order after
Saltelli et al. (2010), total order after Jansen (Saltelli et al. 2010), second
order after Saltelli (2002); intervals from SALib's bootstrap.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Sequence

import numpy as np

FLAG_TEXT = "more samples needed"


def _none(reason: str) -> dict:
    return {"method": "none", "reason": reason}


def _float(x) -> float | None:
    """A plain float, or None where SALib produced no finite number."""
    x = float(x)
    return x if math.isfinite(x) else None


def _interval(value: float, half_width: float) -> list:
    if not (math.isfinite(value) and math.isfinite(half_width)):
        return [None, None]
    return [value - half_width, value + half_width]


def _constancy(y: np.ndarray) -> str:
    value = float(y[0])
    if value == 1.0:
        return "always true"
    if value == 0.0:
        return "never true"
    return f"constant ({value:g})"


def sobol_indices(y: np.ndarray, names: Sequence[str], second_order: bool,
                  resamples: int, seed: int, ci_width_flag: float = 0.1) -> dict:
    """First-order, total and (optionally) second-order Sobol indices.

    Parameters
    ----------
    y : numpy.ndarray
        One output per design row, shape ``(N*(k+2),)`` or ``(N*(2k+2),)`` with
        second order; e.g. a claim's 0/1 indicator as float. Must not contain NaN:
        the estimators need every row of each ``A/AB/B`` group, so the caller must
        decide what a failed parameter set means (drop whole groups, or fill).
    names : sequence of str
        Uncertain parameter names, in the design's column order.
    second_order : bool
        Whether the design has the ``BA`` rows; then ``S2`` is reported too.
    resamples : int
        Bootstrap resamples for the intervals.
    seed : int
        Seed of the bootstrap; same seed, same intervals.
    ci_width_flag : float, optional
        A parameter whose S1 or ST interval is wider than this is listed in
        ``flags`` as ``"more samples needed"`` (S2 intervals are not flagged:
        they are nearly always wide and would drown the useful flags).

    Returns
    -------
    dict
        JSON-ready (plain floats)::

            {"method": "sobol", "S1": {p: x}, "S1_ci95": {p: [lo, hi]},
             "ST": {p: x}, "ST_ci95": {p: [lo, hi]},
             "S2": {"p|q": x}, "S2_ci95": {"p|q": [lo, hi]},   # second order only
             "flags": {p: "more samples needed"}}              # always present

        The 95 % interval is ``[S - h, S + h]`` with SALib's bootstrap
        half-width ``h``; ``[None, None]`` if the bootstrap gave no finite width
        (then the parameter is flagged). When the indices cannot be estimated -
        no uncertain parameter, or an output that is constant over the sample or
        over the independent ``A``/``B`` rows - the result is
        ``{"method": "none", "reason": "..."}``.

    Raises
    ------
    ValueError
        If ``y`` contains NaN or its length does not fit the design.
    """
    names = list(names)
    k = len(names)
    y = np.asarray(y, dtype=float).ravel()
    if k == 0:
        return _none("there is no uncertain parameter")
    if np.isnan(y).any():
        raise ValueError(f"{int(np.isnan(y).sum())} outputs are NaN; Sobol indices "
                         "need an output for every row of the design")
    per_row = 2 * k + 2 if second_order else k + 2
    if y.size == 0 or y.size % per_row:
        raise ValueError(f"{y.size} outputs do not fill whole groups of {per_row} rows "
                         f"(k = {k}, second_order = {second_order})")
    if np.ptp(y) == 0:
        what = _constancy(y)
        subject = "output is" if what.startswith("constant") else "claim is"
        return _none(f"the {subject} {what} over the sample; no parameter changes it")
    a_and_b = np.r_[y[0::per_row], y[per_row - 1::per_row]]
    if np.ptp(a_and_b) == 0:
        # The estimators divide by the variance over A and B, which is zero here.
        what = _constancy(a_and_b)
        subject = "output is" if what.startswith("constant") else "claim is"
        return _none(f"the {subject} {what} over the independent draws (blocks A "
                     "and B), so its variance and Sobol indices cannot be estimated; "
                     "more samples needed")

    from SALib.analyze import sobol as salib_sobol  # 0.2 s to import: only when indices are due

    problem = {"num_vars": k, "names": names, "bounds": [[0.0, 1.0]] * k}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        # SALib seeds its bootstrap only for a truthy seed (seed 0 would be
        # unseeded); a Generator is always truthy and gives the same stream.
        res = salib_sobol.analyze(problem, y, calc_second_order=bool(second_order),
                                  num_resamples=int(resamples), conf_level=0.95,
                                  print_to_console=False,
                                  seed=np.random.default_rng(seed))

    out: dict = {"method": "sobol"}
    flags: dict[str, str] = {}
    for index in ("S1", "ST"):
        values, half = res[index], res[f"{index}_conf"]
        out[index] = {p: _float(values[j]) for j, p in enumerate(names)}
        out[f"{index}_ci95"] = {p: _interval(float(values[j]), float(half[j]))
                                for j, p in enumerate(names)}
        for j, p in enumerate(names):
            if not (math.isfinite(half[j]) and 2 * half[j] <= ci_width_flag):
                flags[p] = FLAG_TEXT
    if second_order:
        out["S2"], out["S2_ci95"] = {}, {}
        for i in range(k):
            for j in range(i + 1, k):
                key = f"{names[i]}|{names[j]}"
                out["S2"][key] = _float(res["S2"][i, j])
                out["S2_ci95"][key] = _interval(float(res["S2"][i, j]),
                                                float(res["S2_conf"][i, j]))
    out["flags"] = {p: flags[p] for p in names if p in flags}
    return out
