"""Cubic Hermite interpolation inside one accepted step.

Between two accepted points the solution is interpolated by the cubic that matches the
values and the slopes f at both ends (error O(h**4), in line with the fourth-order
steps). It places section crossings (here) and the extremes of each state between the
steps (compiled, in `poise.longrun.scan`), so a period or an amplitude is not off by
the step size. Everything is elementwise.
"""

from __future__ import annotations

import numpy as np
from numba import njit

NEWTON_STEPS = 8


def coefficients(y0, y1, d0, d1, dt):
    """p(s) = y0 + c1 s + c2 s**2 + c3 s**3 on s in [0, 1] (s = fraction of the step)."""
    c1 = dt * d0
    c2 = 3.0 * (y1 - y0) - dt * (2.0 * d0 + d1)
    c3 = 2.0 * (y0 - y1) + dt * (d0 + d1)
    return c1, c2, c3


def value(y0, y1, d0, d1, dt, s):
    """The interpolant at fraction s of the step."""
    c1, c2, c3 = coefficients(y0, y1, d0, d1, dt)
    return y0 + s * (c1 + s * (c2 + s * c3))


def crossing(g0, g1, d0, d1, dt):
    """Fraction s in [0, 1] where the interpolant of g crosses zero, given g0 < 0 <= g1
    (1-D arrays). Newton steps from the secant estimate, kept inside the bracket that
    the sign changes maintain (a bisection step when Newton would leave it)."""
    out = np.empty(np.shape(g0))
    _crossing(np.asarray(g0, float), np.asarray(g1, float), np.asarray(d0, float), np.asarray(d1, float),
              np.asarray(dt, float), out)
    return out


@njit(cache=True, error_model="numpy")
def _crossing(g0, g1, d0, d1, dt, out):
    for k in range(g0.size):
        c1 = dt[k] * d0[k]
        c2 = 3.0 * (g1[k] - g0[k]) - dt[k] * (2.0 * d0[k] + d1[k])
        c3 = 2.0 * (g0[k] - g1[k]) + dt[k] * (d0[k] + d1[k])
        s = -g0[k] / (g1[k] - g0[k])
        s = min(max(s, 0.0), 1.0) if s == s else 0.5
        low, high = 0.0, 1.0
        for _ in range(NEWTON_STEPS):
            g = g0[k] + s * (c1 + s * (c2 + s * c3))
            if g == 0.0:
                break
            if g < 0.0:
                low = s
            else:
                high = s
            slope = c1 + s * (2.0 * c2 + 3.0 * s * c3)
            newton = s - g / slope
            s = newton if (newton > low and newton < high) else 0.5 * (low + high)
        out[k] = s
