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
2. **Hubs, once per study.** Given hub parameter sets (a small design over the study's
   distributions), the roots of ``F_c*`` are tracked to each hub's start system: the
   hub's own coefficients plus a little relative complex noise, which makes every hub a
   generic member of the family (all its roots finite and simple, with probability
   one). When every coefficient is a polynomial in the parameters and the model's own
   family has fewer roots than ``F_c*`` (parameters tied across terms), the noise goes
   on the hub's *parameters* instead and only the family's roots are kept
   (`poise.equilibria.parameter_path`). Hubs where that fails are dropped.
3. **Per parameter set.** The roots at the start (the hub nearest in signed-log
   normalised coefficient scale, else ``c*``) are tracked from ``s = 1`` to ``s = 0``
   along a straight line in coefficient space, ``F(x; c_target + s (c_start -
   c_target))`` (coefficient-parameter homotopy), or, from a parameter hub, in parameter
   space, ``F(x; c(p_target + s (p_hub - p_target)))`` (parameter homotopy; ``c(p(s))``
   is then a polynomial in ``s``). Either way every isolated root of the target is the
   end of one of these paths with probability one. A near hub makes the path short: a
   few steps instead of dozens. Paths are tracked by the compiled loop in
   `poise.equilibria.tracker`, each on its own.

   Coefficient-space lines need no derivatives of the coefficient functions, never
   evaluate functions such as ``sqrt(K)`` or ``log(K)`` at complex parameters (no branch
   cuts), and keep roots that are multiple for every parameter value (e.g.
   ``x**2 * (a - x)``) simple at the start. Their price, when the parameter structure
   makes the family's root count smaller than that of free coefficients: surplus paths
   that diverge at every target. Parameter-space lines avoid that price where they
   apply.

Details:

* **Diverging paths.** Tracking uses homogeneous coordinates ``X = (X_0, X_1..X_n)``,
  ``x = X[1:] / X_0``, on a random affine chart ``a . X = 1``; a path going to infinity
  stays bounded and ends with ``X_0 -> 0``. Endpoints with ``|X_0| <= 1e-10 |X|`` count as
  "at infinity" (so roots more than about 1e10 times the scale of the patch are lost).
* **Predictor-corrector.** See `poise.equilibria.tracker`: Runge-Kutta predictor, Newton
  corrector, corrections measured in units of each coordinate's typical size at the
  hubs (so a scarce species is not drowned by an abundant one).
* **Path jumping.** Two paths of one parameter set ending at the same well-conditioned
  root means one of them jumped; both are tracked again with smaller maximum steps and a
  stricter acceptance test (twice at most). Failed paths are re-tracked the same way.
  From a hub, more paths ending at infinity than on the way from that hub to its own
  real system also marks a jump: those paths are tracked again too.
* **Singular endpoints.** A path heading for a singular point at infinity gets the
  Cauchy endgame of `poise.equilibria.tracker`, which places it there without
  following it down to ``s ~ 1e-11``. A path heading for a finite multiple root is left
  to plain steps: they shrink until they collapse near ``s = 0``, where the point is
  refined by up to 60 Newton iterations (linear convergence). A large condition number
  of the scaled Jacobian marks it singular, which loosens the tolerances for calling it
  real and for merging duplicates. Multiple roots are therefore accurate to roughly
  ``eps**(1/multiplicity)``. A path ending at a singular point off the real line (a
  continuum, or a complex multiple root) flags its set (status 1).
* **Roots far smaller than the rest.** Tolerances along a path are relative to ``|X|``,
  so roots much smaller than the largest ones of their set crowd together near
  ``s = 0`` and their paths stall like paths to a multiple root. A stalled path whose
  end point is a regular root in its own units (`_rescaled_roots`) has its set solved
  again with each state in units of that point, and the regular roots of both solves
  are kept. Every end point tracking calls singular is judged again in its own units
  (`_judge_in_own_units`): a regular one is refined there and must be real to 1e-7 of
  its own size, and two paths on one such root are a jump (the set is flagged unless
  its second solve came out clean).
* **Real roots.** Finite endpoints with a small imaginary part are polished by real
  Newton on the cleared system, kept when the residual is small relative to the size of
  the terms, dropped when a cleared denominator vanishes there, and de-duplicated.
  Each target equation is scaled to unit largest coefficient first (same roots).
* **Reproducibility.** Every path is advanced, refined and judged on its own, so a
  parameter set's result does not depend on the other sets in the batch.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from functools import lru_cache
from itertools import product

import numpy as np
import sympy

from poise.equilibria import tracker
from poise.equilibria.balance import balance, rescale
from poise.equilibria.merge import coincident, unique_sorted
from poise.equilibria.parameter_path import ParameterFamily, along_line, parameter_family
from poise.equilibria.polynomial import PolynomialSystem
from poise.model.constants import floating_constants

# Paths advanced together; larger batches of parameter sets are cut into chunks of this
# many paths (results do not depend on the cut: every path is computed on its own).
_PATHS_PER_CHUNK = 20_000
# |X_0| / |X| below this: endpoint at infinity.
_INFINITY = 1e-10
# Condition number (of the row-scaled Jacobian) above which an endpoint is singular.
_SINGULAR = 1e8
# a point where a path stalled is a regular root in its own units when, after
# _OWN_NEWTON Newton steps in those units, the last step is below _OWN_SETTLED of it
# (see `_rescaled_roots`)
_OWN_NEWTON, _OWN_SETTLED = 3, 1e-12
# ... and when those steps moved it by at most this fraction of its size
_OWN_NEAR = 1e-4
# a coordinate below this fraction of the largest in its set is a root at zero, up to
# rounding: not a unit to rescale by
_NOISE = 1e-12
# The corrector's last correction at s = 0 (relative to |X|) at or below this: Newton
# converged quadratically (the next correction would be ~1e-22), nothing to refine.
_CONVERGED = 1e-11


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
        paths), so roots may be missing, or some path ended at a singular point off the
        real line (a continuum of roots, which has no isolated points to report, or a
        complex multiple root); 2 the system could not be evaluated at this
        parameter set: non-finite coefficients, an equation or a denominator vanishing
        identically (no roots reported).
    message : ndarray of str, shape (B,)
        Reason when ``status != 0``, else ``""``.
    evaluations : ndarray of int, shape (B,)
        Evaluations of the homotopy and its derivatives spent tracking each set's paths
        (all tracking rounds; not the refinement at s = 0 nor the real polishing): a
        machine-independent measure of the work (`poise.equilibria.choice` uses it).
    """

    roots: np.ndarray
    count: np.ndarray
    status: np.ndarray
    message: np.ndarray
    evaluations: np.ndarray


def solve_batch(system: PolynomialSystem, param_values: np.ndarray, *,
                seed: int = 0, hubs: np.ndarray | None = None) -> HomotopyResult:
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
    hubs : array_like, shape (H, m), optional
        Parameter sets spread over the region the targets come from (e.g. a small
        design over the study's distributions). Each is solved once from the generic
        start; every target is then tracked from the hub nearest to it (signed-log
        normalised coefficients), a path several times shorter (see `_hub_start`).
        Results depend on the hubs given, never on the other rows of the batch.

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
    hub_start = None
    if hubs is not None and m > 0 and np.size(hubs) > 0:
        hubs = np.ascontiguousarray(hubs, dtype=float).reshape(-1, m)
        hub_start = _hub_start(system, seed, hubs.tobytes(), hubs.shape[0])
    per_chunk = max(1, _PATHS_PER_CHUNK // max(1, len(start.roots)))

    found: list[np.ndarray] = []
    counts = np.zeros(batch, dtype=int)
    status = np.zeros(batch, dtype=int)
    message = np.full(batch, "", dtype=object)
    evaluations = np.zeros(batch, dtype=np.int64)
    for lo in range(0, batch, per_chunk):
        hi = min(batch, lo + per_chunk)
        roots, counts[lo:hi], status[lo:hi], message[lo:hi], evaluations[lo:hi] = _solve_chunk(
            _compile(system), start, values[lo:hi], hub_start)
        found.append(roots)

    width = max((r.shape[1] for r in found), default=0)
    out = np.full((batch, width, n), np.nan)
    lo = 0
    for roots in found:
        out[lo:lo + len(roots), :roots.shape[1]] = roots
        lo += len(roots)
    return HomotopyResult(roots=out, count=counts, status=status,
                          message=message.astype(str), evaluations=evaluations)


def generic_root_count(system: PolynomialSystem, *, seed: int = 0) -> int:
    """Number of paths tracked per parameter set: the isolated roots of a generic member
    of the family of systems with the same monomials (at most ``system.path_count``)."""
    return len(_start(system, seed).roots)


def paths_per_set(system: PolynomialSystem, hubs: np.ndarray | None = None, *, seed: int = 0) -> int:
    """Number of paths tracked per parameter set with these hubs: the generic root count,
    or fewer when the hubs are points of the model's own parameter family (see
    `poise.equilibria.parameter_path`)."""
    if hubs is None:
        return generic_root_count(system, seed=seed)
    hubs = np.ascontiguousarray(hubs, dtype=float).reshape(-1, len(system.params))
    found = _hub_start(system, seed, hubs.tobytes(), hubs.shape[0])
    return found.roots.shape[1] if len(found.roots) else generic_root_count(system, seed=seed)


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

    def kernel(self, jacobian: bool):
        if jacobian not in self.kernels:
            self.kernels[jacobian] = self._build(jacobian)
        return self.kernels[jacobian]

    def _build(self, jacobian: bool):
        q, K, nv = self.exponents.shape
        powers = [[sympy.Integer(1)] + [sympy.Symbol(f"p{j}_{e}") for e in range(1, self.degree + 1)]
                  for j in range(nv)]
        coef = [[sympy.Symbol(f"c{i}_{k}") for k in range(K)] for i in range(q)]

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
        args = [p for row in powers for p in row[1:]] + [c for row in coef for c in row]
        return sympy.lambdify(args, out, modules="numpy", cse=True)

    def arrays(self):
        """Exponents and live mask in the layout the compiled tracker takes."""
        return np.ascontiguousarray(self.exponents, dtype=np.int64), np.ascontiguousarray(self.live)


def _evaluate(table: _Table, X: np.ndarray, C: np.ndarray, jacobian: bool = True):
    """Values (M, q) and Jacobian (M, q, n+1) of ``sum_k C_ik X^E_ik``; X (M, n+1), C (M, q, K).

    Numpy kernels for the real polishing and bounds, which see one point per candidate
    root; path tracking runs in `poise.equilibria.tracker`.
    """
    XT = np.ascontiguousarray(X.T)
    CT = np.ascontiguousarray(np.moveaxis(C, 0, -1))
    nv, M = XT.shape
    q, K = table.live.shape
    dtype = np.result_type(XT, CT)
    powers = []
    for j in range(nv):
        acc = None
        for _ in range(table.degree):
            acc = XT[j] if acc is None else acc * XT[j]
            powers.append(acc)
    got = table.kernel(jacobian)(*powers, *[CT[i, k] for i in range(q) for k in range(K)])
    values = np.empty((q, M), dtype=dtype)
    for i in range(q):
        values[i] = got[i]
    if not jacobian:
        return values.T, None
    jac = np.empty((q, nv, M), dtype=dtype)
    pos = q
    for i in range(q):
        for j in range(nv):
            jac[i, j] = got[pos]
            pos += 1
    return values.T, np.moveaxis(jac, -1, 0)


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
    """``H(X, s) = sum_k c_k(s) X^E_k`` plus the chart ``a . X = 1``, where
    ``c_k(s) = sum_m C[g, i, k, m] s**m`` for the paths of group g."""

    table: _Table
    chart: np.ndarray  # (n+1,) complex
    C: np.ndarray      # (G, q, K, degree in s + 1) complex
    # typical size of each coordinate: step acceptance measures corrections in units of
    # it, so a small coordinate (a scarce species) is not drowned by a large one
    weight: np.ndarray | None = None
    # `tracker.start_factors` of the points the paths leave from (hub roots), when
    # known: the first velocity of each path then costs no evaluation
    origins: tuple | None = None

    def arrays(self):
        exps, live = self.table.arrays()
        return (exps, live, np.ascontiguousarray(self.chart, dtype=complex),
                np.ascontiguousarray(self.C, dtype=complex))


def _line(table: _Table, chart: np.ndarray, C0: np.ndarray, C1: np.ndarray,
          weight: np.ndarray | None = None) -> _Homotopy:
    """The straight line in coefficient space from ``C1`` (s = 1) to ``C0`` (s = 0)."""
    return _Homotopy(table, chart, np.stack(np.broadcast_arrays(C0, C1 - C0), axis=-1), weight)


@dataclass(frozen=True)
class _Settings:
    h_init: float = 1.0         # a whole path in one step when the predictor allows it
    h_max: float = 1.0
    beta: float = 3e-3          # largest first Newton correction accepted, relative to |X|
    tol: float = 1e-9           # corrector convergence, relative to |X| in units of each
                                # coordinate's typical size (1e-6 let paths near a double
                                # root land apart, and left near-infinite ends "finite")
    newton_steps: int = 3
    max_iterations: int = 3000
    s_stop: float = 1e-11       # a step ending below this lands at s = 0
    endgame: bool = True        # Cauchy endgame for singular end points


_NORMAL = _Settings()
# re-tracking takes small steps and no endgame
_RETRACK = (_Settings(h_init=0.01, h_max=0.02, beta=1e-5, endgame=False),
            _Settings(h_init=0.002, h_max=0.005, beta=1e-7, endgame=False))

_DONE, _FAILED, _STALLED = tracker.DONE, tracker.FAILED, tracker.STALLED


def _track(hom: _Homotopy, X: np.ndarray, group: np.ndarray, cfg: _Settings,
           origin: np.ndarray | None = None):
    """Track every path from s = 1 to s = 0; returns endpoints, path states, cycle
    numbers, evaluations per path and the corrector's last correction at s = 0.
    ``origin``: each path's start point in ``hom.origins``, if any.

    A path ends ``_DONE`` (reached s = 0, by plain steps or by the endgame, which then
    reports its cycle number >= 1), ``_STALLED`` (steps collapsed close to s = 0 after
    the endgame did not settle: a singular endpoint) or ``_FAILED`` (steps collapsed, or
    out of iterations, far from s = 0).
    """
    exps, live, chart, C = hom.arrays()
    group = np.ascontiguousarray(group, dtype=np.int64)
    if hom.origins is not None and origin is not None:
        V0 = tracker.start_velocities(live, C, group, np.ascontiguousarray(origin, dtype=np.int64),
                                      *hom.origins)
    else:
        V0 = np.empty((0, X.shape[1]), dtype=complex)
    return tracker.track_paths(
        exps, live, chart, C, group, np.ascontiguousarray(X, dtype=complex), V0,
        np.ones(X.shape[1]) if hom.weight is None else np.ascontiguousarray(hom.weight, dtype=float),
        cfg.h_init, cfg.h_max, cfg.beta, cfg.tol,
        cfg.newton_steps, cfg.max_iterations, cfg.s_stop, cfg.endgame)


def _refine(hom: _Homotopy, X: np.ndarray, group: np.ndarray, iterations: np.ndarray):
    """Newton on the target system (s = 0) in homogeneous coordinates, each path on its
    own; returns the points and their condition numbers (row-scaled, 1-norm)."""
    return tracker.refine_paths(*hom.arrays(), np.ascontiguousarray(group, dtype=np.int64),
                                np.ascontiguousarray(X, dtype=complex),
                                np.ascontiguousarray(iterations, dtype=np.int64))


def _condition(table: _Table, X: np.ndarray, C: np.ndarray, relative: bool = True) -> np.ndarray:
    """Condition number of the Jacobian at affine points (``X_0 = 1``), each row scaled
    by the size its entries can have (a bound from the coefficients and ``|x|``, not the
    row's current length, which vanishes at a multiple root). With ``relative`` False,
    1 / (smallest singular value) of that scaled Jacobian instead: the ratio is 1 for
    any 1 x 1 Jacobian, however close to zero."""
    with np.errstate(all="ignore"):
        _, J = _evaluate(table, X, C)
        J = J[..., 1:]
        bound = _term_bound(table, X, C, jacobian=True)[1].max(axis=-1)
        J = J / np.where(bound > 0, bound, 1.0)[..., None]
        ok = np.isfinite(J).all(axis=(1, 2))
        J = np.where(ok[:, None, None], J, 0.0)
        sv = np.linalg.svd(J, compute_uv=False)
        cond = (sv[:, 0] if relative else 1.0) / sv[:, -1]
    return np.where(ok & np.isfinite(cond), cond, np.inf)


def _track_all(hom: _Homotopy, X: np.ndarray, group: np.ndarray, per_group: int,
               expected_infinite: np.ndarray | None = None, origin: np.ndarray | None = None):
    """Track, refine, and re-track failed or jumping paths with tighter settings.

    Paths are group-major: ``per_group`` consecutive paths belong to one group.
    ``expected_infinite`` (per group): how many paths end at infinity at the hub the
    group starts from. A group with more has probably had a path jump onto a path that
    diverges (a lost root, invisible to the duplicate test); its infinite paths are
    tracked again with the first tighter setting. ``origin``: see `_track`.
    Returns endpoints, states, condition numbers, a flag for unresolved jumps and the
    evaluations each path took (all its tracking rounds).
    """
    end, state, cycle, work, last = _track(hom, X, group, _NORMAL, origin)
    end, cond = _finish(hom, end, state, cycle, last, group)
    finite = _finite(end)
    jumped = _duplicates(end, state, cond, finite, per_group)
    for round_, cfg in enumerate(_RETRACK):
        redo = (state == _FAILED) | jumped
        if expected_infinite is not None and round_ == 0:
            extra = np.bincount(group[~finite], minlength=len(expected_infinite)) > expected_infinite
            redo |= ~finite & extra[group]
        if not redo.any():
            break
        e, st, cy, w, la = _track(hom, X[redo], group[redo], cfg, None if origin is None else origin[redo])
        end[redo], cond[redo] = _finish(hom, e, st, cy, la, group[redo])
        state[redo], cycle[redo] = st, cy
        work[redo] += w
        finite[redo] = _finite(end[redo])
        jumped = _duplicates(end, state, cond, finite, per_group)
    return end, state, cond, jumped, work


def _finish(hom, end, state, cycle, last, group):
    """Newton at s = 0 and condition numbers: a few steps for clean endpoints, many for
    stalled (singular) ones, none where the corrector's last correction shows quadratic
    convergence already (``last`` <= _CONVERGED) nor for the endgame's (all at infinity,
    where Newton has nothing to converge to and could only move them)."""
    budget = np.select([cycle > 0, (state == _DONE) & (last <= _CONVERGED), state == _DONE,
                        state == _STALLED], [0, 0, 4, 60], 0)
    return _refine(hom, end, group, budget)


def _finite(end: np.ndarray) -> np.ndarray:
    """Endpoints not at infinity: ``|X_0| > _INFINITY |X|``."""
    head = end[:, 0].real ** 2 + end[:, 0].imag ** 2
    return head > _INFINITY ** 2 * (end.real ** 2 + end.imag ** 2).sum(axis=1)


def _duplicates(end, state, cond, finite, per_group: int) -> np.ndarray:
    """Paths ending on the same well-conditioned finite point as another path of their group.

    Several paths may legitimately end at one point at infinity or at a multiple root;
    at a finite nonsingular root, only one can.
    """
    clean = (state == _DONE) & finite & (cond < _SINGULAR / 100)
    points = np.ascontiguousarray(np.where(clean[:, None], end, np.nan), dtype=complex)
    return tracker.near_pairs(points, max(per_group, 1), 1e-7)[0]


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
    family: ParameterFamily | None = None  # numerator coefficients as polynomials in params


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
    fn = sympy.lambdify(params, [floating_constants(e) for e in flat], modules="numpy", cse=True) if flat else None

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
                     denominator_has_state=has_state,
                     family=parameter_family(params, exprs))


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
        hom = _line(table, chart, target[None], gamma * start_coef[None])
        group = np.zeros(len(X), dtype=int)
        end, state, cond, jumped, _ = _track_all(hom, X, group, per_group=len(X))
        finite = _finite(end)
        keep = (state == _DONE) & finite & (cond < _SINGULAR)
        found.append(end[keep])
        lost.append(bool((state == _FAILED).any() or jumped.any()))
    roots = _unique_points(np.concatenate(found))
    # re-express on the system's own table (same chart) and polish
    hom = _line(comp.table, chart, cstar[None], cstar[None])
    roots, _ = _refine(hom, roots, np.zeros(len(roots), dtype=int), np.full(len(roots), 4))
    return _Start(chart, cstar, roots, incomplete=all(lost))


def _unique_points(points: np.ndarray, rel: float = 1e-7) -> np.ndarray:
    """Drop later copies of (numerically) equal points."""
    points = np.ascontiguousarray(points, dtype=complex)
    _, later = tracker.near_pairs(points, max(len(points), 1), rel)
    return points[~later]


# ------------------------------------------------------------------------- hubs

# Hub start points: the hub's own values plus this much random complex noise, relative
# (in its coefficients, or in its parameters for a parameter-space line). The noise makes
# each hub a generic member of the family (all roots finite and simple, with probability
# one), so the straight path from a hub to a real target meets no singularity before
# s = 0 with probability one (Morgan & Sommese 1989), however close the hub is; it is
# kept small so that hubs stay close to the targets.
_HUB_NOISE = 0.1


@dataclass(frozen=True, eq=False)
class _Hubs:
    coefficients: np.ndarray  # (H, q, K) complex: start coefficients of each hub
    anchor: np.ndarray        # (H, q*K) real: where the hub sits (`_hub_key`)
    roots: np.ndarray         # (H, R, n+1): every root at the start coefficients
    weight: np.ndarray        # (n+1,) typical size of each coordinate at the hubs' roots
    infinite: np.ndarray      # (H,) paths that diverge from the hub to its own real system
    # (H, m) complex start parameters when targets are reached along lines in parameter
    # space (`poise.equilibria.parameter_path`); None for lines in coefficient space
    params: np.ndarray | None = None
    # `tracker.start_factors` at every root of every hub (set by `_hub_start`)
    factors: tuple | None = None
    # (H, n) log of each hub's state units (`poise.equilibria.balance`): a hub and every
    # target reached from it are solved in these units
    log_units: np.ndarray | None = None


@lru_cache(maxsize=8)
def _hub_start(system: PolynomialSystem, seed: int, values: bytes, count: int) -> _Hubs:
    """Every root of each hub's start system, tracked from the generic start.

    When the coefficients are polynomials in the parameters and the model's own family
    has fewer roots than the generic start (surplus paths that would diverge at every
    target), the hubs are complex parameter points and targets are reached along lines
    in parameter space; otherwise the hubs are complex coefficient points.

    Hubs whose coefficients cannot be evaluated, or where a path failed, jumped or ended
    singular or at infinity (not the full root count), are dropped: a target then uses
    another hub, or the generic start when none is left.
    """
    comp, start = _compile(system), _start(system, seed)
    params = np.frombuffer(values, dtype=float).reshape(count, -1)
    coef = comp.coefficients(params)
    with np.errstate(all="ignore"):
        usable = np.isfinite(coef).all(axis=(1, 2)) & ~(coef == 0).all(axis=2).any(axis=1)
    exps = comp.table.exponents
    units = _shared_units(balance(exps, comp.table.live, coef[usable]))
    keys = _hub_key(coef[usable])
    anchor = rescale(exps, coef[usable], units)
    hubs = None
    if len(start.roots) and len(anchor) and comp.family is not None:
        hubs = _parameter_hubs(comp, start, params[usable], anchor, units, keys, seed)
    if hubs is None:
        hubs = _coefficient_hubs(comp, start, anchor, units, keys, seed)
    if not hubs.roots.size:
        return hubs
    exps, live = comp.table.arrays()
    factors = tracker.start_factors(exps, live, np.ascontiguousarray(start.chart, dtype=complex),
                                    np.ascontiguousarray(hubs.coefficients[..., None], dtype=complex),
                                    np.ascontiguousarray(hubs.roots, dtype=complex))
    return dataclasses.replace(hubs, factors=factors)


# a hub whose own units differ from the hubs' common units by more than this factor (in
# some state) keeps its own units for that state
_OWN_UNITS_BEYOND = np.log(1e3)


def _shared_units(own: np.ndarray) -> np.ndarray:
    """Units for each hub's solve, from each hub's own (balanced) log units (H, n): the
    median over the hubs wherever a hub's own are within a factor 1e3 of it, else the
    hub's own. Paths are shorter when neighbouring hubs share units (measured with
    benchmarks/bench_homotopy.py: toggle switch 87 -> 74 evaluations per set), and a
    hub far out (a root of 1e200 where the others are near 1) still gets units in which
    its roots are of order one. Ratios of units do not depend on the model's units, so
    neither does this choice."""
    if not len(own):
        return own
    common = np.median(own, axis=0)
    return np.where(np.abs(own - common) > _OWN_UNITS_BEYOND, own, common)


def _coefficient_hubs(comp: _Compiled, start: _Start, anchor: np.ndarray, units: np.ndarray,
                      keys: np.ndarray, seed: int) -> _Hubs:
    """Hubs at each hub's normalised coefficients (in its own units) plus relative
    complex noise."""
    q, K = comp.table.live.shape
    R, nv = start.roots.shape
    if R == 0 or not len(anchor):
        return _Hubs(np.zeros((0, q, K), complex), np.zeros((0, q * K)), np.zeros((0, R, nv), complex),
                     np.ones(nv), np.zeros(0, dtype=int), log_units=np.zeros((0, nv - 1)))
    rng = np.random.default_rng([seed, 1989])
    noise = np.where(comp.table.live, _complex_normal(rng, (len(anchor), q, K)), 0)
    # relative noise keeps each coefficient's own scale (small coefficients set where
    # small roots are); coefficients that are zero at the hub get noise the size of the
    # equation's smallest nonzero one
    size = np.abs(anchor)
    smallest = np.where(size > 0, size, np.inf).min(axis=2, keepdims=True)
    hub_coef = anchor + _HUB_NOISE * noise * np.where(size > 0, size, smallest * 0.1)
    roots, whole = _roots_at(comp, start, hub_coef)
    hub_coef, anchor, units, keys = hub_coef[whole], anchor[whole], units[whole], keys[whole]
    weight = _typical_size(roots.reshape(-1, nv))
    # how many paths diverge on the way from each hub to its own (real) system: targets
    # near the hub should lose no more than that many to infinity
    own = _line(comp.table, start.chart, anchor.astype(complex), hub_coef, weight)
    return _Hubs(coefficients=hub_coef, anchor=keys, roots=roots,
                 weight=weight, infinite=_diverging(own, roots), log_units=units)


def _parameter_hubs(comp: _Compiled, start: _Start, params: np.ndarray, anchor: np.ndarray,
                    units: np.ndarray, keys: np.ndarray, seed: int) -> _Hubs | None:
    """Hubs at each hub's parameters plus relative complex noise (coefficients in the
    hub's own units), or None when that does not save paths (or the family's generic
    roots are not all simple)."""
    nv = start.roots.shape[1]
    rng = np.random.default_rng([seed, 1993])
    scale = np.where(params != 0, params, 1.0)
    hub_params = params + _HUB_NOISE * scale * _complex_normal(rng, params.shape)
    exps = comp.table.exponents
    with np.errstate(all="ignore"):
        hub_coef = comp.family.evaluate(hub_params)
        size = np.abs(hub_coef).max(axis=2, keepdims=True)
        hub_coef = rescale(exps, hub_coef, units)
    ok = np.isfinite(hub_coef).all(axis=(1, 2)) & (size[..., 0] > 0).all(axis=1)
    if not ok.any():
        return None
    hub_params, hub_coef, anchor, units, keys = hub_params[ok], hub_coef[ok], anchor[ok], units[ok], keys[ok]
    roots, clean = _roots_at(comp, start, hub_coef, keep_partial=True)
    counts = np.array([len(r) for r in roots])
    R = int(counts[clean].max(initial=0))
    kept = clean & (counts == R)  # fewer roots: a lost path, not genericity
    # most hubs must agree: otherwise the family's generic roots are not all simple
    # (e.g. roots multiple for every parameter value), and no hub is a valid start
    if R == 0 or R >= len(start.roots) or kept.sum() < len(counts) / 2:
        return None
    roots = np.stack([roots[i] for i in np.flatnonzero(kept)])
    hub_params, hub_coef, anchor, units, keys = (hub_params[kept], hub_coef[kept], anchor[kept], units[kept],
                                                 keys[kept])
    weight = _typical_size(roots.reshape(-1, nv))
    real = params[ok][kept]
    C = rescale(exps, along_line(comp.family, real, hub_params), units)
    own = _Homotopy(comp.table, start.chart, C, weight)
    return _Hubs(coefficients=hub_coef, anchor=keys, roots=roots,
                 weight=weight, infinite=_diverging(own, roots), params=hub_params, log_units=units)


def _roots_at(comp: _Compiled, start: _Start, coef: np.ndarray, keep_partial: bool = False):
    """Finite nonsingular roots of each system ``coef`` (H, q, K), from the generic start.

    Returns (roots, whole): roots (H', R, n+1) of the systems where every path ended at
    a finite nonsingular root (``whole``). With ``keep_partial``, a list of each
    system's finite nonsingular roots instead, and ``whole`` marks the systems where
    every other path ended at infinity (none failed, jumped or ended finite but singular).
    """
    R, nv = start.roots.shape
    hom = _line(comp.table, start.chart, coef, start.cstar[None])
    group = np.repeat(np.arange(len(coef)), R)
    end, state, cond, jumped, _ = _track_all(hom, np.tile(start.roots, (len(coef), 1)), group, R)
    finite = _finite(end)
    good = (state == _DONE) & finite & (cond < _SINGULAR) & ~jumped
    if keep_partial:
        unclear = (state == _FAILED) | jumped | (finite & ~good)
        clean = ~unclear.reshape(-1, R).any(axis=1)
        return [end[g * R:(g + 1) * R][good[g * R:(g + 1) * R]] for g in range(len(coef))], clean
    whole = good.reshape(-1, R).all(axis=1)
    return end.reshape(-1, R, nv)[whole], whole


def _diverging(hom: _Homotopy, roots: np.ndarray) -> np.ndarray:
    """Paths per group that end at infinity, tracking ``roots`` (G, R, n+1) along ``hom``."""
    G, R, nv = roots.shape
    group = np.repeat(np.arange(G), R)
    end = _track_all(hom, roots.reshape(-1, nv), group, R)[0]
    return np.bincount(group[~_finite(end)], minlength=G)


def _typical_size(points: np.ndarray) -> np.ndarray:
    """Geometric mean of each coordinate's modulus, floored at 1e-8 of the largest."""
    if not len(points):
        return np.ones(points.shape[1])
    with np.errstate(divide="ignore"):
        logs = np.log(np.maximum(np.abs(points), 1e-300))
    size = np.exp(logs.mean(axis=0))
    return np.maximum(size, 1e-8 * size.max())


def _hub_key(coef: np.ndarray) -> np.ndarray:
    """Where each real system (B, q, K) sits, for choosing the nearest hub: the logarithm
    of each coefficient's size, centred per equation (an equation's common factor does
    not move its roots), and its sign.

    Roots move with the *relative* change of a coefficient: halving a coefficient of
    1e-4 matters as much as halving one of 1 (choosing hubs by relative change cut the
    bundled toggle switch's paths from about 38 to 15 evaluations each,
    benchmarks/bench_homotopy.py). No floor: a coefficient 1e-170 times its equation's
    largest still tells hubs apart (a floor made every such hub look alike, and a target
    solved in the units of a hub 1e140 away lost its root). Rewriting a state in other
    units shifts the logarithms of target and hub alike, so the choice does not depend
    on units.
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        logs = np.log(np.abs(coef))
        known = np.isfinite(logs)
        mean = np.where(known, logs, 0.0).sum(axis=2, keepdims=True) / np.maximum(known.sum(axis=2, keepdims=True), 1)
        centred = np.where(known, logs - mean, 0.0)
    sign = np.sign(coef) * _SIGN_WEIGHT
    return np.concatenate([centred.reshape(len(coef), -1), sign.reshape(len(coef), -1)], axis=1)


# weight of a coefficient's sign against the logarithm of its size when hubs are compared
_SIGN_WEIGHT = 20.0
# a target whose own balanced units differ from its hub's by more than this factor in
# some state is flagged (status 1) and solved again by Newton: its roots would be far
# from order one in the hub's units
_UNITS_APART = np.log(1e6)


def _nearest(points: np.ndarray, anchors: np.ndarray) -> np.ndarray:
    """Index of the nearest anchor (Euclidean) for each point; ties go to the first.
    Compiled and summed term by term, so each point's choice is independent of the batch."""
    return tracker.nearest_rows(np.ascontiguousarray(points, dtype=float),
                                np.ascontiguousarray(anchors, dtype=float))


# ------------------------------------------------------------------- target solve


def _solve_chunk(comp: _Compiled, start: _Start, values: np.ndarray, hubs: _Hubs | None):
    """Roots (b, R, n), counts, status, messages and evaluations for one chunk of sets."""
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
        return np.full((b, 0, n), np.nan), np.zeros(b, dtype=int), status, message, np.zeros(b, np.int64)

    # each target is solved in units where its coefficients balance (`balance`): those
    # of the hub it starts from, whose roots are known there; each equation scaled to
    # unit largest coefficient (same roots, better-balanced path)
    exps = comp.table.exponents
    if hubs is not None and len(hubs.roots):
        near = _nearest(_hub_key(coef[sets]), hubs.anchor)
        units = hubs.log_units[near]
        apart = (np.abs(balance(exps, comp.table.live, coef[sets]) - units) > _UNITS_APART).any(axis=1)
        for j in np.flatnonzero(apart & (status[sets] == 0)):
            status[sets[j]] = 1
            message[sets[j]] = "roots far from the sizes at every hub; solved again by Newton"
        target = rescale(exps, coef[sets], units)
        R = hubs.roots.shape[1]
        if hubs.params is not None:  # along a line in parameter space
            C = rescale(exps, along_line(comp.family, values[sets], hubs.params[near]), units)
            hom = _Homotopy(comp.table, start.chart, C, hubs.weight)
        else:
            hom = _line(comp.table, start.chart, target.astype(complex), hubs.coefficients[near], hubs.weight)
        hom = dataclasses.replace(hom, origins=hubs.factors)
        X = hubs.roots[near].reshape(sets.size * R, -1)
        origin = (near[:, None] * R + np.arange(R)).ravel()
        expected = hubs.infinite[near]
    else:
        units = balance(exps, comp.table.live, coef[sets])
        target = rescale(exps, coef[sets], units)
        expected = origin = None
        hom = _line(comp.table, start.chart, target.astype(complex), start.cstar[None])
        X = np.tile(start.roots, (sets.size, 1))
    den_units = rescale(comp.denominator_table.exponents, den[sets], units) if den.shape[1] else den[sets]
    group = np.repeat(np.arange(sets.size), R)
    end, state, cond, jumped, work = _track_all(hom, X, group, per_group=R,
                                                expected_infinite=expected, origin=origin)

    failed = np.bincount(group[state == _FAILED], minlength=sets.size)
    jumps = np.bincount(group[jumped], minlength=sets.size)
    incomplete = sets[(failed > 0) | (jumps > 0)]
    status[incomplete] = 1
    for j in np.flatnonzero((failed > 0) | (jumps > 0)):
        message[sets[j]] = (f"{failed[j]} of {R} paths failed, {jumps[j]} ended on a "
                            "duplicate root; steady states may be missing")

    x, real, finite, singular = _real_candidates(end, state, cond)
    with np.errstate(invalid="ignore"):
        size = np.where(finite[:, None] & np.isfinite(x), np.abs(x), 0.0)
    reach = np.zeros((sets.size, n))
    np.maximum.at(reach, group, size)
    # tracking measures singularity in units of |X|: an end point far smaller than the
    # largest of its set looks singular there, and then passes the loose tests meant
    # for multiple roots (a complex pair close to the real line became a real root).
    # Judged in its own units, a regular one gets the strict tests.
    _judge_in_own_units(comp.table, target[group], reach[group], x, real, finite, singular, cond)
    # two paths on one root that is regular in its own units: a jump the tracker could
    # not see (it took the root for a multiple one); roots may be missing unless the
    # set's second solve below (a whole solve of its own) came out clean
    jumped = np.bincount(group[_same_regular_root(x, finite & ~singular, R)], minlength=sets.size)
    # a path ending at a singular point off the real line: a continuum of steady states
    # (paths land on a generic, complex point of it) or a complex multiple root; the
    # set is flagged so that the caller can solve it another way
    odd = np.bincount(group[finite & singular & ~real], minlength=sets.size)
    for j in np.flatnonzero((odd > 0) & (status[sets] == 0)):
        status[sets[j]] = 1
        message[sets[j]] = (f"{odd[j]} of {R} paths ended at a singular point off the real line "
                            "(a continuum of steady states, or a complex multiple root)")
    cand = np.flatnonzero(real)
    points, owner, point_cond = x[cand].real, group[cand], cond[cand]
    work = np.bincount(group, weights=work, minlength=sets.size)

    # a path stalled (steps collapsed near s = 0) at a point that is a regular root in
    # its own units: roots much smaller than the point's size crowd together there;
    # such a set is solved again in units of that root, and the union kept
    stalled = np.flatnonzero((state == _STALLED) & finite)
    second = np.zeros(len(points), dtype=bool)
    resolved = np.zeros(sets.size, dtype=bool)
    if stalled.size:
        extra = _rescaled_roots(comp, start, target, group[stalled], x[stalled], reach[group[stalled]])
        points = np.concatenate([points, extra.points])
        owner = np.concatenate([owner, extra.owner])
        point_cond = np.concatenate([point_cond, extra.cond])
        second = np.concatenate([second, np.ones(len(extra.points), dtype=bool)])
        work += extra.work
        resolved[extra.solved] = True
        resolved[extra.incomplete] = False
        for j in extra.incomplete[status[sets[extra.incomplete]] == 0]:
            status[sets[j]] = 1
            message[sets[j]] = ("roots of very different sizes: solving again in units of the "
                                "small ones lost paths; steady states may be missing")

    for j in np.flatnonzero((jumped > 0) & ~resolved & (status[sets] == 0)):
        status[sets[j]] = 1
        message[sets[j]] = (f"{jumped[j]} of {R} paths ended on a root another path also reached; "
                            "steady states may be missing")

    pts, ok, sing, spread = _polish_real(comp.table, points, target[owner], point_cond)
    keep = ok & _off_poles(comp, pts, den_units[owner], sing)
    roots, counts = unique_sorted(pts[keep], sing[keep], owner[keep], sets.size, second[keep], spread[keep])

    out = np.full((b, roots.shape[1], n), np.nan)
    out[sets] = roots * np.exp(units)[:, None, :]   # back to the model's units
    all_counts = np.zeros(b, dtype=int)
    all_counts[sets] = counts
    all_work = np.zeros(b, dtype=np.int64)
    all_work[sets] = work.astype(np.int64)
    return out, all_counts, status, message, all_work


def _real_candidates(end: np.ndarray, state: np.ndarray, cond: np.ndarray):
    """Affine points, and which are candidate real roots (finite, small imaginary part),
    finite, and singular."""
    usable = (state == _DONE) | (state == _STALLED)
    with np.errstate(all="ignore"):
        finite = usable & _finite(end)
        x = end[:, 1:] / end[:, :1]
        singular = cond >= _SINGULAR
        im_tol = np.where(singular, 1e-4, 1e-7) * (1.0 + np.abs(x).max(axis=1))
        real = finite & np.isfinite(x).all(axis=1) & (np.abs(x.imag).max(axis=1) <= im_tol)
    return x, real, finite, singular


@dataclass(frozen=True)
class _Extra:
    points: np.ndarray      # (M, n) candidate real roots, original units
    owner: np.ndarray       # (M,) their sets (chunk-local)
    cond: np.ndarray        # (M,) condition numbers (in their own units where re-judged)
    work: np.ndarray        # (sets,) evaluations added per set
    incomplete: np.ndarray  # chunk-local sets whose rescaled solve lost paths
    solved: np.ndarray      # chunk-local sets solved again


def _same_regular_root(x: np.ndarray, usable: np.ndarray, per_group: int) -> np.ndarray:
    """Usable end points that another path of their group (``per_group`` consecutive
    rows) also reached: every coordinate equal to 1e-7 of its own size."""
    if per_group < 2 or not len(x):
        return np.zeros(len(x), dtype=bool)
    return coincident(np.ascontiguousarray(x, dtype=complex), np.ascontiguousarray(usable, dtype=np.bool_),
                      per_group)


def _judge_in_own_units(table, target, reach, x, real, finite, singular, cond):
    """Re-judge, in place, finite end points that tracking called singular: one that is
    a regular root in its own units (`_own_units`) is refined there, no longer singular,
    and real only when its imaginary part is small next to its own size."""
    recheck = np.flatnonzero(finite & singular & np.isfinite(x).all(axis=1))
    if not recheck.size:
        return
    sigma, _, regular, own, point = _own_units(table, target[recheck], x[recheck], reach[recheck])
    rows = recheck[regular]
    singular[rows] = False
    cond[rows] = own[regular]
    x[rows] = point[regular]  # Newton in its own units: accurate in every coordinate
    real[rows] = (np.abs(x[rows].imag) <= 1e-7 * sigma[regular]).all(axis=1)


def _own_units(table: _Table, target: np.ndarray, point: np.ndarray, reach: np.ndarray):
    """Each row's system in units of its point (x = sigma y, sigma = |point| per state;
    a coordinate below _NOISE of its set's ``reach`` is a zero up to rounding and keeps
    the units of the reach), and whether the point is near a regular root in those
    units: Newton there settles to rounding level (quadratic convergence; linear at a
    multiple root) and 1 / (smallest singular value) of the row-scaled Jacobian is
    well below _SINGULAR. Returns sigma (r, n), the rescaled coefficients, the flag,
    that condition number and the point after those Newton steps (original units)."""
    exps, _ = table.arrays()
    sigma = np.abs(point)
    sigma = np.where(np.isfinite(sigma) & (sigma > _NOISE * reach), sigma, reach)
    sigma = np.where(np.isfinite(sigma) & (sigma > 0), sigma, 1.0)
    with np.errstate(all="ignore"):
        factor = np.exp(np.einsum("ikj,rj->rik", exps[:, :, 1:].astype(float), np.log(sigma)))
        scaled = target * factor
        scaled = scaled / np.abs(scaled).max(axis=2, keepdims=True)
        here = np.concatenate([np.ones((len(point), 1)), point / sigma], axis=1)
        before = here[:, 1:].copy()
        for _ in range(_OWN_NEWTON):
            value, jac = _evaluate(table, here, scaled)
            step = _solve(jac[..., 1:], -value)
            here[:, 1:] += np.where(np.isfinite(step), step, 0.0)
        # near the root it converged to (else Newton went off to another root)
        settled = ((_norm(step) <= _OWN_SETTLED * _norm(here[:, 1:]))
                   & (_norm(here[:, 1:] - before) <= _OWN_NEAR * _norm(before)))
        cond = _condition(table, here, scaled, relative=False)
        regular = np.isfinite(scaled).all(axis=(1, 2)) & settled & (cond < _SINGULAR / 100)
    return sigma, scaled, regular, cond, here[:, 1:] * sigma


def _rescaled_roots(comp: _Compiled, start: _Start, target: np.ndarray, owner: np.ndarray,
                    anchor: np.ndarray, reach: np.ndarray) -> _Extra:
    """Real root candidates of sets solved again with each state in units of a point
    where one of their paths stalled (``anchor``, one row per stalled path, ``owner``
    its set, ``reach`` the largest size of each state among that set's finite end
    points), from the generic start. A coordinate of the anchor at rounding level
    (below _NOISE of its reach: a root at zero) keeps the units of its reach.

    Tolerances along a path are relative to the size of the whole point, so roots far
    smaller than the largest ones of their set crowd together near s = 0: their paths
    stall and land on one of them. With x = sigma y (sigma = |anchor|) those roots are
    of order one. A set is solved again when such a point is a regular root in its own
    units (Newton there settles to rounding level and the condition number is well
    below _SINGULAR); at a multiple root Newton converges only linearly and the
    Jacobian stays singular, so those sets cost nothing more. Only regular roots of the
    rescaled solve are returned; they are the same roots (checked again on the
    original equations by the caller).
    """
    table = comp.table
    sets = len(target)
    sigma, scaled, regular, _, _ = _own_units(table, target[owner], anchor, reach)
    # one anchor per set: the first regular one
    chosen = np.flatnonzero(regular)
    chosen = chosen[np.unique(owner[chosen], return_index=True)[1]]
    owner, sigma, scaled = owner[chosen], sigma[chosen], scaled[chosen]
    R = len(start.roots)
    if not len(chosen) or R == 0:
        return _Extra(np.zeros((0, anchor.shape[1])), np.zeros(0, dtype=int), np.zeros(0),
                      np.zeros(sets), np.zeros(0, dtype=int), np.zeros(0, dtype=int))
    group = np.repeat(np.arange(len(chosen)), R)
    hom = _line(table, start.chart, scaled.astype(complex), start.cstar[None])
    end, state, cond, jumped, work = _track_all(hom, np.tile(start.roots, (len(chosen), 1)), group, R)
    y, real, finite, singular = _real_candidates(end, state, cond)
    x = y * sigma[group]
    _judge_in_own_units(table, target[owner[group]], reach[chosen][group], x, real, finite, singular, cond)
    jumped |= _same_regular_root(x, finite & ~singular, R)
    # only regular roots: the crowded small roots are what this solve is for, and a
    # multiple root (found by the first solve) would come back as a spread of estimates
    cand = np.flatnonzero(real & ~singular)
    return _Extra(points=x[cand].real, owner=owner[group[cand]], cond=cond[cand],
                  work=np.bincount(owner[group], weights=work, minlength=sets),
                  incomplete=np.unique(owner[group[(state == _FAILED) | jumped]]), solved=owner)


def _flag(status, message, mask, text):
    """Mark sets that cannot be evaluated (status 2), keeping the first reason."""
    new = mask & (status == 0)
    status[new] = 2
    message[new] = text


def _polish_real(table: _Table, x: np.ndarray, C: np.ndarray, cond: np.ndarray):
    """Real Newton on the target; returns points, a convergence flag, singularity and
    each point's last Newton step per coordinate (its uncertainty, for merging copies).

    ``cond``: the end points' condition numbers from tracking. Multiple roots converge
    only linearly, so singular candidates get a longer budget. The condition number is
    computed again at the real point only where tracking's was not clearly regular:
    a point well below _SINGULAR moves by at most ~1e-7 relative here, which cannot
    bring it near _SINGULAR. (The two measures differ: tracking's is taken in
    homogeneous coordinates, this one in the states' own units, where roots whose
    coordinates span many decades can look singular although tracking separated them.)
    """
    singular = cond >= _SINGULAR
    X = np.concatenate([np.ones((len(x), 1)), x], axis=1)
    budget = np.where(singular, 60, 8)
    todo = np.arange(len(x))
    spread = np.zeros_like(x)
    with np.errstate(all="ignore"):
        for it in range(int(budget.max(initial=0))):
            if todo.size == 0:
                break
            F, J = _evaluate(table, X[todo], C[todo])
            dx = _solve(J[..., 1:], -F)
            finite = np.isfinite(dx).all(axis=1)
            X[todo[finite], 1:] += dx[finite]
            spread[todo[finite]] = np.abs(dx[finite])
            moving = finite & (_norm(dx) > 1e-15 * (1.0 + _norm(X[todo, 1:])))
            todo = todo[moving & (budget[todo] > it + 1)]
        F, _ = _evaluate(table, X, C, jacobian=False)
        residual = np.abs(F) / _term_bound(table, X, C)
        ok = np.isfinite(X).all(axis=1) & (residual <= 1e-9).all(axis=1)
        doubtful = np.flatnonzero(cond >= _SINGULAR / 100)
        singular[doubtful] |= _condition(table, X[doubtful], C[doubtful]) >= _SINGULAR
    return X[:, 1:], ok, singular, spread


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
