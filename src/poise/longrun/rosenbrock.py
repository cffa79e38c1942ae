"""One adaptive step of a stiff Rosenbrock method for a whole batch of trajectories.

The method is the four-stage, fourth-order L-stable Rosenbrock method with an embedded
third-order solution of Hairer & Wanner, *Solving Ordinary Differential Equations II*
(2nd ed., Springer 1996, section IV.7, the "L-stable" coefficient set of their ROS4
code), written in their transformed variables (eq. 7.4' there): with
``G = I / (h gamma) - J`` and J the Jacobian at the step's start,

    G u_i = f(x + sum_j a_ij u_j) + sum_j (c_ij / h) u_j,      i = 1..4
    x_new = x + sum_i m_i u_i,     error = sum_i e_i u_i.

Stage 4 evaluates f at the same point as stage 3, so a step costs one evaluation of f
and J together, two of f alone, one LU factorisation and four solves per trajectory.
L-stability matters here: the curated models hold rates six decades apart (a stiff
model with an explicit or merely A-stable method would crawl or ring).

Layout: states and stages in rows, trajectories last (``(n, K)``), as the model's
compiled row kernels produce them. Each trajectory has its own step size; the
compiled loops below treat every trajectory on its own, so its numbers never depend
on the other members of the batch.
"""

from __future__ import annotations

import numpy as np
from numba import njit

GAMMA = 0.57282
# transformed coefficients (Hairer & Wanner 1996, ROS4 "L-stable" set); a_4j = a_3j
A21 = 2.0
A31, A32 = 1.867943637803922, 0.2344449711399156
C21 = -7.137615036412310
C31, C32 = 2.580708087951457, 0.6515950076447975
C41, C42, C43 = -2.137148994382534, -0.3214669691237626, -0.6949742501781779
M = (2.255570073418735, 0.2870493262186792, 0.4353179431840180, 1.093502252409163)
E = (-0.2815431932141155, -0.07276199124938920, -0.1082196201495311, -1.093502252409163)
ORDER = 4          # of x_new; the embedded solution has order 3, so error ~ h**4

# step-size control (common practice, no source): aim at 0.9 of the tolerance, change
# h by at most a factor 5 up or 5 down per step, never grow right after a rejection
SAFETY, GROW_MAX, SHRINK_MAX = 0.9, 5.0, 0.2


def step(kernels, X: np.ndarray, P: np.ndarray, F: np.ndarray, J: np.ndarray, h: np.ndarray,
         live: np.ndarray, weight_floor: np.ndarray, rtol: float, size: np.ndarray | None = None):
    """Try one step of size `h` from `X` for every live trajectory.

    Parameters
    ----------
    kernels : poise.model.Kernels
        The model's compiled kernels (`rhs` is called on the stage points).
    X, F : (n, K) arrays
        States and f(X) at the step's start.
    P : (m, K) array
        Each trajectory's parameter values.
    J : (n*n, K) array
        The Jacobian at X, row by row (as `rhs_and_jacobian_rows` returns it).
    h : (K,) array
        Step sizes (> 0 where live).
    live : (K,) bool array
        Trajectories to step; the others are left alone.
    weight_floor : (n, K) array
        The absolute part of each state's error weight.
    rtol : float
        Relative tolerance.
    size : (n, K) array, optional
        Each state's size (> 0, or 0 to leave the state out) for `stiffness`.

    Returns
    -------
    x_new : (n, K) array
        The fourth-order solution (meaningless where `error` is not finite).
    error : (K,) array
        The largest over states of |embedded error| / (weight_floor + rtol * max(|x|, |x_new|)):
        the step is acceptable where it is <= 1. ``inf`` where the step matrix is singular
        or a stage could not be evaluated.
    stiffness : (K,) array
        h times the infinity norm of J in units of `size` (max_i sum_j |J_ij| size_j / size_i):
        how far beyond explicit-method territory the step is. Zeros without `size`.
    """
    n, count = X.shape
    lu = np.empty((count, n, n))
    pivots = np.empty((count, n), dtype=np.int64)
    ok = np.empty(count, dtype=np.bool_)
    U = np.empty((4, n, count))
    point = np.empty((n, count))
    stiffness = np.zeros(count)
    _first_stage(J, F, X, h, live, lu, pivots, ok, U, point)
    if size is not None:
        _stiffness(J, h, size, live, stiffness)
    F2 = _rhs_rows(kernels, point, P)
    _second_stage(lu, pivots, ok, F2, X, h, U, point)
    F3 = _rhs_rows(kernels, point, P)
    x_new = np.empty((n, count))
    error = np.empty(count)
    _last_stages(lu, pivots, ok, F3, X, h, U, weight_floor, rtol, x_new, error)
    return x_new, error, stiffness


def next_step_size(h: np.ndarray, error: np.ndarray, rejected_before: np.ndarray) -> np.ndarray:
    """The usual controller for a method whose error estimate is O(h**ORDER)."""
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        factor = SAFETY * np.power(np.maximum(error, 1e-300), -1.0 / ORDER)
    factor = np.where(np.isfinite(factor), factor, SHRINK_MAX)
    factor = np.clip(factor, SHRINK_MAX, GROW_MAX)
    factor = np.where(rejected_before & (error <= 1.0), np.minimum(factor, 1.0), factor)
    return h * factor


def _rhs_rows(kernels, points: np.ndarray, P: np.ndarray) -> np.ndarray:
    """f at (n, K) points in row layout (the batch kernel takes and gives batch-first)."""
    return np.ascontiguousarray(kernels.rhs(points.T, P.T).T)


@njit(cache=True, error_model="numpy")
def _factor(G, pivots, k, n):
    """LU with partial pivoting of G[k] in place; False if singular or not finite."""
    for c in range(n):
        p = c
        best = abs(G[k, c, c])
        for r in range(c + 1, n):
            value = abs(G[k, r, c])
            if value > best:
                best, p = value, r
        pivots[k, c] = p
        if not (best > 0.0 and best < np.inf):
            return False
        if p != c:
            for j in range(n):
                G[k, c, j], G[k, p, j] = G[k, p, j], G[k, c, j]
        for r in range(c + 1, n):
            G[k, r, c] /= G[k, c, c]
            factor = G[k, r, c]
            for j in range(c + 1, n):
                G[k, r, j] -= factor * G[k, c, j]
    return True


@njit(cache=True, error_model="numpy")
def _solve(lu, pivots, k, n, b):
    """Overwrite the vector b (length n) with lu[k]^-1 b."""
    for c in range(n):
        p = pivots[k, c]
        if p != c:
            b[c], b[p] = b[p], b[c]
    for i in range(n):
        for j in range(i):
            b[i] -= lu[k, i, j] * b[j]
    for i in range(n - 1, -1, -1):
        for j in range(i + 1, n):
            b[i] -= lu[k, i, j] * b[j]
        b[i] /= lu[k, i, i]


@njit(cache=True, error_model="numpy")
def _stiffness(J, h, size, live, out):
    n, count = size.shape
    for k in range(count):
        if not live[k]:
            continue
        worst = 0.0
        for i in range(n):
            if not size[i, k] > 0.0:
                continue
            row = 0.0
            for j in range(n):
                if size[j, k] > 0.0:
                    row += abs(J[i * n + j, k]) * size[j, k]
            worst = max(worst, row / size[i, k])
        out[k] = h[k] * worst if worst == worst else np.inf


@njit(cache=True, error_model="numpy")
def _first_stage(J, F, X, h, live, lu, pivots, ok, U, point):
    n, count = X.shape
    b = np.empty(n)
    for k in range(count):
        ok[k] = False
        if not live[k]:
            continue
        diagonal = 1.0 / (h[k] * GAMMA)
        for i in range(n):
            for j in range(n):
                lu[k, i, j] = -J[i * n + j, k]
            lu[k, i, i] += diagonal
        ok[k] = _factor(lu, pivots, k, n)
        for i in range(n):
            b[i] = F[i, k]
        if ok[k]:
            _solve(lu, pivots, k, n, b)
        for i in range(n):
            U[0, i, k] = b[i]
            point[i, k] = X[i, k] + A21 * b[i]


@njit(cache=True, error_model="numpy")
def _second_stage(lu, pivots, ok, F2, X, h, U, point):
    n, count = X.shape
    b = np.empty(n)
    for k in range(count):
        if not ok[k]:
            for i in range(n):
                U[1, i, k] = np.nan
                point[i, k] = X[i, k]
            continue
        for i in range(n):
            b[i] = F2[i, k] + (C21 / h[k]) * U[0, i, k]
        _solve(lu, pivots, k, n, b)
        for i in range(n):
            U[1, i, k] = b[i]
            point[i, k] = X[i, k] + A31 * U[0, i, k] + A32 * b[i]


@njit(cache=True, error_model="numpy")
def _last_stages(lu, pivots, ok, F3, X, h, U, weight_floor, rtol, x_new, error):
    n, count = X.shape
    b = np.empty(n)
    for k in range(count):
        if not ok[k]:
            error[k] = np.inf
            for i in range(n):
                x_new[i, k] = X[i, k]
            continue
        inverse_h = 1.0 / h[k]
        for i in range(n):
            b[i] = F3[i, k] + inverse_h * (C31 * U[0, i, k] + C32 * U[1, i, k])
        _solve(lu, pivots, k, n, b)
        for i in range(n):
            U[2, i, k] = b[i]
            b[i] = F3[i, k] + inverse_h * (C41 * U[0, i, k] + C42 * U[1, i, k] + C43 * U[2, i, k])
        _solve(lu, pivots, k, n, b)
        worst = 0.0
        for i in range(n):
            u0, u1, u2, u3 = U[0, i, k], U[1, i, k], U[2, i, k], b[i]
            new = X[i, k] + M[0] * u0 + M[1] * u1 + M[2] * u2 + M[3] * u3
            estimate = E[0] * u0 + E[1] * u1 + E[2] * u2 + E[3] * u3
            x_new[i, k] = new
            if estimate == 0.0:       # also where the weight is 0 (a state at exactly 0)
                continue
            weight = weight_floor[i, k] + rtol * max(abs(X[i, k]), abs(new))
            ratio = abs(estimate) / weight
            if not (ratio <= worst):      # also catches NaN
                worst = ratio if ratio == ratio else np.inf
        error[k] = worst
