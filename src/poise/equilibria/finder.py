"""Every steady state for a batch of parameter sets, by multistart Newton plus deflation.

1. Multistart: Newton from a grid of starts (up to 3 free states) or a scrambled Sobol
   point set (more states) over a box scaled per set from the model: a conserved total
   or finite domain limit where one bounds a state, else the balance of the model's own
   terms (`poise.model.scales`).
   Grid levels include exact zeros, where ecological and chemical models keep many of
   their steady states (an iterate started on an invariant face stays on it).
2. Deflation rounds, for every set with a root in the domain: Newton again with those
   roots deflated, from
   - a coarse grid (and the same grid stretched to the largest root coordinate, when
     roots lie far beyond the scale, which shows the scale was too small);
   - each such root moved both ways along its Jacobian's slowest direction (for 3
     states, along the directions inverse iteration reaches from each axis, which
     stay on coordinate faces): deflation pushes the iterate out along it;
   - where that direction's eigenvalue is nearly zero (a fold or a transcritical
     crossing is near, and the root's partner is about |eigenvalue| / curvature
     away), the root moved by that much and three times that much, with plain
     Newton: deflating a root so close to the one sought hides the latter.
   A set goes on to the next round only if its last round found a new root.
3. Roots are de-duplicated as they arrive (in the order of the starts), then polished,
   verified (residual small relative to the size of f's terms, or a negligible Newton
   correction), and filtered to the domain.

Every decision is made per set from that set's own results, so a set's steady states
never depend on which other sets share its batch (no "stop when no set found
anything"), and there is no randomness (the Sobol points have a fixed seed). The
numbers below were chosen by measuring completeness against closed-form steady states
and throughput (benchmarks/bench_throughput.py).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.stats import qmc

from poise.equilibria.linalg import solve_rows
from poise.equilibria.hub_starts import REDUCED_STARTS, HubRoots, hub_start_points
from poise.equilibria.newton import newton
from poise.equilibria.transient import settle
from poise.equilibria.zeros import inside_domain, snap_zeros
from poise.model.kernels import Kernels

RESIDUAL_TOLERANCE = 1e-8    # |f_i| relative to the sum of |terms| of f_i
CORRECTION_TOLERANCE = 1e-9  # or: the next Newton step, relative to |x| + scale
ZERO_TOLERANCE = 1e-9        # deflation: roots this close (in scales) to the domain count as inside
SAME_ROOT = 1e-6             # relative distance under which two roots are one
DEFLATION_PATIENCE = 6       # deflated runs: iterations without a 10 % smaller step
MOVE = 0.03                  # deflation starts: roots moved this far (step-size units)
NEAR_FOLD = 0.2              # slowness |J v| / max|J| below which roots get small moves
SMALL_MOVES = (1.0, 3.0)     # ... of these multiples of the slowness,
SMALL_MOVE_RANGE = (1e-4, 0.005)  # ... kept within this range
WIDEN = 2.0                  # a root coordinate this many scales out stretches the grid
INVERSE_ITERATIONS = 6       # for the slowest direction (converged)
INVERSE_ITERATIONS_PER_AXIS = 2  # for one direction per axis (few, so they stay apart)
SOBOL_SEED = 12345

# Start levels (fractions of the scale) by number of free states: one-sided for states
# that must be >= 0, two-sided for states that may be negative; coarser ones for the
# deflation rounds. Chosen by measurement (benchmarks/bench_throughput.py and models
# with closed-form steady states): fewer levels lose roots, more cost time for nothing.
LEVELS = {
    1: (0.0, 1e-4, 1e-3, 1e-2, 0.03, 0.1, 0.3, 0.6, 1.0, 2.0, 4.0, 10.0),
    2: (0.0, 0.2, 5.0),
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
# Numbers of free states whose deflation starts move each root along one slow
# direction per axis (their roots often sit on coordinate faces) instead of one.
EVERY_AXIS = {3}


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
    # a power of two of Sobol points, cut to `count` (scipy warns on other sizes)
    unit = qmc.Sobol(n, scramble=True, seed=SOBOL_SEED).random_base2(int(np.ceil(np.log2(count))))[:count]
    # Log-spaced magnitudes from 1e-3 to 3 times the scale; a quarter of coordinates at zero.
    magnitude = np.where(unit < 0.25, 0.0, 10.0 ** (-3.0 + 3.5 * (unit - 0.25) / 0.75))
    sign = np.where(lower_open & (np.arange(count)[:, None] % 2 == 1), -1.0, 1.0)
    return magnitude * sign


def find_steady_states(kernels: Kernels, params: np.ndarray, domain_low: np.ndarray, domain_high: np.ndarray,
                       starts: int = 0, deflation_rounds: int = 2,
                       max_iterations: int = 60, hubs: HubRoots | None = None) -> FoundStates:
    """Find every steady state in the domain for each parameter set.

    Parameters
    ----------
    kernels : compiled model.
    params : (B, m) varying parameter values.
    domain_low, domain_high : (N,) limits for every (full) state.
    starts : number of Sobol starts; 0 chooses a grid from the number of free states.
    deflation_rounds : at most this many deflation rounds per set.
    max_iterations : Newton iterations per start at most.
    hubs : steady states of hub sets (`poise.equilibria.hub_starts`): each set also
        starts from its nearest hub's, and needs fewer space-filling starts.

    Returns
    -------
    FoundStates
        Sorted by set, then by state values; a state is exactly zero where the model
        says so (`poise.equilibria.zeros`). A set where f and J cannot be
        evaluated at any start has ok False and a reason.
    """
    return _find(kernels, params, domain_low, domain_high, starts, deflation_rounds,
                 max_iterations, hubs)[0]


def newton_work(kernels: Kernels, params: np.ndarray, domain_low: np.ndarray, domain_high: np.ndarray, **settings) -> float:
    """Mean Newton iterations per parameter set that `find_steady_states` spends (over
    all starts and deflation rounds): a machine-independent measure of its work."""
    _, solve = _find(kernels, params, domain_low, domain_high, **settings)
    return solve.iterations / max(1, params.shape[0])


def _find(kernels, params, domain_low, domain_high, starts=0, deflation_rounds=2,
          max_iterations=60, hubs=None):
    """`find_steady_states` and the solver it used (which counts iterations)."""
    batch, n = params.shape[0], kernels.n
    scale = state_scales(kernels, params)                                       # (B, n)
    free_columns = np.asarray(kernels.free_columns, dtype=int)
    free_low, free_high = domain_low[free_columns], domain_high[free_columns]
    if n == 0:      # every state fixed by conserved totals: one candidate per set
        root_owner, root_x = np.arange(batch), np.zeros((batch, 0))
        evaluable = np.isfinite(kernels.full_states(root_x, params)).all(axis=1)
        return _found(kernels, params, scale, domain_low, domain_high, root_owner[evaluable],
                      root_x[evaluable], evaluable), _Solver(kernels, params, scale, max_iterations)
    solve = _Solver(kernels, params, scale, max_iterations)

    if hubs is not None and starts == 0:
        starts = REDUCED_STARTS * n                   # hub starts stand in for the rest
    grid = start_points(n, free_low < 0, starts)
    x0 = np.broadcast_to(grid, (batch,) + grid.shape) * scale[:, None, :]
    valid = np.ones(x0.shape[:2], bool)
    if hubs is not None:
        near, real = hub_start_points(hubs, params, scale)
        x0 = np.concatenate([x0, np.where(real[..., None], near, 0.0)], axis=1)
        valid = np.concatenate([valid, real], axis=1)
    if kernels.initial is not None:
        # the model's own initial state, and where the dynamics from it settle, are starts
        # too (the hubs' searches followed the dynamics already: their roots carry that)
        settled = (np.full((batch, n), np.nan) if hubs is not None
                   else settle(kernels, params, kernels.initial, free_low, free_high))
        x0 = np.concatenate([x0, np.broadcast_to(kernels.initial, (batch, 1, n)), settled[:, None, :]], axis=1)
        valid = np.concatenate([valid, np.ones((batch, 1), bool), np.isfinite(settled).all(axis=1)[:, None]], axis=1)
    everyone = np.arange(batch)
    x, converged, evaluable = solve.run(everyone, x0, valid)
    roots = _Roots(scale, free_low, free_high)
    roots.add(everyone, x, converged)

    coarse = start_points(n, free_low < 0, starts, coarse=True)
    searching = evaluable.copy()      # sets with no root yet try the coarse grid too
    for _ in range(deflation_rounds):
        sets = np.flatnonzero(searching)
        if sets.size == 0:
            break
        before = roots.count[sets]
        x0, valid, plain = _deflation_starts(kernels, params, coarse, roots, sets, scale, free_low, free_high)
        x, converged, _ = solve.run(sets, x0, valid, roots, plain)
        roots.add(sets, x, converged)
        searching = np.zeros(batch, bool)
        searching[sets] = roots.count[sets] > before

    root_owner, root_x = _verified(kernels, roots, params, scale)
    return _found(kernels, params, scale, domain_low, domain_high, root_owner, root_x, evaluable), solve


def _found(kernels, params, scale, domain_low, domain_high, root_owner, root_x, evaluable) -> FoundStates:
    """Full states, snapped to zero and filtered to the domain, sorted; set status."""
    root_owner, full = in_domain(kernels, params, scale, domain_low, domain_high, root_owner, root_x)
    reason = np.where(evaluable, "", "the model cannot be evaluated at this parameter set (overflow or division by zero)")
    return sorted_states(kernels, root_owner, full, evaluable, reason.astype(object))


def in_domain(kernels, params, scale, domain_low, domain_high, owner, x):
    """Full states of roots `x` (free states) of sets `owner`, with zero coordinates made
    exactly zero (`poise.equilibria.zeros`), keeping only those inside the domain.
    Returns (owner, full)."""
    _, full = snap_zeros(kernels, params, owner, x, scale)
    inside = inside_domain(full, domain_low, domain_high)
    return owner[inside], full[inside]


def sorted_states(kernels, owner, full, ok, reason) -> FoundStates:
    """FoundStates ordered by set, then by state values."""
    order = np.lexsort(tuple(full[:, j] for j in reversed(range(full.shape[1]))) + (owner,))
    free = full[:, np.asarray(kernels.free_columns, dtype=int)]
    return FoundStates(owner=owner[order], free=free[order], full=full[order], ok=ok, reason=reason)


class _Roots:
    """Distinct roots found so far for each set, in slots: x (B, W, n), used (B, W).

    Candidates are merged in a fixed order (by start), so which of two equal roots is
    kept depends on the set's own starts only. Unused slots are padding."""

    def __init__(self, scale, low, high):
        batch, n = scale.shape
        self.scale, self.low, self.high = scale, low, high
        self.x = np.zeros((batch, 0, n))
        self.used = np.zeros((batch, 0), bool)
        self.count = np.zeros(batch, np.int64)

    def add(self, sets, x, valid):
        """Merge candidates x (S, C, n) of `sets` (S,), where `valid` (S, C)."""
        if valid.sum(axis=1).max(initial=0) < 0.75 * valid.shape[1]:
            x, valid = _front(x, valid)                 # same result, fewer columns to visit
        grow = self.count[sets].max(initial=0) + x.shape[1] - self.x.shape[1]
        if grow > 0:
            self.x = np.concatenate([self.x, np.zeros((self.x.shape[0], grow, self.x.shape[2]))], axis=1)
            self.used = np.concatenate([self.used, np.zeros((self.used.shape[0], grow), bool)], axis=1)
        count = self.count[sets]
        n = x.shape[2]
        # Slot-major copies (W, S): the comparisons below then run along whole rows of sets.
        known = [np.ascontiguousarray(self.x[sets, :, j].T) for j in range(n)]
        used = np.ascontiguousarray(self.used[sets].T)
        candidates = [np.ascontiguousarray(x[:, :, j].T) for j in range(n)]  # (C, S) each
        valid = np.ascontiguousarray(valid.T)
        floor = SAME_ROOT * 1e-3 * self.scale[sets].T
        columns = np.arange(sets.size)
        for c in range(valid.shape[0]):
            top = count.max(initial=0)
            seen = used[:top].copy()
            for j in range(n):
                a, b = known[j][:top], candidates[j][c]
                seen &= np.abs(a - b) <= SAME_ROOT * (np.abs(a) + np.abs(b)) + floor[j]
            fresh = valid[c] & ~seen.any(axis=0)
            if fresh.any():
                where = columns[fresh]
                slot = count[where]
                for j in range(n):
                    known[j][slot, where] = candidates[j][c, where]
                used[slot, where] = True
                count += fresh
        self.x[sets] = np.stack(known, axis=-1).transpose(1, 0, 2)
        self.used[sets], self.count[sets] = used.T, count
        top = self.count.max(initial=0)
        self.x, self.used = self.x[:, :top], self.used[:, :top]

    @property
    def inside(self):
        """Roots in the domain (of the free states). Only these are deflated: roots
        outside add distortion to the deflated problem and are not worth finding again."""
        tolerance = ZERO_TOLERANCE * self.scale[:, None, :]
        return self.used & ((self.x >= self.low - tolerance) & (self.x <= self.high + tolerance)).all(axis=-1)

    def flat(self):
        """(owner, x) of every root."""
        owner, slot = np.nonzero(self.used)
        return owner, self.x[owner, slot]


class _Solver:
    """Newton from given starts of given sets."""

    def __init__(self, kernels, params, scale, max_iterations):
        self.kernels, self.params = kernels, params
        self.param_rows = np.ascontiguousarray(params.T)
        self.scale_rows = np.ascontiguousarray(scale.T)
        self.max_iterations = max_iterations
        self.iterations = 0  # Newton iterations over all starts so far

    def run(self, sets, x0, valid=None, roots=None, plain=None):
        """Starts x0 (S, C, n) for `sets` (S,), where `valid` (S, C) if given, deflating
        the in-domain `roots` if given. Returns final iterates (S, C, n), convergence
        (S, C), and per set of the batch whether f and J were finite at some start."""
        count, width, n = x0.shape
        slots = np.arange(count * width) if valid is None else np.flatnonzero(valid)
        owner = sets[slots // width]
        deflation = {}
        if roots is not None:
            known, inside = _front(roots.x, roots.inside)
            mask = inside[owner].T
            if plain is not None:
                mask = mask & ~plain.reshape(-1)[slots]
            deflation = dict(known=np.ascontiguousarray(known[owner].transpose(1, 2, 0)),
                             known_mask=np.ascontiguousarray(mask),
                             patience=DEFLATION_PATIENCE, box=(roots.low, roots.high))
        start = np.ascontiguousarray((x0.reshape(-1, n) if valid is None else x0.reshape(-1, n)[slots]).T)
        result = newton(self.kernels, start, self.param_rows[:, owner], self.scale_rows[:, owner],
                        self.max_iterations, **deflation)
        self.iterations += int(result.iterations.sum())
        x = np.zeros((count * width, n))
        x[slots] = result.x.T
        converged = np.zeros(count * width, bool)
        converged[slots] = result.converged
        evaluable = np.zeros(self.params.shape[0], bool)
        evaluable[owner[result.evaluable]] = True
        return x.reshape(count, width, n), converged.reshape(count, width), evaluable


def _deflation_starts(kernels, params, coarse, roots, sets, scale, low, high):
    """Starts for a deflation round (see the module notes): x0 (S, C, n), whether each
    is used (S, C), and whether it runs without deflation (S, C)."""
    s = scale[sets]
    count, n = s.shape
    known, used = roots.x[sets], roots.inside[sets]                         # (S, W, n)
    unit = np.abs(known) + s[:, None, :]
    axes, slowness = _slow_directions(kernels, params, known, used, sets, unit, every_axis=n in EVERY_AXIS)
    near_fold = used[:, :, None] & (slowness <= NEAR_FOLD)                  # (S, W, D)
    small = np.clip(slowness, *SMALL_MOVE_RANGE)[..., None]
    moves = [(MOVE, np.broadcast_to(used[:, :, None], near_fold.shape), False)]
    moves += [(factor * small, near_fold, True) for factor in SMALL_MOVES]
    steps, wanted, plain = [], [], []
    for size, where, undeflated in moves:
        for sign in (1.0, -1.0):
            steps.append(sign * size * axes)
            wanted.append(where)
            plain.append(np.full(where.shape, undeflated))
    moved = known[:, :, None, :] + np.concatenate(steps, axis=2) * unit[:, :, None, :]
    wanted = np.concatenate(wanted, axis=2) & ((moved >= low) & (moved <= high)).all(axis=-1)

    grid = np.broadcast_to(coarse, (count,) + coarse.shape) * s[:, None, :]
    reach = np.where(roots.used[sets][:, :, None], np.abs(known), 0.0).max(axis=(1, 2), initial=0.0)
    stretched = np.broadcast_to(coarse, grid.shape) * reach[:, None, None]
    wide = np.broadcast_to((reach > WIDEN * s.max(axis=1))[:, None], grid.shape[:2])

    x0 = np.concatenate([grid, stretched, moved.reshape(count, -1, n)], axis=1)
    valid = np.concatenate([np.ones(grid.shape[:2], bool), wide, wanted.reshape(count, -1)], axis=1)
    plain = np.concatenate([np.zeros((count, 2 * grid.shape[1]), bool),
                            np.concatenate(plain, axis=2).reshape(count, -1)], axis=1)
    return x0, valid, plain


def _slow_directions(kernels, params, known, used, sets, unit, every_axis=False):
    """Per known root, directions (S, W, D, n) towards J's eigenvalues nearest zero,
    by a few steps of inverse iteration on J in units of `unit`, largest component 1:
    D = 1 starting from (1, ..., 1), or D = n starting from each axis (inverse
    iteration keeps a vector on an invariant coordinate face on that face). Also
    (S, W, D) |J v| / |J|, small when the direction's eigenvalue is near zero."""
    owner, slot = np.nonzero(used)
    n = known.shape[2]
    firsts = np.eye(n) if every_axis else np.ones((1, n))
    out = np.zeros(known.shape[:2] + firsts.shape)
    slowness = np.full(out.shape[:3], np.inf)
    if owner.size == 0:
        return out, slowness
    x = np.ascontiguousarray(known[owner, slot].T)
    fj = kernels.rhs_and_jacobian_rows(x, np.ascontiguousarray(params[sets[owner]].T))
    u = unit[owner, slot].T
    jac = (fj[n:].reshape(n, n, -1) * u[None, :, :] / u[:, None, :]).reshape(n * n, -1)
    size = np.abs(jac).max(axis=0)
    with np.errstate(all="ignore"):
        for k, first in enumerate(firsts):
            v = np.repeat(first[:, None], owner.size, axis=1)
            for _ in range(INVERSE_ITERATIONS_PER_AXIS if every_axis else INVERSE_ITERATIONS):
                v = solve_rows(jac, v)
                v /= np.abs(v).max(axis=0)
            bad = ~np.isfinite(v).all(axis=0)
            v[:, bad] = 0.0
            image = (jac.reshape(n, n, -1) * v[None, :, :]).sum(axis=1)         # J v
            slowness[owner, slot, k] = np.where(bad, 0.0, np.abs(image).max(axis=0) / size)
            out[owner, slot, k] = v.T
    return out, slowness


def state_scales(kernels: Kernels, params: np.ndarray) -> np.ndarray:
    """A typical size per set and free state (`poise.model.scales`): a conserved total
    or finite domain limit where one bounds the state, else the balance of the model's
    own terms. Never taken from the parameters' values as such, so it follows the
    model's units."""
    if kernels.sizes is None:
        return np.ones((params.shape[0], kernels.n))
    size = np.abs(kernels.sizes(params))
    return np.where(np.isfinite(size) & (size > 0), size, 1.0)


def _verified(kernels: Kernels, roots: _Roots, params: np.ndarray, scale: np.ndarray):
    """Polish every root with two plain Newton steps; keep those whose residual is
    small relative to the size of f's terms or whose next Newton correction is
    negligible, and that still differ from the roots kept before them."""
    owner, x = roots.flat()
    n = x.shape[1]
    rows, p = np.ascontiguousarray(x.T), np.ascontiguousarray(params[owner].T)
    with np.errstate(all="ignore"):
        for polish in range(3):
            fj = kernels.rhs_and_jacobian_rows(rows, p)
            d = solve_rows(fj[n:], fj[:n])
            if polish < 2:
                rows = np.where(np.isfinite(d).all(axis=0), rows - d, rows)
        x = rows.T
        size = kernels.term_size(x, params[owner])
        small_residual = (np.abs(fj[:n].T) <= RESIDUAL_TOLERANCE * size + 1e-300).all(axis=1)
        small_correction = (np.abs(d.T) <= CORRECTION_TOLERANCE * (np.abs(x) + scale[owner])).all(axis=1)
    good = np.isfinite(x).all(axis=1) & (small_residual | small_correction)
    slot = np.nonzero(roots.used)[1]
    candidates = np.zeros(roots.x.shape)
    candidates[owner, slot] = x
    valid = np.zeros(roots.used.shape, bool)
    valid[owner, slot] = good
    polished = _Roots(roots.scale, roots.low, roots.high)
    polished.add(np.arange(scale.shape[0]), candidates, valid)
    return polished.flat()


def _front(x: np.ndarray, valid: np.ndarray):
    """Move the valid entries of each row to the front, keeping their order, and drop
    the columns no row needs: x (S, C, n), valid (S, C) -> (S, C', n), (S, C')."""
    order = np.argsort(~valid, axis=1, kind="stable")
    width = valid.sum(axis=1).max(initial=0)
    order = order[:, :width]
    return np.take_along_axis(x, order[:, :, None], axis=1), np.take_along_axis(valid, order, axis=1)
