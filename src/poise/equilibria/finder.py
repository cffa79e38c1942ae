"""Every steady state for a batch of parameter sets, by multistart Newton plus deflation.

1. Multistart: Newton from a grid of starts (few states) or a scrambled Sobol point
   set (many states) over a box scaled per set from the model: a conserved total or
   finite domain limit where one bounds a state, else the parameters' magnitude.
   Grid levels are spaced logarithmically and include exact zeros, where ecological
   and chemical models keep many of their steady states (an iterate started on an
   invariant axis stays on it).
2. Deflation rounds: for every set that found something, Newton again with the known
   roots deflated, from a coarse grid and from the midpoint of every pair of known
   roots (a saddle often lies between two stable states). A set goes on to the next
   round only if its last round found a new root.
3. Candidate roots are de-duplicated, polished, verified (residual relative to the
   size of f's terms, or a negligible Newton correction), and filtered to the domain.

Each decision is made per set from that set's own results, so a set's steady states
never depend on which other sets share its batch.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.stats import qmc

from poise.equilibria.linalg import solve_batch
from poise.equilibria.newton import newton
from poise.model.kernels import Kernels

RESIDUAL_TOLERANCE = 1e-8    # |f_i| relative to the sum of |terms| of f_i
CORRECTION_TOLERANCE = 1e-9  # or: the next Newton step, relative to |x| + scale
ZERO_TOLERANCE = 1e-9        # |x_i| relative to the state's scale counts as zero
SAME_ROOT = 1e-6             # relative distance under which two roots are one
DEFLATION_PATIENCE = 3       # deflated runs give up sooner: most have nowhere to go

# Start levels (fractions of the scale) by number of free states: one-sided for states
# that must be >= 0, two-sided for states that may be negative; coarser ones for the
# deflation rounds.
LEVELS = {
    1: (0.0, 1e-4, 1e-3, 1e-2, 0.03, 0.1, 0.3, 0.6, 1.0, 2.0, 4.0, 10.0),
    2: (0.0, 0.05, 0.5, 2.0),
    3: (0.0, 0.1, 1.0),
}
TWO_SIDED_LEVELS = {
    1: (-10.0, -2.0, -0.6, -0.1, -1e-2, 0.0, 1e-2, 0.1, 0.6, 2.0, 10.0),
    2: (-2.0, -0.5, 0.0, 0.5, 2.0),
    3: (-1.0, 0.0, 1.0),
}
COARSE_LEVELS = {
    1: (1e-3, 0.05, 0.4, 1.5, 5.0),
    2: (0.1, 1.0),
    3: (0.05, 1.0),
}
TWO_SIDED_COARSE_LEVELS = {
    1: (-5.0, -0.4, -0.02, 0.05, 1.5),
    2: (-0.5, 0.7),
    3: (-0.7, 0.8),
}
SOBOL_SEED = 12345
OFFSET = 0.05               # deflation starts: known roots moved by this much


@dataclass
class FoundStates:
    """Steady states of a batch, flattened over sets.

    owner : (R,) index of each steady state's parameter set in the batch, ascending.
    free : (R, n) values of the free (reduced) states.
    full : (R, N) values of every state.
    ok : (B,) whether each set could be analysed; reason : (B,) why not.
    """

    owner: np.ndarray
    free: np.ndarray
    full: np.ndarray
    ok: np.ndarray
    reason: np.ndarray


def start_points(n: int, lower_open: np.ndarray, starts: int = 0, coarse: bool = False) -> np.ndarray:
    """Starts in units of the scale, shape (S, n).

    `lower_open[i]` says whether state i may be negative (two-sided levels); `coarse`
    gives the smaller set used in deflation rounds. `starts` > 0 asks for that many
    scrambled Sobol points instead of the grid (the default for more than 3 states).
    """
    if n == 0:
        return np.zeros((1, 0))
    if starts == 0 and n in LEVELS:
        one_sided = COARSE_LEVELS if coarse else LEVELS
        two_sided = TWO_SIDED_COARSE_LEVELS if coarse else TWO_SIDED_LEVELS
        axes = [np.array(two_sided[n] if lower_open[i] else one_sided[n]) for i in range(n)]
        mesh = np.meshgrid(*axes, indexing="ij")
        return np.stack([m.ravel() for m in mesh], axis=1)
    count = starts or 64 * n
    if coarse:
        count = max(count // 4, 4)
    unit = qmc.Sobol(n, scramble=True, seed=SOBOL_SEED).random(count)
    # Log-spaced magnitudes from 1e-3 to 3 times the scale; a quarter of coordinates at zero.
    magnitude = np.where(unit < 0.25, 0.0, 10.0 ** (-3.0 + 3.5 * (unit - 0.25) / 0.75))
    sign = np.where(lower_open & (np.arange(count)[:, None] % 2 == 1), -1.0, 1.0)
    return magnitude * sign


def find_steady_states(kernels: Kernels, params: np.ndarray, magnitude: np.ndarray,
                       domain_low: np.ndarray, domain_high: np.ndarray,
                       starts: int = 0, deflation_rounds: int = 2,
                       max_iterations: int = 60) -> FoundStates:
    """Find every steady state in the domain for each parameter set.

    Parameters
    ----------
    kernels : compiled model.
    params : (B, m) varying parameter values.
    magnitude : (B,) a typical size of the parameters, used where the model gives no
        bound on a state.
    domain_low, domain_high : (N,) limits for every (full) state.
    starts : number of Sobol starts; 0 chooses a grid from the number of free states.
    deflation_rounds : at most this many deflation rounds per set.
    max_iterations : Newton iterations per start at most.

    Returns
    -------
    FoundStates
        Sorted by set, then by state values; states within ZERO_TOLERANCE (relative
        to the set's scale) of zero are exactly zero. A set where f and J cannot be
        evaluated at any start has ok False and a reason.
    """
    batch, n = params.shape[0], kernels.n
    scale = _scales(kernels, params, magnitude)                            # (B, n)
    free_columns = np.asarray(kernels.free_columns, dtype=int)
    free_low, free_high = domain_low[free_columns], domain_high[free_columns]
    solve = _Solver(kernels, params, scale, max_iterations)

    grid = start_points(n, free_low < 0, starts)
    everyone = np.arange(batch)
    x, converged, evaluable = solve.run(everyone, np.broadcast_to(grid, (batch,) + grid.shape) * scale[:, None, :])
    roots = _Roots(batch, n, SAME_ROOT * 1e-3 * scale)
    roots.add(everyone, x, converged)

    coarse = start_points(n, free_low < 0, starts, coarse=True)
    searching = roots.count > 0
    for _ in range(deflation_rounds if n else 0):
        sets = np.flatnonzero(searching)
        if sets.size == 0:
            break
        before = roots.count.copy()
        x0, valid = _deflation_starts(coarse, roots, sets, scale, free_low, free_high)
        x, converged, _ = solve.run(sets, x0, valid, roots)
        roots.add(sets, x, converged)
        searching = roots.count > before

    root_owner, root_x = _verified(kernels, roots, params, scale)
    full = kernels.full_states(root_x, params[root_owner])
    full_scale = _full_scale(full, root_owner, scale)
    full = np.where(np.abs(full) <= ZERO_TOLERANCE * full_scale, 0.0, full)
    inside = ((full >= domain_low - ZERO_TOLERANCE * full_scale)
              & (full <= domain_high + ZERO_TOLERANCE * full_scale)).all(axis=1)
    root_owner, full = root_owner[inside], full[inside]
    root_x = full[:, free_columns]

    order = np.lexsort(tuple(full[:, j] for j in reversed(range(full.shape[1]))) + (root_owner,))
    reason = np.where(evaluable, "", "the model cannot be evaluated at this parameter set (overflow or division by zero)")
    return FoundStates(owner=root_owner[order], free=root_x[order], full=full[order],
                       ok=evaluable, reason=reason.astype(object))


class _Roots:
    """Distinct roots found so far for each set, in slots: x (B, W, n), used (B, W).

    Candidates are merged in a fixed order (by start), so which of two equal roots is
    kept depends on the set's own starts only."""

    def __init__(self, batch, n, floor):
        self.x = np.zeros((batch, 0, n))
        self.used = np.zeros((batch, 0), bool)
        self.count = np.zeros(batch, np.int64)
        self.floor = floor                      # (B, n) absolute part of the tolerance

    def add(self, sets, x, valid):
        """Merge candidates x (S, C, n) of `sets` (S,), where `valid` (S, C)."""
        width = self.x.shape[1]
        needed = self.count[sets].max(initial=0) + x.shape[1]
        if needed > width:
            grow = needed - width
            self.x = np.concatenate([self.x, np.zeros((self.x.shape[0], grow, self.x.shape[2]))], axis=1)
            self.used = np.concatenate([self.used, np.zeros((self.used.shape[0], grow), bool)], axis=1)
        known, used, count = self.x[sets], self.used[sets], self.count[sets]
        floor = self.floor[sets]
        rows = np.arange(sets.size)
        for c in range(x.shape[1]):
            candidate = x[:, c]
            top = count.max(initial=0)
            seen = _same(known[:, :top], used[:, :top], candidate, floor).any(axis=1)
            fresh = valid[:, c] & ~seen
            if fresh.any():
                where = rows[fresh]
                known[where, count[where]] = candidate[where]
                used[where, count[where]] = True
                count += fresh
        self.x[sets], self.used[sets], self.count[sets] = known, used, count
        top = self.count.max(initial=0)
        self.x, self.used = self.x[:, :top], self.used[:, :top]

    def flat(self):
        """(owner, x) of every root."""
        owner, slot = np.nonzero(self.used)
        return owner, self.x[owner, slot]


class _Solver:
    """Newton from given starts of given sets."""

    def __init__(self, kernels, params, scale, max_iterations):
        self.kernels, self.params, self.scale = kernels, params, scale
        self.param_rows = np.ascontiguousarray(params.T)
        self.scale_rows = np.ascontiguousarray(scale.T)
        self.max_iterations = max_iterations

    def run(self, sets, x0, valid=None, roots=None):
        """Starts x0 (S, C, n) for `sets` (S,), where `valid` (S, C) if given,
        deflating `roots` if given. Returns final iterates (S, C, n), convergence
        (S, C), and per set of the batch whether f and J were finite at any start."""
        count, width, n = x0.shape
        slots = np.arange(count * width) if valid is None else np.flatnonzero(valid)
        owner = sets[slots // width]
        deflation = {}
        if roots is not None:
            deflation = dict(known=np.ascontiguousarray(roots.x[owner].transpose(1, 2, 0)),
                             known_mask=np.ascontiguousarray(roots.used[owner].T),
                             patience=DEFLATION_PATIENCE)
        start = np.ascontiguousarray(x0.reshape(-1, n)[slots].T)
        result = newton(self.kernels, start, self.param_rows[:, owner], self.scale_rows[:, owner],
                        self.max_iterations, **deflation)
        x = np.zeros((count * width, n))
        x[slots] = result.x.T
        converged = np.zeros(count * width, bool)
        converged[slots] = result.converged
        evaluable = np.zeros(self.params.shape[0], bool)
        evaluable[owner[result.evaluable]] = True
        return x.reshape(count, width, n), converged.reshape(count, width), evaluable


def _deflation_starts(coarse, roots, sets, scale, low, high):
    """Starts for a deflation round, (S, C, n) with validity (S, C): the coarse grid,
    and each known root moved by OFFSET (relative to |x| + scale) up and down each
    axis, where that stays in the domain."""
    s = scale[sets]
    n = s.shape[1]
    grid = np.broadcast_to(coarse, (sets.size,) + coarse.shape) * s[:, None, :]
    known, used = roots.x[sets], roots.used[sets]                           # (S, W, n)
    step = np.concatenate([np.eye(n), -np.eye(n)]) * OFFSET                 # (2n, n)
    moved = known[:, :, None, :] + step * (np.abs(known[:, :, None, :]) + s[:, None, None, :])
    inside = ((moved >= low) & (moved <= high)).all(axis=-1) & used[:, :, None]
    x0 = np.concatenate([grid, moved.reshape(sets.size, -1, n)], axis=1)
    valid = np.concatenate([np.ones(grid.shape[:2], bool), inside.reshape(sets.size, -1)], axis=1)
    return x0, valid


def _scales(kernels: Kernels, params: np.ndarray, magnitude: np.ndarray) -> np.ndarray:
    bound = np.abs(kernels.scales(params))
    fallback = np.maximum(1.0, magnitude)[:, None]
    return np.where(np.isfinite(bound) & (bound > 0), bound, fallback)


def _full_scale(full, owner, scale):
    """Scale for every state: the largest scale of its set's free states (an eliminated
    state is a combination of them and a total)."""
    return np.broadcast_to(scale[owner].max(axis=1, initial=1.0)[:, None], full.shape)


def _verified(kernels: Kernels, roots: _Roots, params: np.ndarray, scale: np.ndarray):
    """Polish every root with two plain Newton steps; keep those whose residual is
    small relative to the size of f's terms or whose next Newton correction is
    negligible, and that still differ from the roots kept before them."""
    owner, x = roots.flat()
    p = params[owner]
    for _ in range(2):
        f, jac = kernels.rhs_and_jacobian(x, p)
        d, ok = solve_batch(jac, f)
        x = np.where(ok[:, None], x - d, x)
    f, jac = kernels.rhs_and_jacobian(x, p)
    d, ok = solve_batch(jac, f)
    size = kernels.term_size(x, p)
    with np.errstate(invalid="ignore"):
        small_residual = (np.abs(f) <= RESIDUAL_TOLERANCE * size + 1e-300).all(axis=1)
        small_correction = ok & (np.abs(d) <= CORRECTION_TOLERANCE * (np.abs(x) + scale[owner])).all(axis=1)
    good = np.isfinite(x).all(axis=1) & (small_residual | small_correction)
    polished = _Roots(roots.x.shape[0], x.shape[1], roots.floor)
    slot = np.nonzero(roots.used)[1]
    candidates = np.zeros(roots.x.shape)
    candidates[owner, slot] = x
    valid = np.zeros(roots.used.shape, bool)
    valid[owner, slot] = good
    polished.add(np.arange(roots.x.shape[0]), candidates, valid)
    return polished.flat()


def _same(known: np.ndarray, used: np.ndarray, candidate: np.ndarray, floor: np.ndarray) -> np.ndarray:
    """Which known roots (S, W, n), where `used` (S, W), coincide with a candidate
    (S, n): every coordinate within SAME_ROOT of their size, plus an absolute floor
    (S, n) for coordinates at or near zero."""
    same = used.copy()
    for j in range(candidate.shape[1]):
        a, b = known[:, :, j], candidate[:, j, None]
        same &= np.abs(a - b) <= SAME_ROOT * (np.abs(a) + np.abs(b)) + floor[:, j, None]
    return same
