"""Where trajectories start: a given initial state, small displacements of each unstable
steady state along its unstable directions, and samples from a box (basin stability).

Everything is built for all parameter sets at once; a set's starts depend only on that
set's data (and, for box samples, its identifier and the seed), never on which other
sets share the batch.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.stats import qmc

from poise.longrun.steady import ZERO_REAL_PART, SteadyStates

INITIAL, UNSTABLE_DIRECTION, BOX = 0, 1, 2
KIND_NAMES = ("initial", "unstable direction", "box")

DISPLACEMENT = 1e-3      # of each state's own size, along a unit eigenvector (max norm)
BOX_POINTS_SEED = 20130128  # fixed: the same unit points for every set, shifted per set


@dataclass(frozen=True, eq=False)
class Starts:
    """Starting points of trajectories (T of them) in the free states.

    Attributes
    ----------
    x : (T, n) array
    owner : (T,) int array, index of the parameter set.
    kind : (T,) int8 array, `INITIAL`, `UNSTABLE_DIRECTION` or `BOX` (names in `KIND_NAMES`).
    source : (T,) int array, the steady state displaced (row of `SteadyStates`), else -1.
    index : (T,) int array, which start of its kind and set: the sample number in the box,
        or 2 * (eigenvalue index) + (0 for +, 1 for -) for a displacement.
    """

    x: np.ndarray
    owner: np.ndarray
    kind: np.ndarray
    source: np.ndarray
    index: np.ndarray

    @property
    def count(self) -> int:
        return int(self.owner.size)


def _make(x, owner, kind, source=None, index=None) -> Starts:
    count = owner.size
    return Starts(x=np.asarray(x, dtype=float), owner=owner.astype(np.int64),
                  kind=np.full(count, kind, dtype=np.int8),
                  source=np.full(count, -1, np.int64) if source is None else source.astype(np.int64),
                  index=np.zeros(count, np.int64) if index is None else index.astype(np.int64))


def initial_starts(x0: np.ndarray, n_sets: int) -> Starts:
    """One start per set from a given initial state.

    Parameters
    ----------
    x0 : (n,) array (the same for every set) or (S, n) array (one per set), free states.
    n_sets : number of sets S.

    Returns
    -------
    Starts
        S starts of kind INITIAL.
    """
    x0 = np.asarray(x0, dtype=float)
    x = np.broadcast_to(x0, (n_sets, x0.shape[-1])).copy()
    return _make(x, np.arange(n_sets), INITIAL)


def unstable_starts(steady: SteadyStates, sizes: np.ndarray, displacement: float = DISPLACEMENT) -> Starts:
    """Starts next to each unstable steady state, along each of its unstable directions.

    Directions are the eigenvectors of the Jacobian written in units of each state's
    size (``S^-1 J S``, which has the same eigenvalues), so the displacement is the same
    fraction of every state's size whatever its units. A real unstable eigenvalue gives
    two starts (both sides: the two branches of a saddle's unstable manifold can lead to
    different attractors); a complex pair gives one (the motion spirals through the
    whole unstable plane anyway).

    Parameters
    ----------
    steady : the steady states (only the unstable ones are used).
    sizes : (S, n) each state's size per set (`state_sizes`); NaN (a state that is zero
        at every steady state and at the initial state) counts as 1 in model units.
    displacement : fraction of the state sizes.
    """
    rows = np.flatnonzero(steady.unstable)
    n = steady.free.shape[1]
    if rows.size == 0 or n == 0:
        return _make(np.zeros((0, n)), np.zeros(0, np.int64), UNSTABLE_DIRECTION,
                     np.zeros(0, np.int64), np.zeros(0, np.int64))
    scale = np.nan_to_num(sizes[steady.owner[rows]], nan=1.0)                  # (U, n)
    scaled = steady.jacobian[rows] * scale[:, None, :] / scale[:, :, None]
    values, vectors = np.linalg.eig(scaled)
    top = np.abs(values).max(axis=1, keepdims=True)
    grows = values.real > ZERO_REAL_PART * top
    real = np.abs(values.imag) <= ZERO_REAL_PART * top
    # one of each complex pair (positive imaginary part), both signs of a real one
    pick_plus = grows & (real | (values.imag > 0))
    pick_minus = grows & real
    which, eig = np.nonzero(np.concatenate([pick_plus, pick_minus], axis=1))
    sign = np.where(eig < n, 1.0, -1.0)
    eig = eig % n
    direction = vectors[which, :, eig].real                                      # (T, n)
    direction /= np.abs(direction).max(axis=1, keepdims=True)
    x = steady.free[rows[which]] + sign[:, None] * displacement * scale[which] * direction
    order = np.lexsort((eig + n * (sign < 0), rows[which]))
    return _make(x[order], steady.owner[rows[which]][order], UNSTABLE_DIRECTION,
                 rows[which][order], (2 * eig + (sign < 0))[order])


def box_starts(low: np.ndarray, high: np.ndarray, count: int, set_ids: np.ndarray, seed: int) -> Starts:
    """`count` starts per set, uniform in the box [low, high] (free states).

    The points are a randomised quasi-Monte Carlo sample: one scrambled Sobol point set
    shared by all sets, shifted modulo 1 by a per-set random vector derived from
    (seed, set identifier) (a Cranley-Patterson rotation). Each point is uniform in the
    box, samples of different sets are independent, and a set's sample does not depend
    on the batch it is computed in.

    Parameters
    ----------
    low, high : (n,) or (S, n) arrays, the box per set.
    count : starts per set (a power of two keeps the Sobol balance).
    set_ids : (S,) integer identifiers of the sets (e.g. sample_id).
    seed : int
    """
    set_ids = np.asarray(set_ids, dtype=np.int64)
    n_sets = set_ids.size
    low = np.broadcast_to(np.asarray(low, dtype=float), (n_sets, np.shape(low)[-1]))
    high = np.broadcast_to(np.asarray(high, dtype=float), low.shape)
    n = low.shape[1]
    sobol = qmc.Sobol(max(n, 1), scramble=True, seed=BOX_POINTS_SEED)
    unit = sobol.random_base2(int(np.ceil(np.log2(max(count, 1)))))[:count, :n]   # (count, n)
    shift = _uniform_hash(seed, set_ids[:, None], np.arange(n)[None, :])         # (S, n)
    u = np.mod(unit[None, :, :] + shift[:, None, :], 1.0)                          # (S, count, n)
    x = low[:, None, :] + (high - low)[:, None, :] * u
    owner = np.repeat(np.arange(n_sets), count)
    index = np.tile(np.arange(count), n_sets)
    return _make(x.reshape(n_sets * count, n), owner, BOX, None, index)


def inside(starts: Starts, kernels, params: np.ndarray, low: np.ndarray, high: np.ndarray) -> Starts:
    """Keep the starts whose states, conserved ones included, all lie in the domain.

    A displacement from a steady state on the domain's edge (a species at zero) is only
    meaningful into the domain; the other side is not a start.

    Parameters
    ----------
    starts : Starts
    kernels : poise.model.Kernels (its `full_states` gives the conserved states).
    params : (S, m) parameter sets.
    low, high : arrays over all the model's states, e.g. `CompiledModel.domain_low`/`domain_high`.

    Returns
    -------
    Starts
        The subset inside, in the same order.
    """
    if starts.count == 0:
        return starts
    full = kernels.full_states(starts.x, params[starts.owner])
    with np.errstate(invalid="ignore"):
        keep = np.all((full >= low) & (full <= high), axis=1)
    return Starts(x=starts.x[keep], owner=starts.owner[keep], kind=starts.kind[keep],
                  source=starts.source[keep], index=starts.index[keep])


def combine(*parts: Starts) -> Starts:
    """Concatenate starts.

    Parameters
    ----------
    *parts : Starts

    Returns
    -------
    Starts
        All of them, ordered by set, kind, source and index (an order that does not
        depend on the order of `parts`).
    """
    x = np.concatenate([p.x for p in parts])
    owner = np.concatenate([p.owner for p in parts])
    kind = np.concatenate([p.kind for p in parts])
    source = np.concatenate([p.source for p in parts])
    index = np.concatenate([p.index for p in parts])
    order = np.lexsort((index, source, kind, owner))
    return Starts(x=x[order], owner=owner[order], kind=kind[order], source=source[order], index=index[order])


def _uniform_hash(seed: int, ids: np.ndarray, dims: np.ndarray) -> np.ndarray:
    """Uniform numbers in [0, 1) from the splitmix64 finaliser (Steele, Lea & Flood 2014)
    of (seed, id, dimension): vectorised, and the same for an id in any batch."""
    with np.errstate(over="ignore"):
        key = (np.uint64(seed) * np.uint64(0x9E3779B97F4A7C15)
               + ids.astype(np.uint64) * np.uint64(0xBF58476D1CE4E5B9)
               + dims.astype(np.uint64) * np.uint64(0x94D049BB133111EB))
        z = key + np.uint64(0x9E3779B97F4A7C15)
        z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        z = z ^ (z >> np.uint64(31))
    return (z >> np.uint64(11)).astype(np.float64) * 2.0 ** -53
