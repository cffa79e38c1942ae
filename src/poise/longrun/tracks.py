"""The state of a batch of trajectories while they are integrated and watched.

`Context` holds what the trajectories of a set share (kernels, settings, the set's
steady states padded into a table, time scales, the map from free to all states);
`Tracks` holds one column per live trajectory, always with the trajectory axis last,
so that dropping finished trajectories is one `take`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from poise.longrun.outcomes import UNDETERMINED
from poise.longrun.settings import Settings
from poise.longrun.starts import UNSTABLE_DIRECTION, Starts
from poise.longrun.steady import SteadyStates
from poise.longrun.timescales import TimeScales

# A state that barely varies on an orbit is judged against a fraction of its size
# instead of its range: its returns differ only by integration error, about rtol times
# its size, which must stay NOISE_MARGIN times below the match tolerance.
NOISE_MARGIN = 10.0
FIRST_STEP = 1e-2            # first step: this fraction of 1 / (largest |eigenvalue| at the start)


@dataclass(frozen=True, eq=False)
class Context:
    """What the trajectories of each parameter set share (S sets)."""

    kernels: object
    settings: Settings
    params: np.ndarray              # (S, m)
    free_columns: np.ndarray        # (n,) position of each free state among all N states
    obs_matrix: np.ndarray | None   # (S, N, n): all states = obs_matrix @ free + obs_offset
    obs_offset: np.ndarray | None   # (S, N); None when every state is free (identity)
    steady_x: np.ndarray            # (S, R, n) each set's steady states, NaN padded
    steady_jacobian: np.ndarray     # (S, R, n, n)
    steady_row: np.ndarray          # (S, R) row in SteadyStates, -1 for padding
    steady_stable: np.ndarray       # (S, R) bool
    steady_unstable: np.ndarray     # (S, R) bool
    steady_spiral: np.ndarray       # (S, R) a stable focus's contraction per turn, else 0
    times: TimeScales

    @property
    def n(self) -> int:
        return int(self.free_columns.size)

    @property
    def n_all(self) -> int:
        return self.n if self.obs_matrix is None else int(self.obs_matrix.shape[1])

    def all_states(self, owner: np.ndarray, X: np.ndarray, F: np.ndarray | None = None):
        """All N states (and their rates) from the free ones, row layout (N, K)."""
        if self.obs_matrix is None:
            return X, F
        matrix = self.obs_matrix[owner]
        Y = np.einsum("kij,jk->ik", matrix, X) + self.obs_offset[owner].T
        dY = None if F is None else np.einsum("kij,jk->ik", matrix, F)
        return Y, dY


def make_context(kernels, settings: Settings, params: np.ndarray, steady: SteadyStates,
                 times: TimeScales) -> Context:
    """Pad each set's steady states into a table and find the affine map to all states."""
    n_sets, n = params.shape[0], kernels.n
    counts = np.bincount(steady.owner, minlength=n_sets) if steady.count else np.zeros(n_sets, np.int64)
    width = max(int(counts.max(initial=0)), 1)
    order = np.argsort(steady.owner, kind="stable")
    slot = np.arange(steady.count) - np.searchsorted(steady.owner[order], steady.owner[order])
    owner_sorted = steady.owner[order]
    steady_x = np.full((n_sets, width, n), np.nan)
    steady_jacobian = np.full((n_sets, width, n, n), np.nan)
    steady_row = np.full((n_sets, width), -1, dtype=np.int64)
    stable = np.zeros((n_sets, width), dtype=bool)
    unstable = np.zeros((n_sets, width), dtype=bool)
    steady_x[owner_sorted, slot] = steady.free[order]
    steady_jacobian[owner_sorted, slot] = steady.jacobian[order]
    steady_row[owner_sorted, slot] = order
    stable[owner_sorted, slot] = steady.stable[order]
    spiral = np.zeros((n_sets, width))
    spiral[owner_sorted, slot] = _contraction_per_turn(steady.eigenvalues[order], steady.stable[order])
    unstable[owner_sorted, slot] = steady.unstable[order]
    matrix, offset = _affine_map(kernels, params)
    return Context(kernels=kernels, settings=settings, params=params,
                   free_columns=np.asarray(kernels.free_columns, dtype=np.int64),
                   obs_matrix=matrix, obs_offset=offset, steady_x=steady_x,
                   steady_jacobian=steady_jacobian, steady_row=steady_row, steady_stable=stable,
                   steady_unstable=unstable, steady_spiral=spiral, times=times)


def _contraction_per_turn(eigenvalues: np.ndarray, stable: np.ndarray) -> np.ndarray:
    """(R,) for a stable focus, the factor by which its slowest complex pair shrinks a
    spiral in one turn, exp(2 pi Re / |Im|); 0 for nodes and unstable states."""
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        turn = np.where(np.abs(eigenvalues.imag) > 0,
                        np.exp(2 * np.pi * eigenvalues.real / np.abs(eigenvalues.imag)), 0.0)
    return np.where(stable, np.nan_to_num(turn, nan=0.0).max(axis=1, initial=0.0), 0.0)


def _affine_map(kernels, params):
    """States eliminated through conserved totals are affine in the free ones; read the map
    off the kernel at zero and at the unit vectors (exact for an affine map)."""
    n_sets, n = params.shape[0], kernels.n
    n_all = len(kernels.free_columns) if n_sets == 0 else kernels.full_states(np.zeros((1, n)), params[:1]).shape[1]
    if n_all == n and tuple(kernels.free_columns) == tuple(range(n)):
        return None, None
    offset = kernels.full_states(np.zeros((n_sets, n)), params)
    matrix = np.empty((n_sets, n_all, n))
    for j in range(n):   # a loop over states, not sets
        unit = np.zeros((n_sets, n))
        unit[:, j] = 1.0
        matrix[:, :, j] = kernels.full_states(unit, params) - offset
    return matrix, offset


class Tracks:
    """Per-trajectory arrays, trajectory axis last; `take` keeps a subset of trajectories."""

    def __init__(self, **arrays):
        self.__dict__.update(arrays)

    @property
    def size(self) -> int:
        return int(self.t.size)

    def take(self, index) -> "Tracks":
        return Tracks(**{name: value[..., index] for name, value in vars(self).items()})


def make_tracks(ctx: Context, starts: Starts, start_eigenvalues: np.ndarray) -> Tracks:
    """Fresh tracks at the starting points."""
    s = ctx.settings
    count, n, n_all, lags = starts.count, ctx.n, ctx.n_all, s.max_lag
    owner = starts.owner
    X = np.ascontiguousarray(starts.x.T, dtype=float)
    Y, _ = ctx.all_states(owner, X)
    tau = ctx.times.tau[owner]
    spectral = np.nan_to_num(np.abs(start_eigenvalues), nan=0.0).max(axis=1, initial=0.0)
    with np.errstate(divide="ignore"):
        h = np.where(spectral > 0, FIRST_STEP / spectral, 1e-3 * tau)
    h = np.minimum(h, tau)
    reference = _growth_reference(ctx, starts, Y)
    nan_k, nan_nk, nan_allk = np.full(count, np.nan), np.full((n, count), np.nan), np.full((n_all, count), np.nan)
    return Tracks(
        id=np.arange(count), owner=owner.copy(), P=np.ascontiguousarray(ctx.params[owner].T),
        # integration
        X=X, t=np.zeros(count), h=h, steps=np.zeros(count, np.int64),
        rejected=np.zeros(count, bool), moved=np.zeros(count, bool), refresh=np.zeros(count, bool),
        # the start of the latest step (where it was taken from), for interpolation
        X0=X.copy(), F0=np.zeros((n, count)), J0=np.zeros((n * n, count)), stiff=np.zeros(count, bool),
        Y0=Y.copy(), dY0=np.zeros((n_all, count)), t0=np.zeros(count),
        tau=tau, horizon=ctx.times.horizon[owner].copy(), next_check=ctx.times.first[owner].copy(),
        # sizes and extremes
        peak=np.abs(Y), reference=reference,
        win_low=Y.copy(), win_high=Y.copy(), run_low=Y.copy(), run_high=Y.copy(),
        sec_low=Y.copy(), sec_high=Y.copy(),
        # section and returns
        section=np.full(count, -1, np.int64), level=nan_k.copy(), normal=np.zeros((n, count)),
        crossings=np.zeros(count, np.int64), window_crossings=np.zeros(count, np.int64),
        ret_t=np.full((lags + 1, count), np.nan), ret_x=np.full((lags + 1, n, count), np.nan),
        streak=np.zeros(count, np.int64), lag=np.zeros(count, np.int64), last_period=nan_k.copy(),
        # attraction check
        checking=np.zeros(count, bool), kick=nan_k.copy(), first_distance=nan_k.copy(),
        returns_after_kick=np.zeros(count, np.int64), kicked_at=nan_k.copy(), first_return_at=nan_k.copy(),
        orbit_points=np.full((lags, n, count), np.nan), orbit_scale=nan_nk.copy(),
        # results
        done=np.zeros(count, bool), stored=np.zeros(count, bool), outcome=np.full(count, UNDETERMINED, np.int8),
        reason=np.zeros(count, np.int8), steady=np.full(count, -1, np.int64),
        period=nan_k.copy(), low=nan_allk.copy(), high=nan_allk.copy(), multiplier=nan_k.copy(),
    )


def _growth_reference(ctx: Context, starts: Starts, Y: np.ndarray) -> np.ndarray:
    """(N, K) each state's reference size for "grows without bound": its largest |value|
    at the set's steady states and at the set's starts other than the displaced ones
    (those are tiny by design); inf (no test) where that is 0, so a state that is zero
    there is never judged to grow (a blow-up still ends the trajectory as a failure)."""
    owner = starts.owner
    steady_all = np.abs(ctx.steady_x)                      # (S, R, n) free states only
    if ctx.obs_matrix is not None:
        steady_all = np.abs(np.einsum("sij,srj->sri", ctx.obs_matrix, np.nan_to_num(ctx.steady_x))
                            + ctx.obs_offset[:, None, :])
        steady_all = np.where(np.isnan(ctx.steady_x[..., :1]), 0.0, steady_all)
    size = np.nan_to_num(steady_all, nan=0.0).max(axis=1, initial=0.0)   # (S, N)
    plain = starts.kind != UNSTABLE_DIRECTION
    np.maximum.at(size, owner[plain], np.nan_to_num(np.abs(Y[:, plain].T), nan=0.0))
    reference = size[owner].T
    return np.where(reference > 0, reference, np.inf)


def range_scale(ctx: Context, tracks: Tracks, index=slice(None)) -> np.ndarray:
    """(n, k) the size against which free states are compared on an orbit: each state's
    range since the section was set, floored at a fraction of its size (see NOISE_MARGIN)."""
    s = ctx.settings
    columns = ctx.free_columns
    span = (tracks.sec_high[columns][:, index] - tracks.sec_low[columns][:, index])
    floor = min(1.0, NOISE_MARGIN * s.rtol / s.match_tolerance) * tracks.peak[columns][:, index]
    return np.maximum(span, floor)
