"""The per-step checks every trajectory needs after every step, compiled.

After each accepted step: the extremes of every state inside the step (the cubic Hermite
interpolant's, see `poise.longrun.hermite`), growth beyond the reference sizes, closeness
to a stable steady state where f is its linearisation (settling), and whether the step
crossed the section. These run on every trajectory at every step, so they are one
compiled pass (a numpy version cost several times the Rosenbrock step itself); the rare
events they flag are handled with numpy in `monitor` and `cycles`.
"""

from __future__ import annotations

import numpy as np
from numba import njit

NOTHING, GROWS, SETTLES, CROSSES = 0, 1, 2, 3


@njit(cache=True, error_model="numpy")
def _cubic_extremes(y0, y1, d0, d1, dt):
    """Min and max over s in [0, 1] of the Hermite cubic (as hermite.extremes)."""
    c1 = dt * d0
    c2 = 3.0 * (y1 - y0) - dt * (2.0 * d0 + d1)
    c3 = 2.0 * (y0 - y1) + dt * (d0 + d1)
    low, high = min(y0, y1), max(y0, y1)
    a, b, c = 3.0 * c3, 2.0 * c2, c1
    roots = np.empty(2)
    count = 0
    if a == 0.0:
        if b != 0.0:
            roots[0] = -c / b
            count = 1
    else:
        disc = b * b - 4.0 * a * c
        if disc >= 0.0:
            q = -0.5 * (b + np.copysign(np.sqrt(disc), b))
            roots[0] = q / a
            count = 1
            if q != 0.0:
                roots[1] = c / q
                count = 2
    for i in range(count):
        s = roots[i]
        if s > 0.0 and s < 1.0:
            p = y0 + s * (c1 + s * (c2 + s * c3))
            low, high = min(low, p), max(high, p)
    return low, high


@njit(cache=True, error_model="numpy")
def scan(moved, done, checking, stiff, owner, t, t0, X, F, Y0, Y, dY0, dY, peak, reference, growth,
         win_low, win_high, sec_low, sec_high, run_low, run_high,
         free_columns, steady_x, steady_jacobian, steady_stable, settle_distance, settle_linearity,
         section, level, event, slot):
    """One pass over the trajectories that just moved.

    Updates peak and the window, section and orbit extremes in place (inside a stiff
    step only the ends count, see simulate.STIFF_STEP) (the latter two not
    while an orbit's attraction is being checked), and writes `event[k]` (NOTHING,
    GROWS, SETTLES with the steady state's table column in `slot[k]`, or CROSSES).
    """
    n_all, count = Y.shape
    n = X.shape[0]
    width = steady_x.shape[1]
    diff = np.empty(n)
    scale = np.empty(n)
    for k in range(count):
        event[k] = NOTHING
        if not moved[k] or done[k]:
            continue
        dt = t[k] - t0[k]
        grows = False
        for i in range(n_all):
            if stiff[k]:
                low, high = min(Y0[i, k], Y[i, k]), max(Y0[i, k], Y[i, k])
            else:
                low, high = _cubic_extremes(Y0[i, k], Y[i, k], dY0[i, k], dY[i, k], dt)
            peak[i, k] = max(peak[i, k], max(abs(low), abs(high)))
            win_low[i, k] = min(win_low[i, k], low)
            win_high[i, k] = max(win_high[i, k], high)
            if not checking[k]:
                sec_low[i, k] = min(sec_low[i, k], low)
                sec_high[i, k] = max(sec_high[i, k], high)
                run_low[i, k] = min(run_low[i, k], low)
                run_high[i, k] = max(run_high[i, k], high)
            if abs(Y[i, k]) > growth * reference[i, k]:
                grows = True
        if grows:
            event[k] = GROWS
            continue
        if not checking[k]:
            s = owner[k]
            best, best_r = np.inf, -1
            for r in range(width):
                if not steady_stable[s, r]:
                    continue
                distance = 0.0
                for j in range(n):
                    d = abs(X[j, k] - steady_x[s, r, j])
                    if d > 0.0:
                        size = max(peak[free_columns[j], k], abs(steady_x[s, r, j]))
                        distance = max(distance, d / size)
                if distance < best:
                    best, best_r = distance, r
            if best <= settle_distance and _linear_there(X, F, k, steady_x[s, best_r], steady_jacobian[s, best_r],
                                                         peak, free_columns, settle_linearity, diff, scale):
                event[k] = SETTLES
                slot[k] = best_r
                continue
        if section[k] >= 0:
            j = section[k]
            if Y0[j, k] - level[k] < 0.0 and Y[j, k] - level[k] >= 0.0:
                event[k] = CROSSES


@njit(cache=True, error_model="numpy")
def _linear_there(X, F, k, x_star, jacobian, peak, free_columns, linearity, diff, scale):
    """f(x) equals J*(x - x*) up to `linearity` of its size (scaled by each state's size)."""
    n = X.shape[0]
    for j in range(n):
        diff[j] = X[j, k] - x_star[j]
        scale[j] = max(peak[free_columns[j], k], abs(x_star[j]))
    linear_size, residual_size = 0.0, 0.0
    for i in range(n):
        linear = 0.0
        for j in range(n):
            linear += jacobian[i, j] * diff[j]
        residual = F[i, k] - linear
        if scale[i] > 0.0:
            linear_size = max(linear_size, abs(linear) / scale[i])
            residual_size = max(residual_size, abs(residual) / scale[i])
    return residual_size <= linearity * linear_size


@njit(cache=True, error_model="numpy")
def match_returns(rows, point, when, scale, crossings, ret_t, ret_x, streak, lag, last_period,
                  max_lag, lag_tolerance, match_tolerance, restart):
    """Record a return to the section for each of `rows` and compare it with the earlier
    ones (see `poise.longrun.cycles`): the smallest lag whose return lies within
    `lag_tolerance` (in units of `scale`, per state) gives the period; a return within
    `match_tolerance` of it, at the lag and period of the previous one, extends the
    streak, else starts one (`restart`) or ends it. Updates the per-trajectory arrays in
    place; returns are kept in a ring of max_lag + 1."""
    ring = max_lag + 1
    n = point.shape[0]
    for i in range(rows.size):
        k = rows[i]
        crossings[k] += 1
        count = crossings[k]
        best_lag, best_distance = 0, np.inf
        for q in range(max_lag, 0, -1):
            if count - 1 - q < 0:
                continue
            slot = (count - 1 - q) % ring
            distance = 0.0
            for j in range(n):
                earlier = ret_x[slot, j, k]
                if earlier != earlier:
                    distance = np.inf
                    break
                gap = abs(point[j, i] - earlier)
                if gap > 0.0:
                    distance = max(distance, gap / scale[j, i])
            if distance <= lag_tolerance:
                best_lag, best_distance = q, distance
        period = np.nan
        if best_lag > 0:
            period = when[i] - ret_t[(count - 1 - best_lag) % ring, k]
        close = best_lag > 0 and best_distance <= match_tolerance
        same = (close and streak[k] > 0 and best_lag == lag[k]
                and abs(period - last_period[k]) <= match_tolerance * period)
        restart[i] = close and not same
        streak[k] = streak[k] + 1 if same else (1 if close else 0)
        lag[k] = best_lag
        last_period[k] = period
        slot = (count - 1) % ring
        ret_t[slot, k] = when[i]
        for j in range(n):
            ret_x[slot, j, k] = point[j, i]
