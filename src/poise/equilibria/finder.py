"""Every steady state for a batch of parameter sets, by multistart Newton plus deflation.

Starts form a grid (few states) or a scrambled Sobol point set (many states) over a
box scaled per set from the model: a conserved total or finite domain limit where one
bounds a state, else the parameters' magnitude. Grid levels are spaced
logarithmically and include exact zeros, where ecological and chemical models keep
many of their steady states. Candidate roots are verified by their residual relative
to the size of f's terms, polished, de-duplicated and filtered to the domain.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.stats import qmc

from poise.equilibria.linalg import solve_batch
from poise.equilibria.newton import newton
from poise.model.kernels import Kernels

RESIDUAL_TOLERANCE = 1e-8    # |f_i| relative to the sum of |terms| of f_i
ZERO_TOLERANCE = 1e-9        # |x_i| relative to the state's scale counts as zero
SAME_ROOT = 1e-6             # relative distance under which two roots are one

# One-sided start levels (fractions of the scale) by number of free states; coarser
# ones (without zero, where multistart already lands exactly) for deflation rounds.
LEVELS = {
    1: (0.0, 1e-6, 1e-4, 1e-3, 1e-2, 0.03, 0.1, 0.3, 0.6, 1.0, 2.0, 4.0, 10.0),
    2: (0.0, 1e-4, 1e-2, 0.1, 0.35, 1.0, 3.0),
    3: (0.0, 1e-2, 0.1, 0.5, 2.0),
}
COARSE_LEVELS = {
    1: (1e-3, 0.05, 0.4, 1.5, 5.0),
    2: (0.02, 0.4, 2.0),
    3: (0.05, 1.0),
}


@dataclass
class FoundStates:
    """Steady states of a batch, flattened over sets.

    owner : (R,) index of each steady state's parameter set in the batch.
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

    `lower_open[i]` says whether state i may be negative, which mirrors its levels;
    `coarse` keeps every other level (or a quarter of the points), for deflation rounds.
    """
    if n == 0:
        return np.zeros((1, 0))
    if starts == 0 and n in LEVELS:
        axes = []
        for i in range(n):
            levels = np.array(COARSE_LEVELS[n] if coarse else LEVELS[n])
            if lower_open[i]:
                levels = np.unique(np.concatenate([-levels[levels > 0][::2], levels[::2]]))
            axes.append(levels)
        mesh = np.meshgrid(*axes, indexing="ij")
        return np.stack([m.ravel() for m in mesh], axis=1)
    count = starts or 64 * n
    if coarse:
        count = max(count // 4, 4)
    unit = qmc.Sobol(n, scramble=True, seed=12345).random(count)
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
    """
    batch, n = params.shape[0], kernels.n
    scale = _scales(kernels, params, magnitude)                            # (B, n)
    free_columns = np.asarray(kernels.free_columns, dtype=int)
    lower_open = domain_low[free_columns] < 0
    unit_starts = start_points(n, lower_open, starts)                      # (S, n)
    count = unit_starts.shape[0]

    owner = np.repeat(np.arange(batch), count)
    x0 = unit_starts[None, :, :] * scale[:, None, :]
    x0 = x0.reshape(-1, n)
    p = params[owner]
    s = scale[owner]

    result = newton(kernels, x0, p, s, max_iterations)
    evaluable = np.zeros(batch, bool)
    np.logical_or.at(evaluable, owner, result.evaluable)
    roots = _verified(kernels, result.x[result.converged], owner[result.converged], params, scale)

    # Deflation rounds, each only for the sets whose previous round found something new,
    # so that a set's result never depends on the other sets in its batch.
    coarse = start_points(n, lower_open, starts, coarse=True)
    searching = np.bincount(roots[0], minlength=batch) > 0
    for _ in range(deflation_rounds):
        sets = np.flatnonzero(searching)
        if sets.size == 0:
            break
        known, mask = _pad(roots, batch, n)
        d_owner = np.repeat(sets, coarse.shape[0])
        d_x0 = (coarse[None, :, :] * scale[sets][:, None, :]).reshape(-1, n)
        deflated = newton(kernels, d_x0, params[d_owner], scale[d_owner], max_iterations,
                          known=known[d_owner], known_mask=mask[d_owner])
        fresh = _verified(kernels, deflated.x[deflated.converged], d_owner[deflated.converged], params, scale)
        before = np.bincount(roots[0], minlength=batch)
        roots = _unique(np.concatenate([roots[0], fresh[0]]), np.concatenate([roots[1], fresh[1]]), scale)
        searching = np.bincount(roots[0], minlength=batch) > before

    root_owner, root_x = roots
    full = kernels.full_states(root_x, params[root_owner])
    full_scale = _full_scale(kernels, full, root_owner, scale)
    full = np.where(np.abs(full) <= ZERO_TOLERANCE * full_scale, 0.0, full)
    inside = ((full >= domain_low - ZERO_TOLERANCE * full_scale)
              & (full <= domain_high + ZERO_TOLERANCE * full_scale)).all(axis=1)
    root_owner, root_x, full = root_owner[inside], root_x[inside], full[inside]
    root_x = full[:, free_columns]

    order = np.lexsort(tuple(full[:, j] for j in reversed(range(full.shape[1]))) + (root_owner,))
    reason = np.where(evaluable, "", "the model cannot be evaluated at this parameter set (overflow or division by zero)")
    return FoundStates(owner=root_owner[order], free=root_x[order], full=full[order],
                       ok=evaluable, reason=reason.astype(object))


def _scales(kernels: Kernels, params: np.ndarray, magnitude: np.ndarray) -> np.ndarray:
    bound = np.abs(kernels.scales(params))
    fallback = np.maximum(1.0, magnitude)[:, None]
    return np.where(np.isfinite(bound) & (bound > 0), bound, fallback)


def _full_scale(kernels, full, owner, scale):
    """Scale for every state: the largest scale of its set's free states (an eliminated
    state is a combination of them and a total)."""
    return np.broadcast_to(scale[owner].max(axis=1, initial=1.0)[:, None], full.shape)


def _verified(kernels: Kernels, x: np.ndarray, owner: np.ndarray, params: np.ndarray, scale: np.ndarray):
    """Polish with two plain Newton steps, keep roots whose residual is small relative to
    the size of f's terms, then de-duplicate."""
    p = params[owner]
    for _ in range(2):
        f = kernels.rhs(x, p)
        d, ok = solve_batch(kernels.jacobian(x, p), f)
        x = np.where(ok[:, None], x - d, x)
    f = kernels.rhs(x, p)
    size = kernels.term_size(x, p)
    good = np.isfinite(x).all(axis=1) & (np.abs(f) <= RESIDUAL_TOLERANCE * size + 1e-300).all(axis=1)
    return _unique(owner[good], x[good], scale)


def _unique(owner: np.ndarray, x: np.ndarray, scale: np.ndarray):
    """Drop roots that repeat an earlier root of the same set.

    A cheap pass over sorted neighbours removes most repeats (many starts reach the
    same root); an all-pairs pass within each set then settles the rest.
    """
    if owner.size == 0:
        return owner, x
    order = np.lexsort(tuple(x[:, j] for j in reversed(range(x.shape[1]))) + (owner,))
    owner, x = owner[order], x[order]
    keep = np.ones(owner.size, bool)
    for lag in range(1, min(4, owner.size)):
        keep[lag:] &= ~((owner[lag:] == owner[:-lag]) & _same(x[lag:], x[:-lag], scale[owner[lag:]]) & keep[:-lag])
    owner, x = owner[keep], x[keep]
    batch = scale.shape[0]
    padded, mask = _pad((owner, x), batch, x.shape[1])
    s = scale[:, None, None, :]
    same = _same(padded[:, :, None, :], padded[:, None, :, :], s) & mask[:, :, None] & mask[:, None, :]
    earlier = np.tril(np.ones(same.shape[1:], bool), k=-1)
    repeat = (same & earlier).any(axis=2)
    slot_keep = mask & ~repeat
    return np.nonzero(slot_keep)[0], padded[slot_keep]


def _same(a: np.ndarray, b: np.ndarray, scale: np.ndarray) -> np.ndarray:
    """Whether two roots coincide, coordinate by coordinate, relative to their size."""
    return (np.abs(a - b) <= SAME_ROOT * (np.abs(a) + np.abs(b) + 1e-3 * scale)).all(axis=-1)


def _pad(roots, batch: int, n: int):
    owner, x = roots
    per_set = np.bincount(owner, minlength=batch)
    width = per_set.max(initial=0)
    known = np.zeros((batch, width, n))
    mask = np.zeros((batch, width), bool)
    if owner.size:
        slot = np.arange(owner.size) - np.repeat(np.cumsum(per_set) - per_set, per_set)
        known[owner, slot] = x
        mask[owner, slot] = True
    return known, mask
