"""The loop over time steps: integrate every live trajectory, watch it, drop the decided.

There is one Python loop, over time steps; each pass evaluates f and J for all live
trajectories at once, lets `monitor.observe` decide what it can, and takes one
Rosenbrock step per trajectory with its own step size. Decided trajectories leave the
batch, so the work follows the undecided ones.
"""

from __future__ import annotations

import numpy as np

from poise.longrun import rosenbrock
from poise.longrun.monitor import finish, observe
from poise.longrun.outcomes import CYCLES, FAILED, NO_TIME_SCALE, UNDETERMINED, Trajectories, number_cycles
from poise.longrun.settings import Settings
from poise.longrun.starts import Starts
from poise.longrun.steady import SteadyStates, as_parameter_array
from poise.longrun.timescales import time_scales
from poise.longrun.tracks import Context, Tracks, make_context, make_tracks

TINY_STEP = 1e-13   # a step below this fraction of max(t, tau) has vanished
# A step with h * |J| above this (J in units of each state's size) is stiff: f at its
# ends carries the fast modes' tiny errors times their large rates, so the slopes are
# not used to interpolate inside it (the interpolant's error grows with h |J| times the
# local error; at 5 it stays about that size).
STIFF_STEP = 5.0
# finished trajectories stay in the batch (not stepped) until they are this share of it,
# or until at most SMALL_BATCH are left
COMPACT, SMALL_BATCH = 0.25, 64


def simulate(kernels, params: np.ndarray, steady: SteadyStates, starts: Starts,
             settings: Settings = Settings()) -> Trajectories:
    """Integrate every start and classify where it goes.

    Parameters
    ----------
    kernels : poise.model.Kernels
        The model's compiled kernels (free states).
    params : (S, m) array
        Values of the kernels' varying parameters, one row per set.
    steady : SteadyStates
        The sets' steady states (`poise.longrun.steady_states`).
    starts : Starts
        Starting points (`initial_starts`, `unstable_starts`, `box_starts`, `combine`).
    settings : Settings, optional

    Returns
    -------
    Trajectories
        One row per start, in the order of `starts`.
    """
    params = as_parameter_array(params, kernels.m)
    start_eigenvalues = _start_eigenvalues(kernels, params, starts)
    times = time_scales(params.shape[0], steady.owner, steady.eigenvalues, starts.owner,
                        start_eigenvalues, settings.horizon_factor)
    ctx = make_context(kernels, settings, params, steady, times)
    tracks = make_tracks(ctx, starts, start_eigenvalues)
    results = _Results(starts, ctx)
    finish(tracks, np.flatnonzero(~np.isfinite(tracks.tau)), UNDETERMINED, NO_TIME_SCALE)
    _integrate(ctx, tracks, results)
    return results.table()


def _start_eigenvalues(kernels, params, starts: Starts) -> np.ndarray:
    n = kernels.n
    if starts.count == 0:
        return np.zeros((0, n), dtype=complex)
    jacobian = kernels.jacobian(starts.x, params[starts.owner])
    values = np.full((starts.count, n), np.nan, dtype=complex)
    finite = np.isfinite(jacobian).all(axis=(1, 2))
    if finite.any():
        values[finite] = np.linalg.eigvals(jacobian[finite])
    return values


def _integrate(ctx: Context, tr: Tracks, results: "_Results") -> None:
    kernels, s = ctx.kernels, ctx.settings
    columns = ctx.free_columns
    while tr.size:
        F, J, Y, dY = _evaluate(ctx, tr)
        observe(ctx, tr, Y, dY, F)
        restarted = np.flatnonzero(tr.refresh)
        if restarted.size:        # kicked trajectories start again from a new point
            F[:, restarted], J[:, restarted], Y[:, restarted], dY[:, restarted] = _evaluate(ctx, tr, restarted)
            tr.refresh[restarted] = False
        broken = ~tr.done & ~(np.isfinite(F).all(axis=0) & np.isfinite(J).all(axis=0))
        broken |= ~tr.done & (tr.h < TINY_STEP * np.maximum(tr.t, tr.tau))
        finish(tr, np.flatnonzero(broken), UNDETERMINED, FAILED)
        new = tr.done & ~tr.stored
        if new.any():
            results.store(tr, new)
            tr.stored |= new
        finished = int(tr.stored.sum())
        if finished and (finished >= COMPACT * tr.size or tr.size - finished <= SMALL_BATCH):
            # dropping finished trajectories copies every array: only now and then
            keep = np.flatnonzero(~tr.stored)
            tr = tr.take(keep)
            F, J, Y, dY = F[:, keep], J[:, keep], Y[:, keep], dY[:, keep]
            if tr.size == 0:
                break
        tr.X0, tr.F0, tr.J0, tr.Y0, tr.dY0, tr.t0 = tr.X.copy(), F, J, Y, dY, tr.t.copy()
        size = tr.peak[columns]
        x_new, error, stiffness = rosenbrock.step(kernels, tr.X, tr.P, F, J, tr.h, ~tr.done,
                                                  s.atol_fraction * size, s.rtol, size)
        tr.stiff = stiffness > STIFF_STEP
        accept = error <= 1.0
        tr.X = np.where(accept, x_new, tr.X)
        tr.t = np.where(accept, tr.t + tr.h, tr.t)
        tr.h = np.minimum(rosenbrock.next_step_size(tr.h, error, tr.rejected), tr.tau)
        tr.rejected = ~accept
        tr.moved = accept
        tr.steps += 1


def _evaluate(ctx: Context, tr: Tracks, rows=None):
    """f, J (row layout) and all states with their rates, at the current points."""
    X, P, owner = (tr.X, tr.P, tr.owner) if rows is None else (tr.X[:, rows], tr.P[:, rows], tr.owner[rows])
    both = ctx.kernels.rhs_and_jacobian_rows(np.ascontiguousarray(X), np.ascontiguousarray(P))
    F, J = both[:ctx.n], both[ctx.n:]
    Y, dY = ctx.all_states(owner, X, F)
    return F, J, np.array(Y, copy=True), np.array(dY, copy=True)


class _Results:
    """Result columns for all trajectories, filled as they finish."""

    def __init__(self, starts: Starts, ctx: Context):
        count, n, n_all = starts.count, ctx.n, ctx.n_all
        self.starts = starts
        self.outcome = np.full(count, UNDETERMINED, np.int8)
        self.reason = np.zeros(count, np.int8)
        self.steady = np.full(count, -1, np.int64)
        self.period = np.full(count, np.nan)
        self.low = np.full((count, n_all), np.nan)
        self.high = np.full((count, n_all), np.nan)
        self.multiplier = np.full(count, np.nan)
        self.final = np.full((count, n), np.nan)
        self.time = np.full(count, np.nan)
        self.steps = np.zeros(count, np.int64)

    def store(self, tr: Tracks, rows: np.ndarray) -> None:
        ids = tr.id[rows]
        for name in ("outcome", "reason", "steady", "period", "multiplier", "steps"):
            getattr(self, name)[ids] = getattr(tr, name)[rows]
        self.low[ids] = tr.low[:, rows].T
        self.high[ids] = tr.high[:, rows].T
        self.final[ids] = tr.X[:, rows].T
        self.time[ids] = tr.t[rows]

    def table(self) -> Trajectories:
        # orbits that attract are attractors; the others keep their period but no number
        period = np.where(self.outcome == CYCLES, self.period, np.nan)
        cycle = number_cycles(self.starts.owner, period, self.low, self.high)
        return Trajectories(starts=self.starts, outcome=self.outcome, reason=self.reason,
                            steady=self.steady, period=self.period, low=self.low, high=self.high,
                            multiplier=self.multiplier, cycle=cycle, final=self.final,
                            time=self.time, steps=self.steps)
