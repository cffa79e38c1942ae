"""Cubic Hermite interpolation inside one accepted step.

Between two accepted points the solution is interpolated by the cubic that matches the
values and the slopes f at both ends (error O(h**4), in line with the fourth-order
steps). It places section crossings (here) and the extremes of each state between the
steps (compiled, in `poise.longrun.scan`), so a period or an amplitude is not off by
the step size. Everything is elementwise.
"""

from __future__ import annotations

import numpy as np

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
    """Fraction s in [0, 1] where the interpolant of g crosses zero, given g0 < 0 <= g1.

    Newton steps from the secant estimate, kept inside the bracket that the sign
    changes maintain (a bisection step when Newton would leave it).
    """
    c1, c2, c3 = coefficients(g0, g1, d0, d1, dt)
    with np.errstate(divide="ignore", invalid="ignore"):
        s = np.clip(-g0 / (g1 - g0), 0.0, 1.0)
    s = np.where(np.isfinite(s), s, 0.5)
    low, high = np.zeros_like(s), np.ones_like(s)
    for _ in range(NEWTON_STEPS):
        g = g0 + s * (c1 + s * (c2 + s * c3))
        slope = c1 + s * (2.0 * c2 + 3.0 * s * c3)
        below = g < 0
        low = np.where(below, s, low)
        high = np.where(below, high, s)
        with np.errstate(divide="ignore", invalid="ignore"):
            newton = s - g / slope
        inside = np.isfinite(newton) & (newton > low) & (newton < high)
        s = np.where(inside, newton, 0.5 * (low + high))
    return s
