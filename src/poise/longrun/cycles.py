"""Periodic orbits: returns to a section, their convergence, and whether the orbit attracts.

Section. At a checkpoint, a trajectory without a working section takes the state that
varied most over the last window, relative to its own size, and the middle of its range
there: the section is that state crossing that level upwards. A periodic orbit crosses
the middle of any of its states' ranges at least once per period.

Returns. Each upward crossing is placed by Hermite interpolation. It is compared with
the last `max_lag` earlier returns (an orbit may cross the section several times per
period); the nearest within `lag_tolerance` gives the lag and the period. When
`required_matches` consecutive returns each repeat their counterpart one period back
within `match_tolerance` of each state's range, with the same lag and periods agreeing
to the same tolerance, the orbit has converged: its period, each state's minimum and
maximum since the streak began, and its section points are recorded.

Spirals. A trajectory winding slowly into a stable focus also seems to repeat; where the
orbit encloses a stable focus whose contraction per turn is too weak for the returns
to rule it out, the outcome is "undetermined" with that reason.

Attraction. Repeating is not enough: around a centre every orbit repeats. So the
trajectory is restarted at its last return, kicked within the section by `perturbation`
of each state's range, and its next returns are compared with the recorded points. The
kick decays (the orbit attracts: outcome "cycles"), stays (a family of neutral closed
orbits: "undetermined") or grows ("undetermined"); the decay rate per period estimates
the orbit's return-map multiplier.
"""

from __future__ import annotations

import numpy as np

from poise.longrun import hermite, rosenbrock, scan
from poise.longrun.outcomes import CYCLES, NEUTRAL_ORBITS, REPELLING_ORBIT, SLOW_SPIRAL, UNDETERMINED
from poise.longrun.tracks import Context, Tracks, range_scale

SPURIOUS_RETURN = 0.01   # a "return" this soon after the kick (fraction of the period) is the restart itself
PLACE_ITERATIONS = 2     # Newton steps placing a crossing (each one re-takes part of a step)
MIN_FRACTION = 1e-12     # a crossing closer than this to the step's start is at its start
SPIRAL_MARGIN = 10.0     # see _maybe_spiral


def choose_sections(ctx: Context, tr: Tracks, rows: np.ndarray, relative: np.ndarray) -> None:
    """Give `rows` a new section unless their current one is working (a streak of
    repeating returns, or a crossing in the window just ended).

    `relative` (N, k) is each state's range over the window divided by its size there.
    """
    keep = (tr.streak[rows] > 0) | (tr.window_crossings[rows] >= 1)
    rows, relative = rows[~keep], relative[:, ~keep]
    if rows.size == 0:
        return
    state = np.argmax(relative, axis=0)
    low, high = tr.win_low[state, rows], tr.win_high[state, rows]
    tr.section[rows] = state
    tr.level[rows] = 0.5 * (low + high)
    tr.normal[:, rows] = _section_normal(ctx, tr.owner[rows], state)
    tr.sec_low[:, rows] = tr.win_low[:, rows]
    tr.sec_high[:, rows] = tr.win_high[:, rows]
    tr.crossings[rows] = 0
    tr.streak[rows] = 0
    tr.lag[rows] = 0
    tr.ret_t[:, rows] = np.nan
    tr.ret_x[:, :, rows] = np.nan


def _section_normal(ctx: Context, owner: np.ndarray, state: np.ndarray) -> np.ndarray:
    """(n, k) gradient of the section's state with respect to the free states."""
    if ctx.obs_matrix is None:
        normal = np.zeros((ctx.n, owner.size))
        normal[state, np.arange(owner.size)] = 1.0
        return normal
    return ctx.obs_matrix[owner, state, :].T


def on_returns(ctx: Context, tr: Tracks, rows: np.ndarray, Y, dY, F) -> None:
    """Place the upward section crossings that the steps of `rows` made, and act on them."""
    point, when = _place(ctx, tr, rows, Y, dY, F)
    checking = tr.checking[rows]
    _after_kick(ctx, tr, rows[checking], point[:, checking], when[checking])
    _match(ctx, tr, rows[~checking], point[:, ~checking], when[~checking])


def _place(ctx: Context, tr: Tracks, rows, Y, dY, F):
    """Where and when each step crossed the section: the root of the Hermite cubic of the
    section's state, and the cubic of every state there. Inside a stiff step the
    interpolant is poor (see simulate.STIFF_STEP): starting from the linear guess, Newton
    steps on the fraction s of the step each re-take the step from its start with
    length s * h, so the crossing point is as accurate as an accepted step."""
    state, level = tr.section[rows], tr.level[rows]
    dt = tr.t[rows] - tr.t0[rows]
    g0, g1 = tr.Y0[state, rows] - level, Y[state, rows] - level
    with np.errstate(invalid="ignore", divide="ignore"):
        linear = np.clip(-g0 / (g1 - g0), 0.0, 1.0)
    s = np.where(tr.stiff[rows], linear,
                 hermite.crossing(g0, g1, tr.dY0[state, rows], dY[state, rows], dt))
    s = np.where(np.isfinite(s), s, 0.5)
    point = hermite.value(tr.X0[:, rows], tr.X[:, rows], tr.F0[:, rows], F[:, rows], dt, s)
    stiff = np.flatnonzero(tr.stiff[rows])
    if stiff.size:       # the interpolant is not trusted inside a stiff step
        r = rows[stiff]
        offset = 0.0 if ctx.obs_offset is None else ctx.obs_offset[tr.owner[r], state[stiff]]
        s[stiff], point[:, stiff] = _restep(ctx, tr.X0[:, r], tr.F0[:, r], tr.J0[:, r], tr.P[:, r], dt[stiff],
                                            tr.normal[:, r], offset - level[stiff], s[stiff])
    return point, tr.t0[rows] + s * dt


def _restep(ctx: Context, X0, F0, J0, P, dt, normal, shift, fraction):
    """Newton on the fraction of a step where normal . x + shift = 0, each iterate
    re-taking the step from X0; returns the fraction and the point there."""
    live, floor = np.ones(X0.shape[1], bool), np.zeros(X0.shape)

    def partial_step(fraction):
        x, _, _ = rosenbrock.step(ctx.kernels, X0, P, F0, J0, np.maximum(fraction, MIN_FRACTION) * dt, live,
                                  floor, ctx.settings.rtol)
        return np.where(fraction > MIN_FRACTION, x, X0)

    for _ in range(PLACE_ITERATIONS):
        x = partial_step(fraction)
        g = (normal * x).sum(axis=0) + shift
        slope = (normal * ctx.kernels.rhs(x.T, P.T).T).sum(axis=0) * dt
        with np.errstate(invalid="ignore", divide="ignore"):
            better = fraction - g / slope
        fraction = np.where(np.isfinite(better) & (slope > 0), np.clip(better, 0.0, 1.0), fraction)
    return fraction, partial_step(fraction)


def _match(ctx: Context, tr: Tracks, rows, point, when) -> None:
    """Compare a return with the earlier ones; extend or restart the streak."""
    if rows.size == 0:
        return
    s = ctx.settings
    tr.window_crossings[rows] += 1
    scale = range_scale(ctx, tr, rows)
    restart = np.zeros(rows.size, bool)
    scan.match_returns(rows, np.ascontiguousarray(point), when, np.ascontiguousarray(scale), tr.crossings,
                       tr.ret_t, tr.ret_x, tr.streak, tr.lag, tr.last_period, s.max_lag, s.lag_tolerance,
                       s.match_tolerance, restart)
    count, period, close = tr.crossings[rows], tr.last_period[rows], tr.streak[rows] > 0
    # the orbit's extremes are collected from the return that starts a streak on
    if restart.any():
        Yc, _ = ctx.all_states(tr.owner[rows[restart]], point[:, restart])
        tr.run_low[:, rows[restart]] = Yc
        tr.run_high[:, rows[restart]] = Yc
    # leave time for the streak and the attraction check to finish
    extra = (s.required_matches + s.check_returns + 2) * period
    tr.horizon[rows] = np.where(close, np.maximum(tr.horizon[rows], when + extra), tr.horizon[rows])
    done = tr.streak[rows] >= s.required_matches
    if done.any():
        _kick(ctx, tr, rows[done], point[:, done], when[done], count[done], scale[:, done])


def _kick(ctx: Context, tr: Tracks, rows, point, when, count, scale) -> None:
    """Record the converged orbit and restart from its last return, kicked within the section."""
    s = ctx.settings
    ring = s.max_lag + 1
    lag = tr.lag[rows]
    tr.period[rows] = tr.last_period[rows]
    tr.low[:, rows] = tr.run_low[:, rows]
    tr.high[:, rows] = tr.run_high[:, rows]
    for i in range(s.max_lag):
        slot = (count - 1 - i) % ring
        tr.orbit_points[i, :, rows] = np.where((i < lag)[:, None], tr.ret_x[slot, :, rows], np.nan)
    tr.orbit_scale[:, rows] = scale
    spiral = _maybe_spiral(ctx, tr, rows, point, scale)
    _decide(tr, rows[spiral], UNDETERMINED, SLOW_SPIRAL)
    rows, point, when, scale = rows[~spiral], point[:, ~spiral], when[~spiral], scale[:, ~spiral]
    kick, size = _kick_vector(point, scale, tr.normal[:, rows], s.perturbation)
    tr.X[:, rows] = point + kick
    tr.t[rows] = when
    tr.kick[rows] = size
    tr.checking[rows] = True
    tr.returns_after_kick[rows] = 0
    tr.kicked_at[rows] = when
    tr.refresh[rows] = True
    tr.moved[rows] = False
    extra = (s.check_returns + 2) * tr.period[rows]
    tr.horizon[rows] = np.maximum(tr.horizon[rows], when + extra)


def _maybe_spiral(ctx: Context, tr: Tracks, rows, point, scale) -> np.ndarray:
    """(k,) True where the orbit could be a slowly damped spiral into a stable focus.

    A trajectory winding into a stable focus returns to the section a factor rho (the
    focus's contraction per turn) closer each time, so successive returns differ by
    (1 - rho) times its distance to the focus. Where the orbit's extremes enclose a
    stable focus and that expected drift is within SPIRAL_MARGIN times the match
    tolerance, the returns cannot tell a periodic orbit from such a spiral (linear
    estimate; no other test here can: the kick would decay too).
    """
    owner = tr.owner[rows]
    columns = ctx.free_columns
    low, high = tr.run_low[columns][:, rows].T, tr.run_high[columns][:, rows].T          # (k, n)
    margin = 0.1 * (high - low)
    focus = ctx.steady_x[owner]                                                          # (k, R, n)
    with np.errstate(invalid="ignore", divide="ignore"):
        inside = np.all((focus >= (low - margin)[:, None, :]) & (focus <= (high + margin)[:, None, :]), axis=2)
        distance = np.nan_to_num(np.abs(point.T[:, None, :] - focus) / scale.T[:, None, :], nan=np.inf).max(axis=2)
        drift = (1.0 - ctx.steady_spiral[owner]) * distance
    suspect = inside & (ctx.steady_spiral[owner] > 0) & (drift <= SPIRAL_MARGIN * ctx.settings.match_tolerance)
    return suspect.any(axis=1)


def _kick_vector(point, scale, normal, fraction):
    """A displacement within the section (orthogonal to its normal, so the kicked point is
    still on it and the flow crosses it), `fraction` of each state's range in size, that
    keeps every non-zero state on its side of zero. Of two sign patterns, the one that
    survives the projection best. Returns the (n, k) kick and its size in range units."""
    n, count = point.shape
    patterns = (np.ones(n), np.where(np.arange(n) % 2 == 0, 1.0, -1.0))
    best_kick, best_size = np.zeros((n, count)), np.zeros(count)
    for pattern in patterns:
        kick = fraction * scale * pattern[:, None]
        # keep signs: never move a state more than half-way to zero
        limit = 0.5 * np.abs(point)
        kick = np.where(point != 0, np.clip(kick, -limit, limit), 0.0)
        along = (normal * kick).sum(axis=0)
        norm2 = (normal * normal).sum(axis=0)
        with np.errstate(invalid="ignore", divide="ignore"):
            kick = kick - np.where(norm2 > 0, along / norm2, 0.0) * normal
            size = np.where(kick == 0, 0.0, np.abs(kick) / scale).max(axis=0)
        better = size > best_size
        best_kick = np.where(better, kick, best_kick)
        best_size = np.where(better, size, best_size)
    return best_kick, best_size


def _after_kick(ctx: Context, tr: Tracks, rows, point, when) -> None:
    """Does the kick decay? Decide after it has shrunk enough or after `check_returns` returns."""
    if rows.size == 0:
        return
    s = ctx.settings
    period = tr.period[rows]
    real = when - tr.kicked_at[rows] > SPURIOUS_RETURN * period
    rows, point, when, period = rows[real], point[:, real], when[real], period[real]
    if rows.size == 0:
        return
    scale = tr.orbit_scale[:, rows]
    distance = np.full(rows.size, np.inf)
    for i in range(s.max_lag):
        reference = tr.orbit_points[i, :, rows].T
        with np.errstate(invalid="ignore", divide="ignore"):
            d = np.where(point == reference, 0.0, np.abs(point - reference) / scale).max(axis=0)
        distance = np.where(np.isfinite(d), np.minimum(distance, d), distance)
    tr.returns_after_kick[rows] += 1
    first = tr.returns_after_kick[rows] == 1
    tr.first_distance[rows] = np.where(first, distance, tr.first_distance[rows])
    tr.first_return_at[rows] = np.where(first, when, tr.first_return_at[rows])
    kick = tr.kick[rows]
    elapsed = (when - tr.kicked_at[rows]) / period
    with np.errstate(invalid="ignore", divide="ignore"):
        multiplier = np.power(distance / kick, 1.0 / np.maximum(elapsed, 1e-300))
    tr.multiplier[rows] = multiplier
    attracted = distance <= s.attract_ratio * kick
    judged = ~attracted & (tr.returns_after_kick[rows] >= s.check_returns)
    # over the returns after the first, the kick's size changes by the multiplier per period
    with np.errstate(invalid="ignore", divide="ignore"):
        since_first = np.maximum((when - tr.first_return_at[rows]) / period, 1e-300)
        trend = np.power(distance / tr.first_distance[rows], 1.0 / since_first)
    trend = np.where(np.isfinite(trend), trend, np.inf)
    tr.multiplier[rows[judged]] = trend[judged]
    attracting = attracted | (judged & (trend < 1.0 - s.neutral_band))
    repelling = judged & (trend > 1.0 + s.neutral_band)
    neutral = judged & ~attracting & ~repelling
    _decide(tr, rows[attracting], CYCLES, 0)
    _decide(tr, rows[repelling], UNDETERMINED, REPELLING_ORBIT)
    _decide(tr, rows[neutral], UNDETERMINED, NEUTRAL_ORBITS)


def _decide(tr: Tracks, rows, outcome, reason) -> None:
    tr.done[rows] = True
    tr.outcome[rows] = outcome
    tr.reason[rows] = reason
