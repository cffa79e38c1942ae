"""Newton iterations on whole batches of (parameter set, start) pairs, with optional
deflation of roots already found.

Steps: the Newton step d solves J d = f and x − d is the next iterate. Its size is
max_i |d_i| / (|x_i| + s_i) with s the state's scale; steps larger than MAX_STEP are
shortened to that size, so that one wild step near a singular Jacobian cannot throw
an iterate far away. There is no line search on ‖f‖: across the models we measured
(ecological, gene-circuit, mass-action and polynomial ones) it lost more roots than
it saved, because the equations of a model are often scaled very differently, and
every start pays for it. A start converges when its step size falls below
STEP_TOLERANCE; it gives up when the step size has not shrunk by 10 % for `patience`
iterations (which also ends iterates running off to infinity: their step size stays
near MAX_STEP), or when f or J stops being finite.

Deflation (Farrell, Birkisson & Funke, SIAM J. Sci. Comput. 37 (2015) A2026) solves
G(x) = M(x) f(x) with M(x) = Π_r (1/‖(x − r)/s‖² + 1) for the known roots r, so Newton
can no longer converge to them. The Newton step for G is d / (1 + ∇log M · d)
(Sherman–Morrison on the rank-one update of J), so one linear solve serves both. A
deflated run has nowhere to go once every root is known; it then keeps being drawn
back to a known root (its plain Newton step lands much closer to one), and each such
iteration counts ATTRACTED_COST extra iterations towards its patience.

Layout and cost: arrays hold one row per state (or parameter) and one column per
start, so the generated kernels and the closed-form solves run on contiguous rows.
Starts run in tiles small enough to stay in the CPU cache; a tile iterates until
most of its starts have finished, then parks the rest, which later run together
with other tiles' stragglers. Every operation is elementwise over starts and each
start counts its own iterations, so a start's iterates never depend on which other
starts share its batch, tile or schedule.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from poise.equilibria.linalg import solve_rows
from poise.model.kernels import Kernels

STEP_TOLERANCE = 1e-9       # step size that counts as converged (then polished)
MAX_STEP = 4.0              # longer steps are shortened to this size
PATIENCE = 6                # iterations without a 10 % smaller step before giving up
TILE = 8192                 # starts per tile: a tile's rows stay in cache
ATTRACTION = 0.01           # deflated: the plain Newton step lands this much closer (squared)
ATTRACTED_COST = 3          # deflated: such an iteration counts as this many more without progress
OUTSIDE = 0.5               # deflated: how far (in scales) a start may leave the box
PARK = 4                    # a tile parks its stragglers below 1/PARK of its size


@dataclass
class NewtonResult:
    """Outcome of each start, in row layout.

    x : (n, K) final iterates; converged : (K,) the step became negligible;
    evaluable : (K,) f and J were finite at the start; iterations : (K,) used.
    """

    x: np.ndarray
    converged: np.ndarray
    evaluable: np.ndarray
    iterations: np.ndarray


def newton(kernels: Kernels, x0: np.ndarray, params: np.ndarray, scale: np.ndarray,
           max_iterations: int, known: np.ndarray | None = None,
           known_mask: np.ndarray | None = None, patience: int = PATIENCE,
           box: tuple[np.ndarray, np.ndarray] | None = None) -> NewtonResult:
    """Run Newton (deflated when `known` is given) from every column of `x0`.

    Parameters
    ----------
    kernels : compiled model; uses `rhs_and_jacobian_rows`.
    x0 : (n, K) starts; params : (m, K) the parameter set of each start.
    scale : (n, K) typical size of each state, for step sizes and deflation norms.
    max_iterations, patience : limits per start.
    known, known_mask : (R, n, K) roots to deflate and (R, K) which of them are real.
    box : (low, high), each (n,): for deflated runs, which look for roots inside it
        only: a start gives up once it is more than OUTSIDE scales out of the box.

    Returns
    -------
    NewtonResult
    """
    n, count = x0.shape
    result = NewtonResult(x=x0.copy(), converged=np.zeros(count, bool),
                          evaluable=np.zeros(count, bool), iterations=np.zeros(count, np.int64))
    if n == 0 or count == 0:
        result.converged[:] = result.evaluable[:] = True
        return result
    with np.errstate(all="ignore"):
        parked: list[_Tile] = []
        for low in range(0, count, TILE):
            part = slice(low, min(count, low + TILE))
            tile = _Tile.start(kernels, x0[:, part], params[:, part], scale[:, part], low,
                               None if known is None else known[..., part] / scale[:, part],
                               None if known is None else known_mask[:, part], _box_rows(box))
            result.evaluable[tile.where] = True
            parked += _iterate(kernels, tile, max_iterations, patience, result, TILE // PARK)
            if sum(t.where.size for t in parked) >= TILE:
                parked = _iterate(kernels, _Tile.merge(parked), max_iterations, patience, result, TILE // PARK)
        if parked:
            _iterate(kernels, _Tile.merge(parked), max_iterations, patience, result, 0)
    return result


def _iterate(kernels, t, max_iterations, patience, result, park_below):
    """Step a tile until fewer than `park_below` starts remain live; record finished
    starts in `result`. Returns the remaining starts as a list of at most one tile.

    Finished starts leave the tile only once a quarter of it has finished (a copy
    costs about as much as a step); until then they iterate on, unrecorded."""
    while t.where.size:
        live = np.count_nonzero(t.open)
        if 4 * live <= 3 * t.where.size:
            t.keep(np.flatnonzero(t.open))
            continue
        if live < park_below:
            return [t]
        done, ok = _step(kernels, t, patience)
        finished = t.open & (done | ~ok | (t.age >= max_iterations))
        if finished.any():
            index = np.flatnonzero(finished)
            columns = t.where[index]
            result.x[:, columns] = t.x[:, index]
            result.converged[columns] = done[index]
            result.iterations[columns] = t.age[index]
            t.open[index] = False
    return []


class _Tile:
    """Live starts: iterate x, its Newton step d, the step's size, progress counters,
    and (for deflation) the known roots in units of the scale and which slots are
    real. `where` maps columns back to the caller's starts; `open` marks the starts
    not yet finished; `box` holds (row, low, high) for bounded states (deflation)."""

    ARRAYS = ("x", "p", "s", "d", "size", "best", "waited", "age", "where", "open",
              "rho", "used")
    box = ()

    @classmethod
    def start(cls, kernels, x, p, s, offset, rho=None, used=None, box=()):
        fj = kernels.rhs_and_jacobian_rows(x, p)
        finite = np.isfinite(fj).all(axis=0)
        tile = cls()
        tile.x, tile.p, tile.s, tile.rho, tile.used, tile.box = x, p, s, rho, used, box
        if finite.all():
            keep = np.arange(finite.size)
        else:
            keep = np.flatnonzero(finite)
            fj = fj.take(keep, axis=1)
            for name in ("x", "p", "s", "rho", "used"):
                if getattr(tile, name) is not None:
                    setattr(tile, name, getattr(tile, name).take(keep, axis=-1))
        tile.d, tile.size, _ = _newton_step(fj, tile.x, tile.s, tile.deflation)
        tile.best = np.full(keep.size, np.inf)
        tile.waited = np.zeros(keep.size, np.int64)
        tile.age = np.zeros(keep.size, np.int64)
        tile.where = offset + keep
        tile.open = np.ones(keep.size, bool)
        return tile

    @property
    def deflation(self):
        return None if self.rho is None else (self.rho, self.used)

    def keep(self, index):
        for name in self.ARRAYS:
            value = getattr(self, name)
            if value is not None:
                setattr(self, name, value.take(index, axis=-1))

    @classmethod
    def merge(cls, tiles):
        if len(tiles) == 1:
            return tiles[0]
        whole = cls()
        whole.box = tiles[0].box
        for name in cls.ARRAYS:
            values = [getattr(t, name) for t in tiles]
            setattr(whole, name, None if values[0] is None else np.concatenate(values, axis=-1))
        return whole


def _step(kernels, t, patience):
    """One Newton iteration on a tile, in place. Returns (done, ok): the step taken was
    negligible; the start may go on."""
    t.age += 1
    size = t.size
    ok = size < np.inf                          # False for NaN too
    ok &= t.waited <= patience
    done = size <= STEP_TOLERANCE
    done &= ok
    factor = MAX_STEP / size
    np.minimum(factor, 1.0, out=factor)
    step = t.d * factor
    t.x = np.subtract(t.x, step, out=step)
    fj = kernels.rhs_and_jacobian_rows(t.x, t.p)
    t.d, t.size, attracted = _newton_step(fj, t.x, t.s, t.deflation)
    improved = t.size < 0.9 * t.best
    waited = t.waited + 1
    if attracted is not None:
        improved &= ~attracted
        waited += ATTRACTED_COST * attracted
    for i, low, high in t.box:
        outside = (t.x[i] < low - OUTSIDE * t.s[i]) | (t.x[i] > high + OUTSIDE * t.s[i])
        improved &= ~outside
        waited += (patience + 1) * outside      # gives up
    t.best = np.where(improved, t.size, t.best)
    waited *= ~improved
    t.waited = waited
    return done, ok


def _newton_step(fj, x, s, deflation):
    """The (deflated) Newton step d at x from f and J (rows of `fj`), and its size
    max_i |d_i| / (|x_i| + s_i)."""
    n = x.shape[0]
    d = solve_rows(fj[n:], fj[:n])                             # J d = f
    if n:
        # A singular J gives no step; where f is exactly zero the start already sits on
        # a steady state (e.g. on a continuum), so it has converged, not failed.
        stuck = ~np.isfinite(d[0])
        if stuck.any():
            d[:, stuck & (fj[:n] == 0).all(axis=0)] = 0.0
    attracted = None
    if deflation is not None:
        slope, attracted = _deflation_slope(x, s, d, deflation)
        d /= slope
    magnitude = np.abs(x)
    magnitude += s
    relative = np.abs(d)
    relative /= magnitude
    if n == 1:
        return d, relative[0], attracted
    size = np.maximum(relative[0], relative[1])
    for i in range(2, n):
        np.maximum(size, relative[i], out=size)
    return d, size, attracted


def _deflation_slope(x, s, d, deflation):
    """1 + ∇log M · d at x for M = Π_r (1/‖z − ρ_r‖² + 1), with z = x/s and ρ_r the
    known roots in the same units (unused slots add exactly zero); and whether the
    plain Newton step lands much closer to a known root than x is (ATTRACTION, in
    squared distance), which marks a deflated run with nowhere to go."""
    rho, used = deflation
    z = x / s
    e = d / s
    step2 = _dot(e, e)
    total = np.zeros(x.shape[1])
    attracted = np.zeros(x.shape[1], bool)
    for root, real in zip(rho, used):
        if not real.any():
            continue                                # padding only: adds exactly nothing
        diff = z - root
        dist2 = _dot(diff, diff)
        along = _dot(diff, e)
        # |z − e − ρ|² < ATTRACTION |z − ρ|², i.e. (1 − A) q − 2 along + |e|² < 0
        test = dist2 * (1.0 - ATTRACTION)
        test -= 2.0 * along
        test += step2
        near = test < 0.0
        # ∇ log(1/q + 1) = −2 (z − ρ) / (q (1 + q)) with q = |z − ρ|²
        dist2 += dist2 * dist2
        along /= dist2
        if real.all():
            attracted |= near
            total += along
        else:
            near &= real
            attracted |= near
            total += np.where(real, along, 0.0)
    total *= -2.0
    total += 1.0
    return total, attracted


def _box_rows(box):
    """(row, low, high) for the states with a finite bound."""
    if box is None:
        return ()
    low, high = box
    return tuple((i, low[i], high[i]) for i in range(len(low))
                 if np.isfinite(low[i]) or np.isfinite(high[i]))


def _dot(a, b):
    total = a[0] * b[0]
    for i in range(1, a.shape[0]):
        total += a[i] * b[i]
    return total
