"""Compiled predictor-corrector tracking of ``H(X, s) = sum_k (C0 + s dC)_k X^E_k``.

The homotopy (`poise.equilibria.homotopy`) spends nearly all its time advancing paths.
Doing that with whole-array numpy operations costs about a microsecond per path and
evaluation (temporaries, a LAPACK call per 3x3 solve); here every path runs to its end
in one compiled loop over small fixed-size buffers, which is some ten times cheaper,
and a path needs no evaluations for the others. Each path is computed on its own, so
results do not depend on batch size or order.

Per path (homogeneous coordinates ``X``, chart row ``a . X = 1``, ``s`` from 1 to 0):

* **Predictor.** Classical Runge-Kutta on the Davidenko equation ``dX/ds = -H_X^-1 H_s``;
  the first stage is the velocity from the corrector's last factorisation. (A cubic
  Hermite predictor through the last two points needs no evaluations but forced steps
  about ten times shorter on these paths, so it cost more.)
* **Corrector.** Newton at the new ``s``; the step is accepted when the first
  correction is at most ``beta |X|`` (so the predictor stayed well inside the path's
  own basin) and a later one at most ``tol |X|``. The first correction sets the next
  step: ``0.8 (beta / first)**(1/5)``, between x0.5 and x2, capped at ``h_max``.
* **End.** A step that would end below ``s_stop`` lands at ``s = 0``. Steps that keep
  failing shrink until ``h < 1e-14 + 1e-9 s``: the path has *stalled* when that happens
  near ``s = 0`` (a singular endpoint, handled by the caller's endgame) and *failed*
  elsewhere.
* **Endgame.** `cauchy_endgame` takes stalled or singular paths from a point at small
  ``s`` and tracks them around circles ``s = r exp(i theta)`` until the path closes;
  the number of turns is the cycle number ``c`` and the mean of the points on the
  closed loop is the endpoint (Cauchy's integral formula in ``s**(1/c)``; Morgan,
  Sommese & Wampler 1992, "A power series method for computing singular solutions to
  nonlinear analytic systems", and Sommese & Wampler 2005, ch. 10).
"""

from __future__ import annotations

import numpy as np
from numba import njit

# path states (shared with poise.equilibria.homotopy)
ACTIVE, DONE, FAILED, STALLED = 0, 1, 2, 3


@njit(cache=True)
def _system(exps, live, c0, dc, chart, s, x, pw, H, J, Hs):
    """H, its Jacobian and dH/ds at (x, s) into H, J, Hs (the chart is the last row)."""
    q, K, nv = exps.shape
    deg = pw.shape[1] - 1
    for j in range(nv):
        pw[j, 0] = 1.0
        for e in range(1, deg + 1):
            pw[j, e] = pw[j, e - 1] * x[j]
    for i in range(q):
        h = 0j
        hs = 0j
        for j in range(nv):
            J[i, j] = 0j
        for k in range(K):
            if not live[i, k]:
                continue
            c = c0[i, k] + s * dc[i, k]
            mono = 1.0 + 0j
            for j in range(nv):
                mono *= pw[j, exps[i, k, j]]
            h += c * mono
            hs += dc[i, k] * mono
            for j in range(nv):
                e = exps[i, k, j]
                if e == 0:
                    continue
                term = c * e
                for m in range(nv):
                    if m == j:
                        term *= pw[m, e - 1]
                    else:
                        term *= pw[m, exps[i, k, m]]
                J[i, j] += term
        H[i] = h
        Hs[i] = hs
    h = -1.0 + 0j
    for j in range(nv):
        h += chart[j] * x[j]
        J[q, j] = chart[j]
    H[q] = h
    Hs[q] = 0j


@njit(cache=True)
def _solve2(A, b1, b2, out1, out2):
    """Solve A [out1 out2] = [b1 b2] by Gaussian elimination with partial pivoting.

    A, b1, b2 are overwritten. Returns False for an exactly singular or non-finite A.
    Pivots are chosen by |re| + |im| and reciprocals formed by hand: the library's
    careful complex abs and division cost more than the rest of the elimination.
    """
    n = A.shape[0]
    for col in range(n):
        piv = col
        best = -1.0
        for r in range(col, n):
            v = abs(A[r, col].real) + abs(A[r, col].imag)
            if v > best:
                best = v
                piv = r
        if not (best > 0.0 and best < np.inf):
            return False
        if piv != col:
            for c in range(n):
                t = A[col, c]
                A[col, c] = A[piv, c]
                A[piv, c] = t
            t = b1[col]
            b1[col] = b1[piv]
            b1[piv] = t
            t = b2[col]
            b2[col] = b2[piv]
            b2[piv] = t
        d = A[col, col]
        m2 = d.real * d.real + d.imag * d.imag
        inv = complex(d.real / m2, -d.imag / m2)
        A[col, col] = inv
        for r in range(col + 1, n):
            f = A[r, col] * inv
            for c in range(col + 1, n):
                A[r, c] -= f * A[col, c]
            b1[r] -= f * b1[col]
            b2[r] -= f * b2[col]
    for r in range(n - 1, -1, -1):
        a1 = b1[r]
        a2 = b2[r]
        for c in range(r + 1, n):
            a1 -= A[r, c] * out1[c]
            a2 -= A[r, c] * out2[c]
        out1[r] = a1 * A[r, r]
        out2[r] = a2 * A[r, r]
    return True


@njit(cache=True)
def _norm(v):
    t = 0.0
    for j in range(v.shape[0]):
        t += v[j].real * v[j].real + v[j].imag * v[j].imag
    return np.sqrt(t)


@njit(cache=True)
def _weighted_norm(v, weight):
    t = 0.0
    for j in range(v.shape[0]):
        t += (v[j].real * v[j].real + v[j].imag * v[j].imag) / (weight[j] * weight[j])
    return np.sqrt(t)


@njit(cache=True)
def _newton_velocity(exps, live, c0, dc, chart, s, x, pw, H, J, Hs, dx, vel):
    """Newton step dx and velocity dX/ds at (x, s), one evaluation and one elimination."""
    _system(exps, live, c0, dc, chart, s, x, pw, H, J, Hs)
    for j in range(H.shape[0]):
        H[j] = -H[j]
        Hs[j] = -Hs[j]
    return _solve2(J, H, Hs, dx, vel)


@njit(cache=True)
def track_paths(exps, live, chart, C0, dC, group, X0, weight, h_init, h_max, beta, tol,
                newton_steps, max_steps, s_stop):
    """Track every row of X0 from s = 1 to s = 0.

    Returns endpoints (N, nv) and states (N,) int8 (DONE / FAILED / STALLED).
    """
    N, nv = X0.shape
    pw = np.empty((nv, exps.max() + 1), dtype=np.complex128)  # powers of each coordinate
    H, Hs, dx, k2, k3, k4, tmp, x, v, xc, vc = np.empty((11, nv), dtype=np.complex128)
    J = np.empty((nv, nv), dtype=np.complex128)

    out = np.empty((N, nv), dtype=np.complex128)
    state = np.zeros(N, dtype=np.int8)
    for p in range(N):
        c0 = C0[group[p]]
        dc = dC[group[p]]
        for j in range(nv):
            x[j] = X0[p, j]
        s = 1.0
        h = h_init
        if not _newton_velocity(exps, live, c0, dc, chart, s, x, pw, H, J, Hs, dx, v):
            state[p] = FAILED
            out[p] = x
            continue
        st = ACTIVE
        for _ in range(max_steps):
            step = min(h, s)
            s_new = s - step
            if s_new <= s_stop:
                s_new = 0.0
            ds = s_new - s
            # classical Runge-Kutta on dX/ds = -H_X^-1 H_s (k1 = v)
            for j in range(nv):
                tmp[j] = x[j] + 0.5 * ds * v[j]
            _newton_velocity(exps, live, c0, dc, chart, s + 0.5 * ds, tmp, pw, H, J, Hs, dx, k2)
            for j in range(nv):
                tmp[j] = x[j] + 0.5 * ds * k2[j]
            _newton_velocity(exps, live, c0, dc, chart, s + 0.5 * ds, tmp, pw, H, J, Hs, dx, k3)
            for j in range(nv):
                tmp[j] = x[j] + ds * k3[j]
            _newton_velocity(exps, live, c0, dc, chart, s_new, tmp, pw, H, J, Hs, dx, k4)
            for j in range(nv):
                xc[j] = x[j] + ds / 6.0 * (v[j] + 2 * k2[j] + 2 * k3[j] + k4[j])
            first = np.inf
            converged = False
            for it in range(newton_steps):
                solved = _newton_velocity(exps, live, c0, dc, chart, s_new, xc, pw, H, J, Hs, dx, vc)
                if not solved:
                    break
                for j in range(nv):
                    xc[j] += dx[j]
                r = _weighted_norm(dx, weight) / _weighted_norm(xc, weight)
                if not np.isfinite(r):
                    break
                if it == 0:
                    first = r
                if r > beta:
                    break
                if r <= tol:
                    converged = True
                    break
            factor = 0.5
            if first > 0 and np.isfinite(first):
                factor = 0.8 * (beta / first) ** 0.2
            elif first == 0:
                factor = 2.0
            if converged:
                for j in range(nv):
                    x[j] = xc[j]
                    v[j] = vc[j]
                s = s_new
                h = min(h_max, h * min(2.0, max(0.5, factor)))
                if s == 0.0:
                    st = DONE
                    break
            else:
                h *= min(0.5, max(0.1, factor))
                if h < 1e-14 + 1e-9 * s:
                    st = STALLED if s < 1e-4 else FAILED
                    break
        if st == ACTIVE:
            st = STALLED if s < 1e-4 else FAILED
        state[p] = st
        out[p] = x
    return out, state


@njit(cache=True)
def refine_paths(exps, live, chart, C0, dC, group, X, budget):
    """Newton at s = 0 from each row of X (at most ``budget[p]`` steps, stopping once a
    step is below 1e-15 |X|), and the condition number of each end point's Jacobian.

    The condition number is that of the Jacobian with each polynomial row divided by the
    size its entries can have at this |X| (``sum_k |c_k| deg_k |X|_max**(deg_k - 1)``),
    in the 1-norm. The scale is a bound, not the row's current length: at a multiple
    root a whole row can vanish, and scaling it to unit length would hide exactly that.
    """
    N, nv = X.shape
    q, K, _ = exps.shape
    pw = np.empty((nv, exps.max() + 1), dtype=np.complex128)  # powers of each coordinate
    H, Hs, dx, vel, e1, e2, o1, o2, x = np.empty((9, nv), dtype=np.complex128)
    J = np.empty((nv, nv), dtype=np.complex128)
    A = np.empty((nv, nv), dtype=np.complex128)
    out = np.empty((N, nv), dtype=np.complex128)
    cond = np.empty(N)
    for p in range(N):
        c0 = C0[group[p]]
        dc = dC[group[p]]
        for j in range(nv):
            x[j] = X[p, j]
        for it in range(budget[p]):
            if not _newton_velocity(exps, live, c0, dc, chart, 0.0, x, pw, H, J, Hs, dx, vel):
                break
            finite = True
            for j in range(nv):
                if not np.isfinite(dx[j].real) or not np.isfinite(dx[j].imag):
                    finite = False
            if not finite:
                break
            for j in range(nv):
                x[j] += dx[j]
            if _norm(dx) <= 1e-15 * _norm(x):
                break
        out[p] = x
        # row-scaled Jacobian at the end point
        _system(exps, live, c0, dc, chart, 0.0, x, pw, H, J, Hs)
        radius = 0.0
        for j in range(nv):
            radius = max(radius, abs(x[j]))
        cmax = 0.0
        for j in range(nv):
            cmax = max(cmax, abs(chart[j]))
        for i in range(q):
            bound = 0.0
            for k in range(K):
                if live[i, k]:
                    d = 0
                    for j in range(nv):
                        d += exps[i, k, j]
                    if d > 0:
                        bound += abs(c0[i, k]) * d * radius ** (d - 1)
            if bound == 0.0:
                bound = 1.0
            for j in range(nv):
                J[i, j] /= bound
        for j in range(nv):
            J[q, j] = chart[j] / cmax
        cond[p] = _condition_1(J, A, e1, e2, o1, o2)
    return out, cond


@njit(cache=True)
def _condition_1(J, A, e1, e2, o1, o2):
    """||J||_1 ||J^-1||_1 (inf when J is singular or not finite)."""
    n = J.shape[0]
    norm_j = 0.0
    for c in range(n):
        col = 0.0
        for r in range(n):
            col += abs(J[r, c])
        norm_j = max(norm_j, col)
    if not np.isfinite(norm_j):
        return np.inf
    norm_inv = 0.0
    for c in range(0, n, 2):
        for r in range(n):
            e1[r] = 0j
            e2[r] = 0j
        e1[c] = 1.0
        if c + 1 < n:
            e2[c + 1] = 1.0
        for r in range(n):
            for m in range(n):
                A[r, m] = J[r, m]
        if not _solve2(A, e1, e2, o1, o2):
            return np.inf
        s1 = 0.0
        s2 = 0.0
        for r in range(n):
            s1 += abs(o1[r])
            s2 += abs(o2[r])
        norm_inv = max(norm_inv, s1)
        if c + 1 < n:
            norm_inv = max(norm_inv, s2)
    result = norm_j * norm_inv
    if not np.isfinite(result):
        return np.inf
    return result


@njit(cache=True)
def near_pairs(points, per_group, rel):
    """Which points have another point of their block within ``rel * |point|``.

    Blocks are ``per_group`` consecutive rows (the paths of one parameter set); every
    pair inside a block is compared. Returns (any, later): a close partner exists / a
    close partner with a smaller index exists. NaN points never match.
    """
    N, d = points.shape
    close_any = np.zeros(N, dtype=np.bool_)
    close_later = np.zeros(N, dtype=np.bool_)
    size = np.empty(N)
    for i in range(N):
        size[i] = _norm(points[i])
    for lo in range(0, N, per_group):
        hi = min(N, lo + per_group)
        for i in range(lo, hi):
            if not np.isfinite(size[i]):
                continue
            for j in range(i + 1, hi):
                if not np.isfinite(size[j]):
                    continue
                gap = 0.0
                for c in range(d):
                    z = points[i, c] - points[j, c]
                    gap += z.real * z.real + z.imag * z.imag
                if np.sqrt(gap) <= rel * max(size[i], size[j]):
                    close_any[i] = True
                    close_any[j] = True
                    close_later[j] = True
    return close_any, close_later
