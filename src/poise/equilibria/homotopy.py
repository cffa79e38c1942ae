"""All isolated real roots of a polynomial steady-state system, by homotopy continuation.

Method (Sommese & Wampler 2005, *The Numerical Solution of Systems of Polynomials*;
Morgan & Sommese 1989, "Coefficient-parameter polynomial continuation"):

1. **Start solve, once per system.** Each numerator ``N_i = sum_k c_ik(p) x^a_ik`` is
   treated as a member of the family of all polynomial systems with the same monomials
   and free coefficients. At random complex coefficients ``c*`` a total-degree homotopy
   ``(1 - s) F_c*(x) + s * gamma * (x_i^d_i - 1)`` with a random complex ``gamma`` (the
   "gamma trick") finds every isolated root of ``F_c*``. A zero-coefficient constant
   term is added to every equation that lacks one, so that these roots are all simple
   (Li & Wang 1996). This runs twice with different ``gamma`` and the nonsingular finite
   endpoints are merged.
2. **Coefficient-parameter homotopy, per parameter set.** The roots of ``F_c*`` are
   tracked along ``H(x, s) = F(x; c_target + s (c* - c_target))`` from ``s = 1`` to
   ``s = 0``; by the coefficient-parameter theorem every isolated root of the target is
   the end of one of these paths. All paths of all parameter sets advance together in one
   predictor-corrector loop with a step size per path.

   The straight path runs in *coefficient* space rather than parameter space: the
   coefficients are then linear in ``s`` (exact and cheap ``dH/ds``), coefficient functions
   such as ``sqrt(K)`` or ``log(K)`` are never evaluated at complex parameters (no branch
   cuts), and roots that are multiple for every parameter value (e.g. ``x**2 * (a - x)``)
   are simple at the start and handled at the end like any singular endpoint. The price:
   when the parameter structure makes the family's root count smaller than that of free
   coefficients, the surplus paths diverge at every target.

Details:

* **Diverging paths.** Tracking uses homogeneous coordinates ``X = (X_0, X_1..X_n)``,
  ``x = X[1:] / X_0``, on a random affine chart ``a . X = 1``; a path going to infinity
  stays bounded and ends with ``X_0 -> 0``. Endpoints with ``|X_0| <= 1e-10 |X|`` count as
  "at infinity" (so roots more than about 1e10 times the scale of the patch are lost).
* **Predictor-corrector.** Fourth-order Runge-Kutta on ``dX/ds = -H_X^-1 H_s``, then up
  to three Newton corrections; a step is accepted when Newton converges and the first
  correction is small (a guard against jumping to a neighbouring path). The first
  correction also estimates the predictor's local error (order ``step**5``) and sets the
  next step. The predictor's first stage reuses the velocity from the last corrector
  iteration (one factorisation serves both).
* **Path jumping.** Two paths of one parameter set ending at the same well-conditioned
  root means one of them jumped; both are tracked again with smaller maximum steps and a
  stricter acceptance test (twice at most). Failed paths are re-tracked the same way.
* **Singular endpoints.** No Cauchy or power-series endgame: a path heading for a
  multiple root (or a multiple point at infinity) cannot land on ``s = 0``; its steps
  shrink geometrically until they collapse (typically near ``s ~ 1e-11``), where it is
  stopped and refined by up to 60 Newton iterations on the target (linear convergence at
  a multiple root). A large condition number of the scaled Jacobian marks it singular,
  which loosens the tolerances for calling it real and for merging duplicates. Multiple
  roots are therefore accurate to roughly ``eps**(1/multiplicity)``.
* **Real roots.** Finite endpoints with a small imaginary part are polished by real
  Newton on the cleared system, kept when the residual is small relative to the size of
  the terms, dropped when a cleared denominator vanishes there, and de-duplicated.
  Each target equation is scaled to unit largest coefficient first (same roots).
* **Reproducibility.** Every path is advanced, refined and judged on its own, so a
  parameter set's result does not depend on the other sets in the batch.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import lru_cache
from itertools import product

import numpy as np
import sympy

from poise.equilibria.polynomial import PolynomialSystem

# Paths advanced together; larger batches of parameter sets are cut into chunks of this
# many paths (results do not depend on the cut: every path is computed on its own).
_PATHS_PER_CHUNK = 20_000
# |X_0| / |X| below this: endpoint at infinity.
_INFINITY = 1e-10
# Condition number (of the row-scaled Jacobian) above which an endpoint is singular.
_SINGULAR = 1e8


@dataclass(frozen=True)
class HomotopyResult:
    """Real isolated roots for a batch of parameter sets.

    Attributes
    ----------
    roots : ndarray, shape (B, R, n)
        Real roots of each parameter set, sorted lexicographically, padded with NaN;
        ``R`` is the largest count in the batch.
    count : ndarray of int, shape (B,)
        Number of real roots found for each set.
    status : ndarray of int, shape (B,)
        0 ok; 1 some paths failed or jumped (or the once-per-system start solve lost
        paths), so roots may be missing; 2 the system could not be evaluated at this
        parameter set: non-finite coefficients, an equation or a denominator vanishing
        identically (no roots reported).
    message : ndarray of str, shape (B,)
        Reason when ``status != 0``, else ``""``.
    """

    roots: np.ndarray
    count: np.ndarray
    status: np.ndarray
    message: np.ndarray


def solve_batch(system: PolynomialSystem, param_values: np.ndarray, *,
                seed: int = 0) -> HomotopyResult:
    """Real isolated roots of a polynomial system for each row of ``param_values``.

    Parameters
    ----------
    system : PolynomialSystem
        From `poise.equilibria.polynomial.polynomial_form`.
    param_values : array_like, shape (B, m)
        One parameter set per row, columns in the order of ``system.params``.
    seed : int
        Seeds the random start system, chart and gamma. Same seed, same results,
        whatever the batch size or the other rows of the batch.

    Returns
    -------
    HomotopyResult
        Roots at which a cleared denominator vanishes are discarded; roots on the
        boundary of the domain (zero states) are kept, domain filtering is the caller's.
    """
    values = np.asarray(param_values, dtype=float)
    m = len(system.params)
    if values.ndim == 1 and m == 0:
        values = values.reshape(-1, 0)
    if values.ndim != 2 or values.shape[1] != m:
        raise ValueError(f"param_values must have shape (B, {m}), got {values.shape}")
    n = len(system.states)
    batch = values.shape[0]
    start = _start(system, seed)
    per_chunk = max(1, _PATHS_PER_CHUNK // max(1, len(start.roots)))

    found: list[np.ndarray] = []
    counts = np.zeros(batch, dtype=int)
    status = np.zeros(batch, dtype=int)
    message = np.full(batch, "", dtype=object)
    for lo in range(0, batch, per_chunk):
        hi = min(batch, lo + per_chunk)
        roots, counts[lo:hi], status[lo:hi], message[lo:hi] = _solve_chunk(
            _compile(system), start, values[lo:hi])
        found.append(roots)

    width = max((r.shape[1] for r in found), default=0)
    out = np.full((batch, width, n), np.nan)
    lo = 0
    for roots in found:
        out[lo:lo + len(roots), :roots.shape[1]] = roots
        lo += len(roots)
    return HomotopyResult(roots=out, count=counts, status=status,
                          message=message.astype(str))


def generic_root_count(system: PolynomialSystem, *, seed: int = 0) -> int:
    """Number of paths tracked per parameter set: the isolated roots of a generic member
    of the family of systems with the same monomials (at most ``system.path_count``)."""
    return len(_start(system, seed).roots)


# --------------------------------------------------------------------------- kernels


@dataclass(frozen=True, eq=False)
class _Table:
    """Monomials of q polynomials in homogeneous coordinates ``X = (X_0, x_1..x_n)``.

    ``exponents[i, k]`` is the exponent vector of term k of polynomial i; ``live[i, k]``
    is False for padding (polynomials with fewer terms), whose coefficient is ignored.
    Values, Jacobian and ``sum dC X^E`` are evaluated by straight-line numeric kernels
    generated with sympy.lambdify from the exponents (products of precomputed powers,
    common subexpressions shared), so only the nonzero work is done.
    """

    exponents: np.ndarray  # (q, K, n+1) int
    live: np.ndarray       # (q, K) bool
    degree: int = field(init=False)
    kernels: dict = field(init=False)

    def __post_init__(self):
        object.__setattr__(self, "degree", int(self.exponents.max(initial=0)))
        object.__setattr__(self, "kernels", {})

    def kernel(self, jacobian: bool, with_s: bool):
        key = (jacobian, with_s)
        if key not in self.kernels:
            self.kernels[key] = self._build(jacobian, with_s)
        return self.kernels[key]

    def _build(self, jacobian: bool, with_s: bool):
        q, K, nv = self.exponents.shape
        powers = [[sympy.Integer(1)] + [sympy.Symbol(f"p{j}_{e}") for e in range(1, self.degree + 1)]
                  for j in range(nv)]
        coef = [[sympy.Symbol(f"c{i}_{k}") for k in range(K)] for i in range(q)]
        dcoef = [[sympy.Symbol(f"d{i}_{k}") for k in range(K)] for i in range(q)]

        def monomial(e):
            return sympy.Mul(*[powers[j][int(e[j])] for j in range(nv)])

        out = []
        for i in range(q):
            out.append(sympy.Add(*[coef[i][k] * monomial(self.exponents[i, k])
                                   for k in range(K) if self.live[i, k]]))
        if jacobian:
            for i in range(q):
                for j in range(nv):
                    terms = []
                    for k in range(K):
                        e = self.exponents[i, k]
                        if self.live[i, k] and e[j] > 0:
                            lowered = e.copy()
                            lowered[j] -= 1
                            terms.append(int(e[j]) * coef[i][k] * monomial(lowered))
                    out.append(sympy.Add(*terms))
        if with_s:
            for i in range(q):
                out.append(sympy.Add(*[dcoef[i][k] * monomial(self.exponents[i, k])
                                       for k in range(K) if self.live[i, k]]))
        args = ([p for row in powers for p in row[1:]] + [c for row in coef for c in row]
                + ([c for row in dcoef for c in row] if with_s else []))
        return sympy.lambdify(args, out, modules="numpy", cse=True)


def _evaluate_t(table: _Table, XT: np.ndarray, CT: np.ndarray, dCT: np.ndarray | None = None,
                jacobian: bool = True):
    """Polynomials ``sum_k C_ik X^E_ik`` with the path axis last.

    XT (n+1, M), CT and dCT (q, K, M) -> values (q, M), Jacobian (q, n+1, M) or None,
    ``sum_k dC_ik X^E_ik`` (q, M) or None.
    """
    nv, M = XT.shape
    q, K = table.live.shape
    dtype = np.result_type(XT, CT)
    powers = []
    for j in range(nv):
        acc = None
        for _ in range(table.degree):
            acc = XT[j] if acc is None else acc * XT[j]
            powers.append(acc)
    args = powers + [CT[i, k] for i in range(q) for k in range(K)]
    if dCT is not None:
        args += [dCT[i, k] for i in range(q) for k in range(K)]
    got = table.kernel(jacobian, dCT is not None)(*args)
    values = np.empty((q, M), dtype=dtype)
    for i in range(q):
        values[i] = got[i]
    jac = hs = None
    pos = q
    if jacobian:
        jac = np.empty((q, nv, M), dtype=dtype)
        for i in range(q):
            for j in range(nv):
                jac[i, j] = got[pos]
                pos += 1
    if dCT is not None:
        hs = np.empty((q, M), dtype=dtype)
        for i in range(q):
            hs[i] = got[pos + i]
    return values, jac, hs


def _evaluate(table: _Table, X: np.ndarray, C: np.ndarray, jacobian: bool = True):
    """Values (M, q) and Jacobian (M, q, n+1) of ``sum_k C_ik X^E_ik``; X (M, n+1), C (M, q, K)."""
    values, jac, _ = _evaluate_t(table, np.ascontiguousarray(X.T),
                                 np.ascontiguousarray(np.moveaxis(C, 0, -1)), None, jacobian)
    return values.T, None if jac is None else np.moveaxis(jac, -1, 0)


def _solve(A: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Batched linear solve, b of shape (M, k) or (M, k, r); exactly singular or
    non-finite systems give NaN instead of an exception for the whole batch."""
    vector = b.ndim == 2
    rhs = b[..., None] if vector else b
    try:
        x = np.linalg.solve(A, rhs)
    except np.linalg.LinAlgError:
        with np.errstate(all="ignore"):
            bad = ~np.isfinite(A).all(axis=(1, 2))
            bad |= np.linalg.det(np.where(bad[:, None, None], 1.0, A)) == 0
        eye = np.broadcast_to(np.eye(A.shape[1], dtype=A.dtype), A.shape)
        x = np.linalg.solve(np.where(bad[:, None, None], eye, A), rhs)
        x[bad] = np.nan
    return x[..., 0] if vector else x


def _norm(v: np.ndarray) -> np.ndarray:
    return np.sqrt((v.real ** 2 + v.imag ** 2).sum(axis=-1))


# ------------------------------------------------------------------- path tracking


@dataclass(frozen=True)
class _Homotopy:
    """``H(X, s) = sum_k (C0[g] + s dC[g]) X^E_k`` plus the chart ``a . X = 1``."""

    table: _Table
    chart: np.ndarray  # (n+1,) complex
    C0: np.ndarray     # (G, q, K) complex, coefficients at s = 0
    dC: np.ndarray     # (G, q, K) complex, dC/ds
    C0t: np.ndarray = field(init=False)  # (q, K, G) copies for the path-last kernel
    dCt: np.ndarray = field(init=False)

    def __post_init__(self):
        object.__setattr__(self, "C0t", np.ascontiguousarray(np.moveaxis(self.C0, 0, -1)))
        object.__setattr__(self, "dCt", np.ascontiguousarray(np.moveaxis(self.dC, 0, -1)))

    def system(self, X, s, group, with_s=False):
        """H (M, n+1), its Jacobian (M, n+1, n+1) and optionally dH/ds (M, n+1)."""
        dC = self.dCt[..., group]
        C = self.C0t[..., group] + s * dC
        values, jac, hs = _evaluate_t(self.table, np.ascontiguousarray(X.T), C,
                                      dC if with_s else None)
        M, nv = X.shape
        H = np.empty((M, nv), dtype=complex)
        H[:, :-1] = values.T
        H[:, -1] = (X * self.chart).sum(axis=-1) - 1.0
        J = np.empty((M, nv, nv), dtype=complex)
        J[:, :-1] = np.moveaxis(jac, -1, 0)
        J[:, -1] = self.chart
        if not with_s:
            return H, J
        Hs = np.zeros((M, nv), dtype=complex)
        Hs[:, :-1] = hs.T
        return H, J, Hs

    def velocity(self, X, s, group):
        _, J, Hs = self.system(X, s, group, with_s=True)
        return _solve(J, -Hs)

    def newton(self, X, s, group):
        H, J = self.system(X, s, group)
        return _solve(J, -H)

    def newton_velocity(self, X, s, group):
        """Newton step and dX/ds from one evaluation and one factorisation."""
        H, J, Hs = self.system(X, s, group, with_s=True)
        both = _solve(J, -np.stack([H, Hs], axis=-1))
        return both[..., 0], both[..., 1]


@dataclass(frozen=True)
class _Settings:
    h_init: float = 0.1
    h_max: float = 0.2
    beta: float = 1e-3          # largest first Newton correction accepted, relative to |X|
    tol: float = 1e-9           # corrector convergence, relative to |X|
    newton_steps: int = 3
    max_iterations: int = 3000
    s_stop: float = 1e-11       # a step ending below this lands at s = 0


_NORMAL = _Settings()
_RETRACK = (_Settings(h_init=0.01, h_max=0.02, beta=1e-5),
            _Settings(h_init=0.002, h_max=0.005, beta=1e-7))

# path states
_ACTIVE, _DONE, _FAILED, _STALLED = 0, 1, 2, 3


def _track(hom: _Homotopy, X: np.ndarray, group: np.ndarray, cfg: _Settings):
    """Track every path from s = 1 to s = 0; returns endpoints and path states.

    A path ends ``_DONE`` (reached s = 0), ``_STALLED`` (steps collapsed close to s = 0:
    a singular endpoint) or ``_FAILED`` (steps collapsed, or out of iterations, far from
    s = 0).
    """
    N = X.shape[0]
    X = X.copy()
    s = np.ones(N)
    h = np.full(N, cfg.h_init)
    velocity = np.full_like(X, np.nan)
    state = np.zeros(N, dtype=np.int8)
    with np.errstate(all="ignore"):
        for _ in range(cfg.max_iterations):
            act = np.flatnonzero(state == _ACTIVE)
            if act.size == 0:
                break
            x, sa, g = X[act], s[act], group[act]
            step = np.minimum(h[act], sa)
            s_new = sa - step
            s_new[s_new <= cfg.s_stop] = 0.0  # land exactly (also absorbs rounding of s)
            ds = s_new - sa
            # Runge-Kutta predictor on the Davidenko equation dX/ds = -H_X^-1 H_s;
            # the first stage is the velocity kept from the last corrector step
            k1 = velocity[act]
            fresh = np.flatnonzero(~np.isfinite(k1).all(axis=1))
            if fresh.size:
                k1[fresh] = hom.velocity(x[fresh], sa[fresh], g[fresh])
            k2 = hom.velocity(x + 0.5 * ds[:, None] * k1, sa + 0.5 * ds, g)
            k3 = hom.velocity(x + 0.5 * ds[:, None] * k2, sa + 0.5 * ds, g)
            k4 = hom.velocity(x + ds[:, None] * k3, s_new, g)
            x = x + ds[:, None] / 6.0 * (k1 + 2 * k2 + 2 * k3 + k4)
            # Newton corrector at s_new; paths leave the loop once converged
            first = np.full(act.size, np.inf)
            last = np.full(act.size, np.inf)
            todo = np.arange(act.size)
            v_new = np.full_like(x, np.nan)
            for it in range(cfg.newton_steps):
                dx, v_new[todo] = hom.newton_velocity(x[todo], s_new[todo], g[todo])
                x[todo] += dx
                last[todo] = _norm(dx) / _norm(x[todo])
                if it == 0:
                    first[:] = last
                todo = todo[~(last[todo] <= cfg.tol) & (last[todo] <= cfg.beta)]
                if todo.size == 0:
                    break
            ok = np.isfinite(x).all(axis=1) & (last <= cfg.tol) & (first <= cfg.beta)

            # next step from the first correction, a proxy for the predictor's local error
            # (RK4: error ~ step**5)
            with np.errstate(divide="ignore"):
                factor = 0.8 * (cfg.beta / first) ** 0.2
            good = act[ok]
            X[good] = x[ok]
            velocity[good] = v_new[ok]  # at the last Newton iterate: O(tol) from X
            s[good] = s_new[ok]
            h[good] = np.minimum(cfg.h_max, h[good] * np.clip(factor[ok], 0.5, 2.0))
            state[good[s[good] == 0.0]] = _DONE

            bad = act[~ok]
            h[bad] *= np.clip(np.nan_to_num(factor[~ok], nan=0.5), 0.1, 0.5)
            tiny = bad[h[bad] < 1e-14 + 1e-9 * s[bad]]
            state[tiny] = np.where(s[tiny] < 1e-4, _STALLED, _FAILED)
    left = state == _ACTIVE
    state[left] = np.where(s[left] < 1e-4, _STALLED, _FAILED)
    return X, state


def _refine(hom: _Homotopy, X: np.ndarray, group: np.ndarray, iterations: np.ndarray):
    """Newton on the target system (s = 0) in homogeneous coordinates.

    Each path stops on its own (converged, or its iteration budget spent), so a path's
    result does not depend on the other paths in the batch.
    """
    X = X.copy()
    todo = np.flatnonzero(iterations > 0)
    with np.errstate(all="ignore"):
        for it in range(int(iterations.max(initial=0))):
            if todo.size == 0:
                break
            dx = hom.newton(X[todo], np.zeros(todo.size), group[todo])
            finite = np.isfinite(dx).all(axis=1)
            X[todo[finite]] += dx[finite]
            moving = finite & (_norm(dx) > 1e-15 * _norm(X[todo]))
            todo = todo[moving & (iterations[todo] > it + 1)]
    return X


def _condition(table: _Table, X: np.ndarray, C: np.ndarray, chart=None) -> np.ndarray:
    """Condition number of the Jacobian, each row scaled by the size its entries can have.

    The row scale is a bound from the coefficients and ``|X|``, not the row's current
    length: at a multiple root a whole row of the Jacobian can vanish, and scaling it to
    unit length would hide exactly that. ``chart`` given: homogeneous coordinates with
    the chart row appended; else affine points with ``X_0 = 1``.
    """
    with np.errstate(all="ignore"):
        _, J = _evaluate(table, X, C)
        if chart is None:
            J = J[..., 1:]
            bound = _term_bound(table, X, C, jacobian=True)[1].max(axis=-1)
        else:
            degree = table.exponents.sum(axis=-1)                            # (q, K)
            radius = np.abs(X).max(axis=1)
            bound = (np.abs(C) * degree * radius[:, None, None] ** np.maximum(degree - 1, 0)
                     ).sum(axis=-1)
        J = J / np.where(bound > 0, bound, 1.0)[..., None]
        if chart is not None:
            J = np.concatenate([J, np.broadcast_to(chart / np.abs(chart).max(),
                                                   (X.shape[0], 1, X.shape[1]))], axis=1)
        ok = np.isfinite(J).all(axis=(1, 2))
        J = np.where(ok[:, None, None], J, 0.0)
        sv = np.linalg.svd(J, compute_uv=False)
        cond = sv[:, 0] / sv[:, -1]
    return np.where(ok & np.isfinite(cond), cond, np.inf)


def _track_all(hom: _Homotopy, X: np.ndarray, group: np.ndarray, per_group: int):
    """Track, refine, and re-track failed or jumping paths with tighter settings.

    Paths are group-major: ``per_group`` consecutive paths belong to one group.
    Returns endpoints, states, condition numbers and a flag for unresolved jumps.
    """
    end, state = _track(hom, X, group, _NORMAL)
    end = _finish(hom, end, state, group)
    cond = _condition(hom.table, end, hom.C0[group], hom.chart)
    for cfg in _RETRACK:
        redo = (state == _FAILED) | _duplicates(end, state, cond, per_group)
        if not redo.any():
            break
        e, st = _track(hom, X[redo], group[redo], cfg)
        end[redo] = _finish(hom, e, st, group[redo])
        state[redo] = st
        cond[redo] = _condition(hom.table, end[redo], hom.C0[group[redo]], hom.chart)
    return end, state, cond, _duplicates(end, state, cond, per_group)


def _finish(hom, end, state, group):
    """Newton at s = 0: a few steps for clean endpoints, many for stalled (singular) ones."""
    budget = np.select([state == _DONE, state == _STALLED], [4, 60], 0)
    return _refine(hom, end, group, budget)


def _duplicates(end, state, cond, per_group: int) -> np.ndarray:
    """Paths ending on the same well-conditioned finite point as another path of their group.

    Several paths may legitimately end at one point at infinity or at a multiple root;
    at a finite nonsingular root, only one can.
    """
    finite = np.abs(end[:, 0]) > _INFINITY * _norm(end)
    clean = (state == _DONE) & finite & (cond < _SINGULAR / 100)
    points = np.where(clean[:, None], end, np.nan)
    group = np.arange(len(end)) // max(per_group, 1)
    return _near_pairs(points, group, 1e-7)[0]


def _near_pairs(points: np.ndarray, group: np.ndarray, rel: float, window: int = 4):
    """Which points have another point of their group within ``rel * |point|``.

    Returns (any, later): a close partner exists / a close partner with a smaller index
    exists. Points are sorted by group and a fixed projection and compared with their
    next ``window`` neighbours, O(N log N) instead of all pairs; NaN points never match.
    """
    N, d = points.shape
    close_any = np.zeros(N, dtype=bool)
    close_later = np.zeros(N, dtype=bool)
    if N < 2:
        return close_any, close_later
    weights = np.linspace(1.0, 2.0, d) * np.exp(0.5j)
    key = (points * weights).sum(axis=1).real
    order = np.lexsort((key, group))
    size = _norm(points)
    for offset in range(1, min(window, N - 1) + 1):
        i, j = order[:-offset], order[offset:]
        with np.errstate(invalid="ignore"):
            near = (group[i] == group[j]) & (
                _norm(points[i] - points[j]) <= rel * np.maximum(size[i], size[j]))
        close_any[i[near]] = True
        close_any[j[near]] = True
        close_later[np.maximum(i[near], j[near])] = True
    return close_any, close_later


# ------------------------------------------------------------------ compiled system


@dataclass(frozen=True, eq=False)
class _Compiled:
    """Numeric form of a PolynomialSystem: term tables and coefficient functions."""

    n: int
    degrees: tuple[int, ...]
    table: _Table                 # numerators, homogeneous
    coefficients: object          # params (B, m) -> (B, n, K) real
    denominator_table: _Table     # denominator factors (X_0 exponent 0)
    denominator_coefficients: object
    denominator_has_state: np.ndarray  # (q,) bool


def _term_table(polys: list[sympy.Poly], degrees, homogeneous: bool):
    """Exponent table and coefficient expressions (padded) of polynomials.

    With ``homogeneous`` (the numerators), a missing constant term is added with
    coefficient 0: the start system then has a generic constant term in every equation,
    so all its roots lie in the complex torus and are simple (Li & Wang 1996, the BKK
    root count in C^n), and roots of the target with zero coordinates, e.g. a multiple
    root at the origin of ``x**2 (a - x)``, are still ends of paths.
    """
    n = len(polys[0].gens) if polys else 0
    rows = []
    for poly in polys:
        terms = list(poly.terms())
        if homogeneous and not any(sum(mon) == 0 for mon, _ in terms):
            terms.append(((0,) * n, sympy.Integer(0)))
        rows.append(terms)
    K = max([len(t) for t in rows] + [1])
    exps = np.zeros((len(polys), K, n + 1), dtype=int)
    exprs = [[sympy.Integer(0)] * K for _ in polys]
    live = np.zeros((len(polys), K), dtype=bool)
    for i, (terms, d) in enumerate(zip(rows, degrees)):
        for k, (mon, coeff) in enumerate(terms):
            exps[i, k, 1:] = mon
            exps[i, k, 0] = d - sum(mon) if homogeneous else 0
            exprs[i][k] = coeff
            live[i, k] = True
    return _Table(exps, live), exprs


def _coefficient_function(params, exprs):
    """Vectorised evaluation of a (q, K) grid of coefficient expressions."""
    flat = [e for row in exprs for e in row]
    shape = (len(exprs), len(exprs[0]) if exprs else 0)
    fn = sympy.lambdify(params, flat, modules="numpy", cse=True) if flat else None

    def evaluate(values: np.ndarray) -> np.ndarray:
        B = values.shape[0]
        out = np.zeros((B,) + shape)
        if fn is None:
            return out
        with np.errstate(all="ignore"):
            got = fn(*values.T)
        for idx, v in enumerate(got):
            v = np.asarray(v)
            if np.iscomplexobj(v):  # a coefficient that is not real: cannot be evaluated
                v = np.where(v.imag == 0, v.real, np.nan)
            out[:, idx // shape[1], idx % shape[1]] = v
        return out

    return evaluate


@lru_cache(maxsize=32)
def _compile(system: PolynomialSystem) -> _Compiled:
    states, params = system.states, system.params
    polys = [sympy.Poly(num, *states) for num in system.numerators]
    table, exprs = _term_table(polys, system.degrees, homogeneous=True)
    den_polys = [sympy.Poly(f, *states) for f in system.denominators]
    den_table, den_exprs = _term_table(den_polys, [0] * len(den_polys), homogeneous=False)
    if not den_polys:
        den_table = _Table(np.zeros((0, 1, len(states) + 1), dtype=int), np.zeros((0, 1), bool))
    has_state = np.array([p.total_degree() > 0 for p in den_polys], dtype=bool)
    return _Compiled(n=len(states), degrees=tuple(system.degrees), table=table,
                     coefficients=_coefficient_function(params, exprs),
                     denominator_table=den_table,
                     denominator_coefficients=_coefficient_function(params, den_exprs),
                     denominator_has_state=has_state)


# --------------------------------------------------------------------- start solve


@dataclass(frozen=True, eq=False)
class _Start:
    chart: np.ndarray   # (n+1,) complex
    cstar: np.ndarray   # (n, K) complex: the generic coefficients
    roots: np.ndarray   # (R, n+1) complex: all roots of F_c*, on the chart
    incomplete: bool = False  # both start runs lost paths: some roots may be missing


def _complex_normal(rng, shape):
    return (rng.standard_normal(shape) + 1j * rng.standard_normal(shape)) / np.sqrt(2)


@lru_cache(maxsize=32)
def _start(system: PolynomialSystem, seed: int) -> _Start:
    """Every isolated root of the system at random complex coefficients (once per system)."""
    comp = _compile(system)
    n, degrees = comp.n, comp.degrees
    rng = np.random.default_rng(seed)
    chart = _complex_normal(rng, n + 1)
    chart /= np.linalg.norm(chart)
    live = comp.table.live
    cstar = np.where(live, _complex_normal(rng, live.shape), 0)
    if any(d == 0 for d in degrees) or n == 0:
        # a nonzero constant equation: no roots for generic coefficients
        return _Start(chart, cstar, np.zeros((0, n + 1), dtype=complex))

    # start table: the system's terms plus x_i^d_i and X_0^d_i for the start system
    K = comp.table.exponents.shape[1] + 2
    exps = np.zeros((n, K, n + 1), dtype=int)
    exps[:, :K - 2] = comp.table.exponents
    target = np.zeros((n, K), dtype=complex)
    target[:, :K - 2] = cstar
    start_coef = np.zeros((n, K), dtype=complex)
    for i, d in enumerate(degrees):
        exps[i, K - 2, i + 1] = d
        exps[i, K - 1, 0] = d
        start_coef[i, K - 2], start_coef[i, K - 1] = 1.0, -1.0
    live = np.ones((n, K), dtype=bool)
    live[:, :K - 2] = comp.table.live
    table = _Table(exps, live)

    # total-degree start points: x_i = d_i-th roots of unity, put on the chart
    grid = np.array(list(product(*[range(d) for d in degrees])), dtype=float)
    X = np.ones((len(grid), n + 1), dtype=complex)
    X[:, 1:] = np.exp(2j * np.pi * grid / np.array(degrees, dtype=float))
    X /= (X * chart).sum(axis=1)[:, None]

    found = []
    lost = []
    for _ in range(2):  # two gammas; merging guards against a lost path
        gamma = np.exp(2j * np.pi * rng.random())
        hom = _Homotopy(table, chart, target[None], (gamma * start_coef - target)[None])
        group = np.zeros(len(X), dtype=int)
        end, state, cond, jumped = _track_all(hom, X, group, per_group=len(X))
        finite = np.abs(end[:, 0]) > _INFINITY * _norm(end)
        keep = (state == _DONE) & finite & (cond < _SINGULAR)
        found.append(end[keep])
        lost.append(bool((state == _FAILED).any() or jumped.any()))
    roots = _unique_points(np.concatenate(found))
    # re-express on the system's own table (same chart) and polish
    hom = _Homotopy(comp.table, chart, cstar[None], np.zeros((1,) + cstar.shape))
    roots = _refine(hom, roots, np.zeros(len(roots), dtype=int), np.full(len(roots), 4))
    return _Start(chart, cstar, roots, incomplete=all(lost))


def _unique_points(points: np.ndarray, rel: float = 1e-7) -> np.ndarray:
    """Drop later copies of (numerically) equal points."""
    _, later = _near_pairs(points, np.zeros(len(points), dtype=int), rel)
    return points[~later]


# ------------------------------------------------------------------- target solve


def _solve_chunk(comp: _Compiled, start: _Start, values: np.ndarray):
    """Roots (b, R, n), counts, status and messages for one chunk of parameter sets."""
    b, n = values.shape[0], comp.n
    status = np.zeros(b, dtype=int)
    message = np.full(b, "", dtype=object)

    coef = comp.coefficients(values)                       # (b, n, K)
    den = comp.denominator_coefficients(values)            # (b, q, Kd)
    _flag(status, message, ~np.isfinite(coef).all(axis=(1, 2)),
          "the cleared right-hand side is not finite at this parameter set")
    _flag(status, message, ~np.isfinite(den).all(axis=(1, 2)),
          "a denominator is not finite at this parameter set")
    _flag(status, message, (coef == 0).all(axis=2).any(axis=1),
          "an equation vanishes identically (steady states are not isolated)")
    _flag(status, message, (den == 0).all(axis=2).any(axis=1),
          "a denominator vanishes identically at this parameter set")

    R = len(start.roots)
    sets = np.flatnonzero(status == 0)
    if start.incomplete:  # status 1, but the sets are still solved
        status[sets] = 1
        message[sets] = "the generic start system lost paths; steady states may be missing"
    if R == 0 or sets.size == 0:
        return np.full((b, 0, n), np.nan), np.zeros(b, dtype=int), status, message

    # scale each equation to unit largest coefficient: same roots, better-balanced path
    target = coef[sets]
    target = target / np.abs(target).max(axis=2, keepdims=True)
    C0 = target.astype(complex)
    hom = _Homotopy(comp.table, start.chart, C0, start.cstar[None] - C0)
    group = np.repeat(np.arange(sets.size), R)
    X = np.tile(start.roots, (sets.size, 1))
    end, state, cond, jumped = _track_all(hom, X, group, per_group=R)

    failed = np.bincount(group[state == _FAILED], minlength=sets.size)
    jumps = np.bincount(group[jumped], minlength=sets.size)
    incomplete = sets[(failed > 0) | (jumps > 0)]
    status[incomplete] = 1
    for j in np.flatnonzero((failed > 0) | (jumps > 0)):
        message[sets[j]] = (f"{failed[j]} of {R} paths failed, {jumps[j]} ended on a "
                            "duplicate root; steady states may be missing")

    # finite endpoints with a small imaginary part are candidate real roots
    usable = (state == _DONE) | (state == _STALLED)
    with np.errstate(all="ignore"):
        finite = usable & (np.abs(end[:, 0]) > _INFINITY * _norm(end))
        x = end[:, 1:] / end[:, :1]
        singular = cond >= _SINGULAR
        im_tol = np.where(singular, 1e-4, 1e-7) * (1.0 + np.abs(x).max(axis=1))
        real = finite & np.isfinite(x).all(axis=1) & (np.abs(x.imag).max(axis=1) <= im_tol)
    cand = np.flatnonzero(real)
    pts, ok, sing = _polish_real(comp.table, x[cand].real, target[group[cand]],
                                 singular[cand])
    keep = ok & _off_poles(comp, pts, den[sets][group[cand]], sing)
    cand_group = group[cand][keep]
    roots, counts = _unique_sorted(pts[keep], sing[keep], cand_group, sets.size)

    out = np.full((b, roots.shape[1], n), np.nan)
    out[sets] = roots
    all_counts = np.zeros(b, dtype=int)
    all_counts[sets] = counts
    return out, all_counts, status, message


def _flag(status, message, mask, text):
    """Mark sets that cannot be evaluated (status 2), keeping the first reason."""
    new = mask & (status == 0)
    status[new] = 2
    message[new] = text


def _polish_real(table: _Table, x: np.ndarray, C: np.ndarray, singular: np.ndarray):
    """Real Newton on the target; returns points, a convergence flag and singularity.

    Multiple roots converge only linearly, so singular candidates get a longer budget.
    """
    X = np.concatenate([np.ones((len(x), 1)), x], axis=1)
    budget = np.where(singular, 60, 8)
    todo = np.arange(len(x))
    with np.errstate(all="ignore"):
        for it in range(int(budget.max(initial=0))):
            if todo.size == 0:
                break
            F, J = _evaluate(table, X[todo], C[todo])
            dx = _solve(J[..., 1:], -F)
            finite = np.isfinite(dx).all(axis=1)
            X[todo[finite], 1:] += dx[finite]
            moving = finite & (_norm(dx) > 1e-15 * (1.0 + _norm(X[todo, 1:])))
            todo = todo[moving & (budget[todo] > it + 1)]
        F, _ = _evaluate(table, X, C, jacobian=False)
        residual = np.abs(F) / _term_bound(table, X, C)
        ok = np.isfinite(X).all(axis=1) & (residual <= 1e-9).all(axis=1)
        cond = _condition(table, X, C)
    return X[:, 1:], ok, singular | (cond >= _SINGULAR)


def _term_bound(table: _Table, X: np.ndarray, C: np.ndarray, jacobian: bool = False):
    """Size of each polynomial's terms, ``sum_k |c_k| prod_j max(1, |x_j|)^a_kj``: the
    scale for "is it zero" at affine points (``X_0 = 1``). With ``jacobian``, also the
    same bound for each Jacobian entry.

    Flooring each coordinate at 1 keeps the test meaningful at roots where every term
    vanishes (e.g. the origin), where a purely relative test cannot pass, and measures
    each term by its own coordinates (a huge x does not make a term in y look small).
    """
    size = np.maximum(1.0, np.abs(X))
    with np.errstate(all="ignore"):
        values, jac = _evaluate(table, size, np.abs(C), jacobian)
    bound = np.where(values > 0, values, 1.0)
    if not jacobian:
        return bound
    return bound, jac[..., 1:]


def _off_poles(comp: _Compiled, x: np.ndarray, den: np.ndarray, singular: np.ndarray):
    """False where a cleared denominator vanishes (a root of the cleared system only).

    A polished simple root sits on a pole to rounding (|D| ~ 1e-16 of its terms), so the
    threshold is tight; multiple roots are less accurate and get a looser one. A genuine
    steady state closer to a pole than that is lost (documented limitation).
    """
    if den.shape[1] == 0 or not comp.denominator_has_state.any():
        return np.ones(len(x), dtype=bool)
    X = np.concatenate([np.ones((len(x), 1)), x], axis=1)
    values, _ = _evaluate(comp.denominator_table, X, den, jacobian=False)
    tol = np.where(singular, 1e-7, 1e-11)[:, None]
    pole = np.abs(values) <= tol * _term_bound(comp.denominator_table, X, den)
    return ~(pole[:, comp.denominator_has_state]).any(axis=1)


def _unique_sorted(x: np.ndarray, singular: np.ndarray, group: np.ndarray, G: int):
    """Merge duplicates within each group, sort, and pad to (G, R, n)."""
    n = x.shape[1]
    order = np.lexsort(tuple(x[:, j] for j in range(n - 1, -1, -1)) + (group,))
    x, singular, group = x[order], singular[order], group[order]
    counts = np.bincount(group, minlength=G)
    width = int(counts.max(initial=0))
    pos = np.arange(len(x)) - np.repeat(np.cumsum(counts) - counts, counts)
    pts = np.full((G, width, n), np.nan)
    pts[group, pos] = x
    sing = np.zeros((G, width), dtype=bool)
    sing[group, pos] = singular
    # two roots are one when every coordinate agrees to a relative tolerance (loose if
    # either is singular); the set's largest root sets the floor, so copies of a root
    # at zero merge whatever units the states have (1e-9 when every root is ~0: a
    # problem without a length scale, e.g. x**3 = 0)
    absolute = np.where(np.isfinite(pts), np.abs(pts), 0.0)
    floor = np.maximum(absolute.max(axis=(1, 2), initial=0.0), 1e-9)[:, None, None, None]
    gap = np.abs(pts[:, :, None, :] - pts[:, None, :, :])
    size = np.maximum(absolute[:, :, None, :], absolute[:, None, :, :]) + floor
    rel = np.where(sing[:, :, None] | sing[:, None, :], 1e-4, 1e-7)[..., None]
    with np.errstate(invalid="ignore"):
        same = np.triu((gap <= rel * size).all(axis=-1), k=1)  # pairs (earlier, later)
    dup = same.any(axis=1)               # a later copy of an earlier root
    valid = np.isfinite(pts).all(axis=-1) & ~dup
    counts = valid.sum(axis=1)
    width = int(counts.max(initial=0))
    out = np.full((G, width, n), np.nan)
    gi, ri = np.nonzero(valid)
    pos = np.arange(len(gi)) - np.repeat(np.cumsum(counts) - counts, counts)
    out[gi, pos] = pts[gi, ri]
    return out, counts
