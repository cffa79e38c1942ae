"""Watching trajectories step by step: extremes, growth, settling, rest and budgets.

`observe` is called once per loop iteration, after f has been evaluated at every
live trajectory's current point. For each trajectory that has just taken a step, the
compiled `scan` updates the running extremes and flags what can be decided: it grew
without bound, it settled at a stable steady state (close to it, where f is its
linearisation), or it crossed its section (handled in `poise.longrun.cycles`). At
checkpoints (times tau, 2 tau, 4 tau, ... of the set's time scale tau) it looks back over
the window since the last one: a trajectory at rest is matched to the steady states, and
a section is (re)chosen. Every test is per trajectory; nothing depends on the batch.
"""

from __future__ import annotations

import numpy as np

from poise.longrun import cycles, scan
from poise.longrun.outcomes import (BUDGET, CHECK_UNFINISHED, REST_NONHYPERBOLIC, REST_UNLISTED,
                                    REST_UNSTABLE, SETTLES, UNBOUNDED, UNDETERMINED)
from poise.longrun.tracks import Context, Tracks

REST_DISTANCE_FACTOR = 10.0   # at rest: within 10 x settle_distance of a listed steady state


def observe(ctx: Context, tr: Tracks, Y: np.ndarray, dY: np.ndarray, F: np.ndarray) -> None:
    """Update every live trajectory after its latest step; mark those decided as done.

    Parameters
    ----------
    ctx, tr : the shared context and the live tracks.
    Y, dY : (N, K) all states and their rates at the current points.
    F : (n, K) f at the current points (free states).
    """
    s = ctx.settings
    event = np.empty(tr.size, np.int8)
    slot = np.zeros(tr.size, np.int64)
    scan.scan(tr.moved, tr.done, tr.checking, tr.stiff, tr.owner, tr.t, tr.t0, tr.X, F, tr.Y0, Y, tr.dY0, dY,
              tr.peak, tr.reference, s.growth, tr.win_low, tr.win_high, tr.sec_low, tr.sec_high,
              tr.run_low, tr.run_high, ctx.free_columns, ctx.steady_x, ctx.steady_jacobian,
              ctx.steady_stable, s.settle_distance, s.settle_linearity, tr.section, tr.level, event, slot)
    finish(tr, np.flatnonzero(event == scan.GROWS), UNBOUNDED)
    settled = np.flatnonzero(event == scan.SETTLES)
    finish(tr, settled, SETTLES, steady=ctx.steady_row[tr.owner[settled], slot[settled]])
    crossed = np.flatnonzero(event == scan.CROSSES)
    if crossed.size:
        cycles.on_returns(ctx, tr, crossed, Y, dY, F)
    _checkpoints(ctx, tr, Y)
    _budget(ctx, tr)


def finish(tr: Tracks, rows: np.ndarray, outcome: int, reason: int = 0, steady=None) -> None:
    """Record a decision for `rows` (indices into the live tracks)."""
    tr.done[rows] = True
    tr.outcome[rows] = outcome
    tr.reason[rows] = reason
    if steady is not None:
        tr.steady[rows] = steady


def _nearest_steady(ctx: Context, tr: Tracks, rows, only_stable: bool):
    """Nearest listed steady state of each trajectory's set, by the largest over states of
    |x - x*| / max(peak of |x| along the trajectory, |x*|). Returns (slot, distance, diff, scale)."""
    x = tr.X[:, rows].T                                          # (k, n)
    table = ctx.steady_x[tr.owner[rows]]                         # (k, R, n)
    peak = tr.peak[ctx.free_columns][:, rows].T                  # (k, n)
    scale = np.maximum(peak[:, None, :], np.abs(table))
    diff = x[:, None, :] - table
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.where(diff == 0, 0.0, np.abs(diff) / scale)
    distance = np.where(np.isnan(ratio), np.inf, ratio).max(axis=2, initial=0.0)   # (k, R)
    listed = ctx.steady_row[tr.owner[rows]] >= 0
    if only_stable:
        listed &= ctx.steady_stable[tr.owner[rows]]
    distance = np.where(listed, distance, np.inf)
    slot = np.argmin(distance, axis=1)
    pick = np.arange(rows.size)
    return slot, distance[pick, slot], diff[pick, slot], scale[pick, slot]


def _checkpoints(ctx: Context, tr: Tracks, Y) -> None:
    """At t >= next_check: is the trajectory at rest? Otherwise (re)choose its section.
    Then start a window twice as long."""
    due = np.flatnonzero((tr.t >= tr.next_check) & ~tr.done)
    if due.size == 0:
        return
    searching = due[~tr.checking[due]]
    if searching.size:
        low, high = tr.win_low[:, searching], tr.win_high[:, searching]
        size = np.maximum(np.abs(low), np.abs(high))
        with np.errstate(invalid="ignore", divide="ignore"):
            relative = np.where(high == low, 0.0, (high - low) / size)
        still = (relative <= ctx.settings.stationary).all(axis=0)
        _rest(ctx, tr, searching[still])
        cycles.choose_sections(ctx, tr, searching[~still], relative[:, ~still])
    tr.win_low[:, due] = Y[:, due]
    tr.win_high[:, due] = Y[:, due]
    tr.window_crossings[due] = 0
    tr.next_check[due] = 2.0 * tr.next_check[due]


def _rest(ctx: Context, tr: Tracks, rows) -> None:
    """A trajectory at rest: which listed steady state is it at, and what is that one?"""
    if rows.size == 0:
        return
    slot, distance, _, _ = _nearest_steady(ctx, tr, rows, only_stable=False)
    at = distance <= REST_DISTANCE_FACTOR * ctx.settings.settle_distance
    owner = tr.owner[rows]
    stable = at & ctx.steady_stable[owner, slot]
    unstable = at & ctx.steady_unstable[owner, slot]
    other = at & ~stable & ~unstable
    row = ctx.steady_row[owner, slot]
    finish(tr, rows[stable], SETTLES, steady=row[stable])
    finish(tr, rows[unstable], UNDETERMINED, REST_UNSTABLE, steady=row[unstable])
    finish(tr, rows[other], UNDETERMINED, REST_NONHYPERBOLIC, steady=row[other])
    finish(tr, rows[~at], UNDETERMINED, REST_UNLISTED)


def _budget(ctx: Context, tr: Tracks) -> None:
    """Past the horizon (extended while an orbit is being confirmed) or out of steps."""
    over = ~tr.done & ((tr.t >= tr.horizon) | (tr.steps >= ctx.settings.max_steps))
    rows = np.flatnonzero(over)
    if rows.size:
        checking = tr.checking[rows]
        finish(tr, rows[checking], UNDETERMINED, CHECK_UNFINISHED)
        finish(tr, rows[~checking], UNDETERMINED, BUDGET)
