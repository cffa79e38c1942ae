"""Merge copies of one root within each parameter set, and sort (compiled).

Several paths of a homotopy can end at the same real root (a multiple root, or copies
polished onto one point); each set's roots are merged and sorted in one compiled pass
per set, so the cost does not grow with the square of the widest set, and nothing
depends on the other sets of the batch.
"""

from __future__ import annotations

import numpy as np
from numba import njit

# relative tolerance for "the same root": simple roots are accurate to rounding, multiple
# roots only to about eps**(1/m)
SAME_SIMPLE, SAME_SINGULAR = 1e-7, 1e-4
# a coordinate's floor when every root of the set is ~0 (no length scale, e.g. x**3 = 0)
FLOOR = 1e-9
# regular roots agree within this many times their spreads (the last Newton step),
# plus ROUNDING: polishing stops at steps of 1e-15 (1 + |x|), so a coordinate that is
# zero up to rounding can differ by that much between copies whose last step was 0
SPREAD, ROUNDING = 10.0, 1e-15


def unique_sorted(x: np.ndarray, singular: np.ndarray, group: np.ndarray, groups: int,
                  extra: np.ndarray | None = None, spread: np.ndarray | None = None):
    """Roots (groups, width, n) padded with NaN, each set's sorted lexicographically
    with copies merged, and their counts (groups,).

    Two roots are one when every coordinate agrees to a relative tolerance (looser if
    either is singular). Each coordinate's median size over the set's roots sets its
    floor, so copies of a root at zero merge whatever units the states have; the
    median, not the largest: one huge root must not merge distinct small ones.
    ``extra`` marks candidates from a second solve: they are merged like the others but
    left out of the median, so that their copies of roots already found do not move
    the floor.

    With ``spread`` (each candidate's uncertainty per coordinate, e.g. the last Newton
    step that polished it), two regular roots are one when every coordinate agrees to
    the relative tolerance plus SPREAD times their spreads, and the median floor serves
    only pairs with a singular root: a floor from the other roots' sizes merges distinct
    regular roots much smaller than those.
    """
    x = np.ascontiguousarray(x, dtype=float)
    extra = np.zeros(len(x), dtype=bool) if extra is None else np.asarray(extra, dtype=bool)
    use_spread = spread is not None
    spread = np.zeros_like(x) if spread is None else np.ascontiguousarray(spread, dtype=float)
    order = np.argsort(group, kind="stable")
    starts = np.searchsorted(group[order], np.arange(groups + 1))
    return _merge(x[order], np.ascontiguousarray(singular[order], dtype=np.bool_),
                  np.ascontiguousarray(extra[order]), spread[order], use_spread, starts.astype(np.int64))


@njit(cache=True)
def _before(a, b):
    """a < b lexicographically."""
    for j in range(a.shape[0]):
        if a[j] != b[j]:
            return a[j] < b[j]
    return False


@njit(cache=True)
def _merge(x, singular, extra, spread, use_spread, starts):
    G = starts.shape[0] - 1
    n = x.shape[1]
    counts = np.zeros(G, dtype=np.int64)
    width = 0
    for g in range(G):
        width = max(width, starts[g + 1] - starts[g])
    out = np.full((G, width, n), np.nan)
    keep = np.empty(width, dtype=np.int64)
    idx = np.empty(width, dtype=np.int64)
    floor = np.empty(n)
    sizes = np.empty(width)
    for g in range(G):
        lo, m = starts[g], starts[g + 1] - starts[g]
        if m == 0:
            continue
        # insertion sort of the set's rows (a set has few roots)
        for a in range(m):
            idx[a] = lo + a
            b = a
            while b > 0 and _before(x[idx[b]], x[idx[b - 1]]):
                idx[b], idx[b - 1] = idx[b - 1], idx[b]
                b -= 1
        for j in range(n):
            counted = 0
            for a in range(m):
                if not extra[lo + a]:
                    sizes[counted] = abs(x[lo + a, j])
                    counted += 1
            if counted == 0:  # only second-solve candidates: all of them
                for a in range(m):
                    sizes[a] = abs(x[lo + a, j])
                counted = m
            floor[j] = max(np.median(sizes[:counted]), FLOOR)
        kept = 0
        for a in range(m):
            duplicate = False
            for b in range(a):  # any earlier root, merged or not, as the vectorised rule
                either = singular[idx[a]] or singular[idx[b]]
                rel = SAME_SINGULAR if either else SAME_SIMPLE
                same = True
                for j in range(n):
                    p, r = x[idx[a], j], x[idx[b], j]
                    if use_spread and not either:
                        tol = (rel * max(abs(p), abs(r)) + SPREAD * (spread[idx[a], j] + spread[idx[b], j])
                               + ROUNDING)
                    else:
                        tol = rel * (max(abs(p), abs(r)) + floor[j])
                    if not abs(p - r) <= tol:
                        same = False
                        break
                if same:
                    duplicate = True
                    break
            if not duplicate:
                keep[kept] = idx[a]
                kept += 1
        for a in range(kept):
            for j in range(n):
                out[g, a, j] = x[keep[a], j]
        counts[g] = kept
    real_width = 0
    for g in range(G):
        real_width = max(real_width, counts[g])
    return out[:, :real_width].copy(), counts


@njit(cache=True)
def coincident(points, usable, per_group):
    """Usable rows that another usable row of their group (``per_group`` consecutive
    rows) matches: every coordinate equal to 1e-7 of its own size (complex points)."""
    N, n = points.shape
    out = np.zeros(N, dtype=np.bool_)
    for start in range(0, N, per_group):
        stop = min(N, start + per_group)
        for a in range(start, stop):
            if not usable[a]:
                continue
            for b in range(a + 1, stop):
                if not usable[b]:
                    continue
                same = True
                for j in range(n):
                    size = max(abs(points[a, j]), abs(points[b, j]))
                    if not abs(points[a, j] - points[b, j]) <= 1e-7 * size:
                        same = False
                        break
                if same:
                    out[a] = True
                    out[b] = True
    return out
