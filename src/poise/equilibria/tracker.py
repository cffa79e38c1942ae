"""Compiled predictor-corrector tracking of ``H(X, s) = sum_k c_k(s) X^E_k``.

Each coefficient is a polynomial in ``s``: ``c_k(s) = sum_m C[k, m] s**m`` (degree 1
for a straight line in coefficient space, higher along a line in parameter space when
the coefficients are polynomials in the parameters).

The homotopy (`poise.equilibria.homotopy`) spends nearly all its time advancing paths.
Doing that with whole-array numpy operations costs about a microsecond per path and
evaluation (temporaries, a LAPACK call per 3x3 solve); here every path runs to its end
in one compiled loop over small fixed-size buffers, which is some ten times cheaper,
and a path needs no evaluations for the others. Each path is computed on its own, so
results do not depend on batch size or order.

Per path (homogeneous coordinates ``X``, chart row ``a . X = 1``, ``s`` from 1 to 0; a
step is a straight segment in the complex ``s`` plane, so the same step serves the real
path and the endgame's circles):

* **Predictor.** Classical Runge-Kutta on the Davidenko equation ``dX/ds = -H_X^-1 H_s``
  (holomorphic in ``s``); the first stage is the velocity from the corrector's last
  factorisation. A path leaving a hub root starts with a velocity from the hub's own
  factorised Jacobian (`start_factors`, `start_velocities`): no evaluation, which is a
  tenth of the work of a path that reaches s = 0 in one step. (A cubic Hermite predictor through the last two points needs no
  evaluations but forced steps about ten times shorter on these paths, so it cost more.)
* **Corrector.** Newton at the new ``s``; the step is accepted when the first
  correction is at most ``beta |X|`` (so the predictor stayed well inside the path's
  own basin) and a later one at most ``tol |X|``. (Accepting once the next correction,
  estimated from the contraction of the last two, would be below ``tol`` saves about
  one evaluation in ten, but the points are then less accurate in coordinates much
  smaller than ``|X|``, and paths between roots of very different sizes jumped: 10 %
  of sets lost a root with states ~1e-5 and ~1e3.) The first correction sets the next
  step: ``0.8 (beta / first)**(1/5)``, between x0.5 and x2, capped at ``h_max``.
* **End.** A step that would end below ``s_stop`` lands at ``s = 0``. Steps that keep
  failing shrink until ``h < 1e-14 + 1e-9 s``: the path has *stalled* when that happens
  near ``s = 0`` and *failed* elsewhere.
* **Endgame.** A path taking three steps in a row shorter than ``0.75 s`` once
  ``s <= 0.01`` is heading for a singular end point (a multiple root, or a singular
  point at infinity): plain steps shrink geometrically down to ``s ~ 1e-11``.
  Instead it is tracked around the circle ``s = r exp(i theta)`` (chords between 8
  points per turn) until it closes; the number of turns is the cycle number ``c`` and
  the mean of the points on the closed loop is the end point (Cauchy's integral formula
  in ``s**(1/c)``: the trapezoid rule on ``c`` turns is exact for the first ``8 c - 1``
  powers; Morgan, Sommese & Wampler 1992, "A power series method for computing
  singular solutions to nonlinear analytic systems"; Sommese & Wampler 2005, ch. 10).
  The circle is repeated at radius ``r / 4``; an estimate is accepted when two
  successive circles have the same cycle number, agree, the loop's spread shrank, the
  estimate solves the target, and it lies at infinity. Finite singular end points
  (multiple roots) are left to plain steps, which stall near ``s = 0`` and are refined
  by Newton: circles that also enclose other branch points close to ``s = 0`` (a
  cluster of nearby simple roots) average distinct roots, and for small roots nothing
  on the circle tells that average from a multiple root (nor does the Jacobian's
  condition number at the average: in the units of ``|X|`` a cluster much smaller than
  ``|X|`` looks singular too; tried, it merged a triple root at ~1e-3 with a simple
  root 2e-3 away, and four roots of size 1e-6). The endgame's gain is the
  paths that diverge to a singular point at infinity, which plain steps follow down to
  ``s ~ 1e-11`` at hundreds of evaluations. An endgame that does not settle hands the
  path back to plain steps.
"""

from __future__ import annotations

import numpy as np
from numba import njit

# path states (shared with poise.equilibria.homotopy)
ACTIVE, DONE, FAILED, STALLED = 0, 1, 2, 3

_GROW_EXP, _MAX_GROW, _SHRINK_EXP, _MIN_SHRINK = 0.2, 2.0, 0.2, 0.1  # step control

# endgame: starts once s <= _EG_RADIUS after _EG_STREAK steps below _EG_RATIO * s;
# _EG_SAMPLES points per turn, at most _EG_CYCLE turns per circle (closed when back to
# within _EG_CLOSE, relative), radius shrinking by _EG_SHRINK for at most _EG_ROUNDS
# circles; see `_cauchy` for when an estimate is accepted
_EG_RADIUS, _EG_RATIO, _EG_STREAK, _EG_SAMPLES, _EG_SHRINK = 0.01, 0.75, 3, 8, 0.25
_EG_CYCLE, _EG_ROUNDS, _EG_CLOSE, _EG_RESIDUAL = 8, 6, 1e-6, 1e-10
_EG_AGREE, _EG_SHRANK, _EG_INFINITY = 1e-8, 0.95, 1e-11
_EG_FINITE = 1e-6  # |X_0| / |X| of an estimate above this: a finite point, endgame stops


@njit(cache=True, inline="always")
def _system(P, s, x, W, J, want_h):
    """H (unless not want_h), dH/ds and the Jacobian J at (x, s), into W = (H, Hs, pre,
    pw) and J; P = (exps, live, C, chart) with C (q, K, degree in s + 1). The chart is
    the last row.

    pre (nv,) and the power table pw (nv, max degree + 1) are scratch.
    """
    exps, live, C, chart = P
    q, K, nv = exps.shape
    top = C.shape[2] - 1
    H, Hs, pre, pw = W
    for j in range(nv):
        pw[j, 0] = 1.0
        for e in range(1, pw.shape[1]):
            pw[j, e] = pw[j, e - 1] * x[j]
    for i in range(q):
        h = 0j
        hs = 0j
        for j in range(nv):
            J[i, j] = 0j
        for k in range(K):
            if not live[i, k]:
                continue
            # c(s) and dc/ds by Horner's rule
            c = C[i, k, top]
            dc = 0j
            for m in range(top - 1, -1, -1):
                dc = dc * s + c
                c = c * s + C[i, k, m]
            # prefix products of the monomial's factors; the suffix is built on the way
            # back, so each partial derivative costs two multiplications
            acc = 1.0 + 0j
            for j in range(nv):
                pre[j] = acc
                acc *= pw[j, exps[i, k, j]]
            if want_h:
                h += c * acc
            hs += dc * acc
            suffix = c
            for j in range(nv - 1, -1, -1):
                e = exps[i, k, j]
                if e > 0:
                    J[i, j] += e * pw[j, e - 1] * pre[j] * suffix
                suffix *= pw[j, e]
        H[i] = h
        Hs[i] = hs
    h = -1.0 + 0j
    for j in range(nv):
        h += chart[j] * x[j]
        J[q, j] = chart[j]
    H[q] = h
    Hs[q] = 0j


@njit(cache=True)
def _work(exps):
    """Scratch for `_system`: H, dH/ds, prefix products and the power table."""
    nv = exps.shape[2]
    return (np.empty(nv, dtype=np.complex128), np.empty(nv, dtype=np.complex128),
            np.empty(nv, dtype=np.complex128), np.empty((nv, exps.max() + 1), dtype=np.complex128))


@njit(cache=True, inline="always")
def _solve2(A, b1, b2, out1, out2, two):
    """Solve A out1 = b1 (and A out2 = b2 when ``two``) by Gaussian elimination with
    partial pivoting. A, b1, b2 are overwritten. Returns False for an exactly singular
    or non-finite A.

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
            if two:
                t = b2[col]
                b2[col] = b2[piv]
                b2[piv] = t
        d = A[col, col]
        m2 = d.real * d.real + d.imag * d.imag
        if not m2 > 0.0:  # a pivot below ~1e-154 squares to zero: singular here
            return False
        inv = complex(d.real / m2, -d.imag / m2)
        A[col, col] = inv
        for r in range(col + 1, n):
            f = A[r, col] * inv
            for c in range(col + 1, n):
                A[r, c] -= f * A[col, c]
            b1[r] -= f * b1[col]
            if two:
                b2[r] -= f * b2[col]
    for r in range(n - 1, -1, -1):
        a1 = b1[r]
        for c in range(r + 1, n):
            a1 -= A[r, c] * out1[c]
        out1[r] = a1 * A[r, r]
        if two:
            a2 = b2[r]
            for c in range(r + 1, n):
                a2 -= A[r, c] * out2[c]
            out2[r] = a2 * A[r, r]
    return True


@njit(cache=True, inline="always")
def _norm(v):
    t = 0.0
    for j in range(v.shape[0]):
        t += v[j].real * v[j].real + v[j].imag * v[j].imag
    return np.sqrt(t)


@njit(cache=True, inline="always")
def _weighted_norm(v, inv_weight):
    t = 0.0
    for j in range(v.shape[0]):
        t += (v[j].real * v[j].real + v[j].imag * v[j].imag) * inv_weight[j]
    return np.sqrt(t)


@njit(cache=True)
def _newton_velocity(P, s, x, W, J, dx, vel):
    """Newton step dx and velocity dX/ds at (x, s): one evaluation, one elimination."""
    _system(P, s, x, W, J, True)
    H, Hs = W[0], W[1]
    for j in range(H.shape[0]):
        H[j] = -H[j]
        Hs[j] = -Hs[j]
    return _solve2(J, H, Hs, dx, vel, True)


@njit(cache=True)
def _velocity(P, s, x, W, J, vel):
    """Velocity dX/ds at (x, s) alone (H itself is not needed)."""
    _system(P, s, x, W, J, False)
    Hs = W[1]
    for j in range(Hs.shape[0]):
        Hs[j] = -Hs[j]
    return _solve2(J, Hs, Hs, vel, vel, False)


@njit(cache=True)
def _step(P, W, J, V, s, s_new, inv_w, beta, tol, newton_steps, tally):
    """One predictor-corrector step from (V[0] = x, V[1] = v) at s to s_new (complex).

    The result goes to V[2] (point) and V[3] (velocity). Returns (converged, first
    correction relative to |X|, last correction relative to |X|). V[4:] are scratch;
    tally[0] counts evaluations.
    """
    x, v, xc, vc, k, tmp, dx = V[0], V[1], V[2], V[3], V[4], V[7], V[8]
    nv = x.shape[0]
    ds = s_new - s
    # stages 2-4; k keeps the previous stage's velocity, xc sums the weighted stages
    for j in range(nv):
        k[j] = v[j]
        xc[j] = v[j]
    tally[0] += 3
    for stage in range(3):
        frac = 1.0 if stage == 2 else 0.5
        for j in range(nv):
            tmp[j] = x[j] + frac * ds * k[j]
        _velocity(P, s + frac * ds, tmp, W, J, k)
        for j in range(nv):
            xc[j] += (1.0 if stage == 2 else 2.0) * k[j]
    for j in range(nv):
        xc[j] = x[j] + ds / 6.0 * xc[j]
    first = np.inf
    for it in range(newton_steps):
        tally[0] += 1
        if not _newton_velocity(P, s_new, xc, W, J, dx, vc):
            return False, first, np.inf
        for j in range(nv):
            xc[j] += dx[j]
        r = _weighted_norm(dx, inv_w) / _weighted_norm(xc, inv_w)
        if not np.isfinite(r):
            return False, first, r
        if it == 0:
            first = r
        if r > beta:
            return False, first, r
        if r <= tol:
            return True, first, r
    return False, first, np.inf


@njit(cache=True)
def _segment(P, W, J, V, sa, sb, h, settings, trigger):
    """Advance (V[0], V[1]) along the straight segment from sa to sb (complex).

    ``h`` is the first step as a fraction of the segment. With ``trigger`` > 0 the walk
    stops early, for the endgame, once ``_EG_STREAK`` accepted steps in a row, each
    starting at ``|s| <= _EG_RADIUS``, covered less than ``_EG_RATIO |s|`` (and were not
    capped by h_max). Returns (state, fraction reached, next h): state DONE
    (reached sb), ACTIVE (stopped for the endgame), STALLED / FAILED (steps collapsed
    near / away from s = 0, or out of steps).
    """
    inv_w, h_max, beta, tol, newton_steps, max_steps, s_stop, tally, settled = settings
    x, v, xc, vc = V[0], V[1], V[2], V[3]
    length = abs(sb - sa)
    t = 0.0
    streak = 0  # accepted steps in a row that were short for the endgame test
    for _ in range(max_steps):
        t_new = min(1.0, t + h)
        if (1.0 - t_new) * length <= s_stop:
            t_new = 1.0
        s = sa + t * (sb - sa)
        converged, first, last = _step(P, W, J, V, s, sa + t_new * (sb - sa), inv_w, beta, tol,
                                       newton_steps, tally)
        if converged:
            settled[0] = last
            for j in range(x.shape[0]):
                x[j] = xc[j]
                v[j] = vc[j]
            taken = t_new - t
            before = abs(s)
            t = t_new
            grow = _MAX_GROW if first == 0 else 0.8 * (beta / first) ** _GROW_EXP
            h = min(h_max, h * min(_MAX_GROW, max(0.5, grow)))
            if t == 1.0:
                return DONE, t, h
            # short steps not imposed by h_max, several in a row: a singular end point
            short = before <= _EG_RADIUS and taken * length < _EG_RATIO * before and h < h_max
            streak = streak + 1 if short else 0
            if trigger and streak >= _EG_STREAK:
                return ACTIVE, t, h
        else:
            # shrink h itself, even when the step tried was shorter (it ran to the end of
            # the segment): near a multiple root this brings the collapse on quickly
            shrink = 0.5
            if first > 0 and np.isfinite(first):
                shrink = 0.8 * (beta / first) ** _SHRINK_EXP
            h = h * min(0.5, max(_MIN_SHRINK, shrink))
            here = abs(sa + t * (sb - sa))
            if h * length < 1e-14 + 1e-9 * here:
                return (STALLED if here < 1e-4 else FAILED), t, h
    here = abs(sa + t * (sb - sa))
    return (STALLED if here < 1e-4 else FAILED), t, h


@njit(cache=True)
def _polish(P, W, J, V, s, inv_w, tally):
    """Newton at fixed s on V[0] until the correction is below 1e-12 |X| (4 steps at most)."""
    x, dx, tmp = V[0], V[8], V[7]
    for _ in range(4):
        tally[0] += 1
        if not _newton_velocity(P, s, x, W, J, dx, tmp):
            return
        for j in range(x.shape[0]):
            x[j] += dx[j]
        if _weighted_norm(dx, inv_w) <= 1e-12 * _weighted_norm(x, inv_w):
            return


@njit(cache=True)
def _residual(P, x, W, inv_w):
    """max_i |H_i(x, 0)| / sum_k |c_ik| prod_j max(|x_j|, w_j)**e_kj: the target's
    residual relative to the size of its terms, each coordinate counted at least at its
    typical size w (``inv_w = 1 / w**2``): at a point where every monomial vanishes the
    actual terms are all rounding noise, and against |x|_max instead a cluster of small
    roots would pass for a solution anywhere near it."""
    exps, live, C, _ = P
    q, K, nv = exps.shape
    pw = W[3]
    floor = W[2]  # coordinate sizes, floored
    for j in range(nv):
        floor[j] = max(abs(x[j]), 1.0 / np.sqrt(inv_w[j]))
        pw[j, 0] = 1.0
        for e in range(1, pw.shape[1]):
            pw[j, e] = pw[j, e - 1] * x[j]
    worst = 0.0
    for i in range(q):
        h = 0j
        size = 0.0
        for k in range(K):
            if live[i, k]:
                term = C[i, k, 0]
                bound = abs(C[i, k, 0])
                for j in range(nv):
                    term *= pw[j, exps[i, k, j]]
                    bound *= floor[j].real ** exps[i, k, j]
                h += term
                size += bound
        if size > 0:
            worst = max(worst, abs(h) / size)
    return worst


@njit(cache=True)
def _cauchy(P, W, J, V, E, r, settings):
    """Cauchy endgame from (V[0], V[1]) at s = r (real). On success the end point is in
    E[0] and the cycle number is returned; 0 when it does not settle (V then holds the
    path at the last real radius reached, E[3] its s in the real part).

    An estimate is accepted when two successive circles (radius r, then r / 4) have the
    same cycle number, their estimates agree to _EG_AGREE, the loop's spread shrank (by
    at least _EG_SHRANK), the estimate solves the target (_EG_RESIDUAL) *and it lies
    at infinity* (|X_0| <= _EG_INFINITY |X|). Finite singular end points are left to
    plain steps: a circle that also encloses other branch points close to s = 0 (a
    cluster of nearby simple roots) averages distinct roots, and for small roots the
    average passes every test above; at infinity an average can only be at infinity.
    """
    inv_w = settings[0]
    x, v = V[0], V[1]
    start, total, home_v, previous = E[1], E[2], E[4], E[5]
    nv = x.shape[0]
    M = _EG_SAMPLES
    last_cycle, last_spread = 0, np.inf
    for rnd in range(_EG_ROUNDS):
        E[3, 0] = r
        _polish(P, W, J, V, complex(r, 0.0), inv_w, settings[7])
        for j in range(nv):
            start[j] = x[j]
            home_v[j] = v[j]
            total[j] = 0j
        cycle = 0
        spread = 0.0
        broken = False
        for turn in range(1, _EG_CYCLE + 1):
            for k in range(M):
                gap = 0.0
                for j in range(nv):
                    total[j] += x[j]
                    z = x[j] - start[j]
                    gap += (z.real * z.real + z.imag * z.imag) * inv_w[j]
                spread = max(spread, np.sqrt(gap))
                sa = r * np.exp(2j * np.pi * k / M)
                sb = r * np.exp(2j * np.pi * (k + 1) / M)
                state, _, _ = _segment(P, W, J, V, sa, sb, 1.0, settings, False)
                if state != DONE:
                    broken = True
                    break
            if broken:
                break
            gap = 0.0
            for j in range(nv):
                z = x[j] - start[j]
                gap += (z.real * z.real + z.imag * z.imag) * inv_w[j]
            if np.sqrt(gap) <= _EG_CLOSE * _weighted_norm(start, inv_w):
                cycle = turn
                break
        # back on the real axis at s = r whatever happened on the circle
        for j in range(nv):
            x[j] = start[j]
            v[j] = home_v[j]
        if broken:
            return 0
        if cycle > 0:
            for j in range(nv):
                E[0, j] = total[j] / (cycle * M)
            if abs(E[0, 0]) > _EG_FINITE * _norm(E[0]):
                return 0  # plainly finite: left to plain steps (see above), no more rounds
            if cycle == last_cycle and spread <= _EG_SHRANK * last_spread:
                gap = 0.0
                for j in range(nv):
                    z = E[0, j] - previous[j]
                    gap += (z.real * z.real + z.imag * z.imag) * inv_w[j]
                if (np.sqrt(gap) <= _EG_AGREE * _weighted_norm(E[0], inv_w)
                        and abs(E[0, 0]) <= _EG_INFINITY * _norm(E[0])
                        and _residual(P, E[0], W, inv_w) <= _EG_RESIDUAL):
                    return cycle
            for j in range(nv):
                previous[j] = E[0, j]
        last_cycle, last_spread = cycle, spread
        state, _, _ = _segment(P, W, J, V, complex(r, 0.0), complex(r * _EG_SHRINK, 0.0), 1.0,
                               settings, False)
        if state != DONE:
            for j in range(nv):
                x[j] = start[j]
                v[j] = home_v[j]
            return 0
        r *= _EG_SHRINK
    E[3, 0] = r
    return 0


@njit(cache=True)
def track_paths(exps, live, chart, C, group, X0, V0, weight, h_init, h_max, beta, tol,
                newton_steps, max_steps, s_stop, endgame):
    """Track every row of X0 from s = 1 to s = 0 (with the Cauchy endgame if ``endgame``).

    V0 holds each path's velocity at s = 1 when known (`start_velocities`; a row with
    a NaN, or V0 with no rows, means evaluate it here).

    Returns endpoints (N, nv), states (N,) int8 (DONE / FAILED / STALLED), cycle
    numbers (N,) int8 (0 for a path that reached s = 0 by plain steps, c >= 1 for one
    whose end point the endgame computed), the evaluations of H and its derivatives
    each path took (N,) int64 (a measure of work that does not depend on the machine),
    and the corrector's last correction at s = 0 relative to |X| (N,) (inf unless the
    path reached s = 0 by plain steps): below ~1e-11 Newton has converged
    quadratically and the end point needs no further refinement.
    """
    N, nv = X0.shape
    W = _work(exps)
    V = np.empty((9, nv), dtype=np.complex128)
    E = np.empty((6, nv), dtype=np.complex128)
    J = np.empty((nv, nv), dtype=np.complex128)
    inv_w = 1.0 / weight ** 2
    tally = np.zeros(1, dtype=np.int64)
    settled = np.zeros(1)
    settings = (inv_w, h_max, beta, tol, newton_steps, max_steps, s_stop, tally, settled)
    out = np.empty((N, nv), dtype=np.complex128)
    state = np.zeros(N, dtype=np.int8)
    cycle = np.zeros(N, dtype=np.int8)
    evaluations = np.zeros(N, dtype=np.int64)
    last = np.full(N, np.inf)
    x, v = V[0], V[1]
    for p in range(N):
        tally[0] = 1
        settled[0] = np.inf
        P = (exps, live, C[group[p]], chart)
        for j in range(nv):
            x[j] = X0[p, j]
        known = V0.shape[0] > 0
        if known:
            for j in range(nv):
                v[j] = V0[p, j]
                known = known and np.isfinite(v[j].real) and np.isfinite(v[j].imag)
        if known:
            tally[0] = 0
        elif not _newton_velocity(P, 1.0 + 0j, x, W, J, V[8], v):
            state[p] = FAILED
            out[p] = x
            evaluations[p] = 1
            continue
        s, h, trigger = 1.0, h_init, endgame
        while True:
            st, t, h = _segment(P, W, J, V, complex(s, 0.0), 0j, h, settings, trigger)
            s = s * (1.0 - t)
            if st != ACTIVE:
                break
            c = _cauchy(P, W, J, V, E, s, settings)
            if c > 0:
                st = DONE
                cycle[p] = c
                for j in range(nv):
                    x[j] = E[0, j]
                break
            # the endgame did not settle: plain steps from where it left the real axis
            s = E[3, 0].real
            trigger = False
            h = 0.1
        state[p] = st
        out[p] = x
        evaluations[p] = tally[0]
        if st == DONE and cycle[p] == 0:
            last[p] = settled[0]
    return out, state, cycle, evaluations, last


@njit(cache=True)
def start_factors(exps, live, chart, coefficients, roots):
    """For each start point o = h * R + r (root r of hub h's own system, whose
    coefficients do not depend on s): LU factors of [H_X; chart] there, the monomials
    X^E_k, and, per polynomial row, the index and value of its largest coefficient.

    Every path leaving o has, at s = 1, this Jacobian up to a factor per row (its
    coefficients there are the hub's, rescaled per equation), so `start_velocities`
    gets its first velocity without an evaluation. ok[o] is False where the Jacobian is
    singular (those paths start the usual way).
    """
    H, R, nv = roots.shape
    q, K, _ = exps.shape
    W = _work(exps)
    J = np.empty((nv, nv), dtype=np.complex128)
    lu = np.empty((H * R, nv, nv), dtype=np.complex128)
    perm = np.empty((H * R, nv), dtype=np.int64)
    mono = np.empty((H * R, q, K), dtype=np.complex128)
    ref = np.zeros((H * R, q), dtype=np.int64)
    ref_value = np.zeros((H * R, q), dtype=np.complex128)
    ok = np.zeros(H * R, dtype=np.bool_)
    for h in range(H):
        P = (exps, live, coefficients[h], chart)
        for r in range(R):
            o = h * R + r
            x = roots[h, r]
            _system(P, 1.0 + 0j, x, W, J, False)
            for i in range(nv):
                for j in range(nv):
                    lu[o, i, j] = J[i, j]
            ok[o] = _lu(lu[o], perm[o])
            for i in range(q):
                best = -1.0
                for k in range(K):
                    m = 1.0 + 0j
                    for j in range(nv):
                        m *= x[j] ** exps[i, k, j]
                    mono[o, i, k] = m
                    if live[i, k] and abs(coefficients[h, i, k, 0]) > best:
                        best = abs(coefficients[h, i, k, 0])
                        ref[o, i] = k
                        ref_value[o, i] = coefficients[h, i, k, 0]
                if not best > 0.0:
                    ok[o] = False
    return lu, perm, mono, ref, ref_value, ok


@njit(cache=True)
def start_velocities(live, C, group, origin, lu, perm, mono, ref, ref_value, ok):
    """dX/ds at s = 1 for each path p leaving start point origin[p] (`start_factors`):
    H_X there is D J_o (D the ratio of the path's coefficients to the hub's, per row),
    so dX/ds = -J_o^-1 [D^-1 H_s; 0] with H_s = sum_k dc_k/ds(1) X^E_k. Rows are NaN
    where the start point has no usable factors (the tracker then evaluates)."""
    N = group.shape[0]
    nv = lu.shape[1]
    q, K = live.shape
    top = C.shape[3] - 1
    out = np.full((N, nv), np.nan + 0j)
    b = np.zeros(nv, dtype=np.complex128)
    for p in range(N):
        o, g = origin[p], group[p]
        if not ok[o]:
            continue
        usable = True
        for i in range(q):
            at_one = 0j  # the path's coefficient of the reference term at s = 1
            for m in range(top + 1):
                at_one += C[g, i, ref[o, i], m]
            if at_one == 0:
                usable = False
                break
            hs = 0j
            for k in range(K):
                if live[i, k]:
                    slope = 0j
                    for m in range(1, top + 1):
                        slope += m * C[g, i, k, m]
                    hs += slope * mono[o, i, k]
            b[i] = -hs * (ref_value[o, i] / at_one)
        if not usable:
            continue
        b[q] = 0j
        _lu_solve(lu[o], perm[o], b, out[p])
    return out


@njit(cache=True)
def refine_paths(exps, live, chart, C, group, X, budget):
    """Newton at s = 0 from each row of X (at most ``budget[p]`` steps, stopping once a
    step is below 1e-15 |X|), and the condition number of each end point's Jacobian.

    The condition number is that of the Jacobian with each polynomial row divided by the
    size its entries can have at this |X| (``sum_k |c_k| deg_k |X|_max**(deg_k - 1)``),
    in the 1-norm. The scale is a bound, not the row's current length: at a multiple
    root a whole row can vanish, and scaling it to unit length would hide exactly that.
    """
    N, nv = X.shape
    q, K, _ = exps.shape
    W = _work(exps)
    dx, vel, y, x = np.empty((4, nv), dtype=np.complex128)
    J = np.empty((nv, nv), dtype=np.complex128)
    A = np.empty((nv, nv), dtype=np.complex128)
    perm = np.empty(nv, dtype=np.int64)
    degree = exps.sum(axis=2)
    powers = np.ones(degree.max() + 1)
    cmax = 0.0
    for j in range(nv):
        cmax = max(cmax, abs(chart[j]))
    out = np.empty((N, nv), dtype=np.complex128)
    cond = np.empty(N)
    for p in range(N):
        P = (exps, live, C[group[p]], chart)
        for j in range(nv):
            x[j] = X[p, j]
        for it in range(budget[p]):
            if not _newton_velocity(P, 0j, x, W, J, dx, vel):
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
        _system(P, 0j, x, W, J, False)
        radius = 0.0
        for j in range(nv):
            radius = max(radius, x[j].real * x[j].real + x[j].imag * x[j].imag)
        radius = np.sqrt(radius)
        for e in range(1, powers.shape[0]):
            powers[e] = powers[e - 1] * radius
        for i in range(q):
            bound = 0.0
            for k in range(K):
                d = degree[i, k]
                if live[i, k] and d > 0:
                    bound += _mag(C[group[p], i, k, 0]) * d * powers[d - 1]
            if bound == 0.0:
                bound = 1.0
            for j in range(nv):
                J[i, j] /= bound
        for j in range(nv):
            J[q, j] = chart[j] / cmax
        cond[p] = _condition_1(J, A, perm, y)
    return out, cond


@njit(cache=True, inline="always")
def _mag(z):
    """|z| without hypot's care for overflow (entries here are far below 1e150)."""
    return np.sqrt(z.real * z.real + z.imag * z.imag)


@njit(cache=True, inline="always")
def _size(z):
    """|re| + |im|: within a factor sqrt(2) of |z|, without the careful hypot."""
    return abs(z.real) + abs(z.imag)


@njit(cache=True, inline="always")
def _lu(A, perm):
    """LU factorisation of A in place with partial pivoting (by |re| + |im|); the
    diagonal holds 1 / U[c, c]. False when A is singular or not finite."""
    n = A.shape[0]
    for r in range(n):
        perm[r] = r
    for c in range(n):
        piv, best = c, -1.0
        for r in range(c, n):
            if _size(A[r, c]) > best:
                best, piv = _size(A[r, c]), r
        if not (best > 0.0 and best < np.inf):
            return False
        if piv != c:
            for m in range(n):
                A[c, m], A[piv, m] = A[piv, m], A[c, m]
            perm[c], perm[piv] = perm[piv], perm[c]
        d = A[c, c]
        m2 = d.real * d.real + d.imag * d.imag
        if not m2 > 0.0:  # a pivot below ~1e-154 squares to zero: singular here
            return False
        A[c, c] = complex(d.real / m2, -d.imag / m2)
        for r in range(c + 1, n):
            A[r, c] *= A[c, c]
            for m in range(c + 1, n):
                A[r, m] -= A[r, c] * A[c, m]
    return True


@njit(cache=True, inline="always")
def _lu_solve(A, perm, b, y):
    """Solve with the factors from `_lu`: y = A^-1 b (b is left unchanged)."""
    n = A.shape[0]
    for r in range(n):
        y[r] = b[perm[r]]
        for m in range(r):
            y[r] -= A[r, m] * y[m]
    for r in range(n - 1, -1, -1):
        t = y[r]
        for m in range(r + 1, n):
            t -= A[r, m] * y[m]
        y[r] = t * A[r, r]


@njit(cache=True)
def _condition_1(J, A, perm, y):
    """||J||_1 ||J^-1||_1 (inf when J is singular or not finite): one LU factorisation,
    then the columns of J^-1 one at a time. Entries are measured by |z| (the thresholds
    on it were set for that measure); |re| + |im| only chooses the pivots."""
    n = J.shape[0]
    norm_j = 0.0
    for c in range(n):
        col = 0.0
        for r in range(n):
            col += _mag(J[r, c])
            A[r, c] = J[r, c]
        norm_j = max(norm_j, col)
    if not np.isfinite(norm_j) or not _lu(A, perm):
        return np.inf
    norm_inv = 0.0
    for c in range(n):  # solve J y = e_c (forward substitution of the permuted e_c)
        for r in range(n):
            y[r] = 1.0 if perm[r] == c else 0.0
            for m in range(r):
                y[r] -= A[r, m] * y[m]
        total = 0.0
        for r in range(n - 1, -1, -1):
            t = y[r]
            for m in range(r + 1, n):
                t -= A[r, m] * y[m]
            y[r] = t * A[r, r]
            total += _mag(y[r])
        norm_inv = max(norm_inv, total)
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


@njit(cache=True)
def nearest_rows(points, anchors):
    """Index of the nearest row of ``anchors`` (Euclidean) for each row of ``points``;
    ties go to the first. Each distance is summed term by term in a fixed order, so a
    point's answer does not depend on the other points (a matrix product would)."""
    out = np.zeros(points.shape[0], dtype=np.int64)
    for i in range(points.shape[0]):
        best = np.inf
        for a in range(anchors.shape[0]):
            d = 0.0
            for c in range(points.shape[1]):
                z = points[i, c] - anchors[a, c]
                d += z * z
            if d < best:
                best = d
                out[i] = a
    return out
