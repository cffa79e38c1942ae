"""What became of each trajectory: outcome codes, reasons, and the result table.

Every trajectory gets exactly one outcome: it settles at one of the listed steady
states, it follows a periodic orbit that attracts it, it grows without bound, or it
is undetermined, with the reason. Nothing is dropped.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from poise.longrun.starts import KIND_NAMES, Starts

SETTLES, CYCLES, UNBOUNDED, UNDETERMINED = range(4)
OUTCOME_NAMES = ("settles", "cycles", "unbounded", "undetermined")

(NO_REASON, BUDGET, NEUTRAL_ORBITS, REPELLING_ORBIT, CHECK_UNFINISHED, REST_UNLISTED,
 REST_UNSTABLE, REST_NONHYPERBOLIC, FAILED, NO_TIME_SCALE, SLOW_SPIRAL) = range(11)
REASONS = (
    "",
    "neither came to rest nor repeated within the time horizon or the step budget",
    "closed orbits that neither attract nor repel nearby trajectories: a family of cycles "
    "(as around a centre), not an isolated periodic orbit",
    "the orbit repeats (to the match tolerance) but nearby trajectories move away from it: a repelling "
    "orbit, or a spiral unwinding too slowly to tell from one",
    "the orbit repeats, but the budget ended before it was shown to attract",
    "came to rest where no listed steady state is (the steady-state search may have missed one)",
    "came to rest at an unstable steady state (the start lies on it or on its stable manifold)",
    "came to rest at a steady state whose linear stability is undetermined",
    "the model could not be integrated further (a value was not finite or the step size vanished)",
    "no time scale: every eigenvalue at the steady states and at the start is zero",
    "the orbit repeats, but it winds around a stable focus that damps so weakly that it may be "
    "a slow spiral into it",
)

SAME_CYCLE = 1e-2   # two trajectories follow the same orbit if period and extremes agree this well


@dataclass(frozen=True, eq=False)
class Trajectories:
    """One row per trajectory (T rows).

    Attributes
    ----------
    starts : the starting points (owner set, kind, source, index, x).
    outcome : (T,) int8, index into `OUTCOME_NAMES`.
    reason : (T,) int8, index into `REASONS` (0 when the outcome needs none).
    steady : (T,) int, the row of `SteadyStates` reached (outcome "settles", or the
        steady state it came to rest at), else -1.
    period : (T,) the period of the orbit (NaN unless a periodic orbit was found, which
        includes the undetermined ones whose orbit repeats).
    low, high : (T, N) each state's minimum and maximum on the orbit, for all N states of
        the model (conserved ones included); NaN without an orbit.
    multiplier : (T,) estimated return-map multiplier of the orbit (< 1 attracting,
        about 1 a neutral family, > 1 repelling); NaN when not measured.
    cycle : (T,) int, the orbit's number within its set (trajectories on the same orbit
        share it), -1 without an orbit.
    final : (T, n) the free states where the trajectory stopped.
    time : (T,) the time it stopped at.
    steps : (T,) the steps it took (accepted and rejected).
    """

    starts: Starts
    outcome: np.ndarray
    reason: np.ndarray
    steady: np.ndarray
    period: np.ndarray
    low: np.ndarray
    high: np.ndarray
    multiplier: np.ndarray
    cycle: np.ndarray
    final: np.ndarray
    time: np.ndarray
    steps: np.ndarray

    @property
    def count(self) -> int:
        return int(self.outcome.size)

    @property
    def amplitude(self) -> np.ndarray:
        """(T, N) max - min of each state on the orbit."""
        return self.high - self.low

    def outcome_names(self) -> np.ndarray:
        return np.asarray(OUTCOME_NAMES, dtype=object)[self.outcome]

    def reason_texts(self) -> np.ndarray:
        return np.asarray(REASONS, dtype=object)[self.reason]

    def kind_names(self) -> np.ndarray:
        return np.asarray(KIND_NAMES, dtype=object)[self.starts.kind]


def number_cycles(owner: np.ndarray, period: np.ndarray, low: np.ndarray, high: np.ndarray) -> np.ndarray:
    """Number the distinct orbits within each set.

    Trajectories are sorted by set and period; a new orbit begins where the set changes,
    or the period or any state's extreme differs from the previous trajectory's by more
    than SAME_CYCLE (relative to the period and to the state's range). Vectorised.

    Parameters
    ----------
    owner : (T,) set of each trajectory.
    period : (T,) period of its orbit, NaN for none.
    low, high : (T, N) each state's extremes on the orbit.

    Returns
    -------
    (T,) int array
        0, 1, ... within each set; -1 where the period is NaN.
    """
    count = owner.size
    number = np.full(count, -1, dtype=np.int64)
    rows = np.flatnonzero(np.isfinite(period))
    if rows.size == 0:
        return number
    order = rows[np.lexsort((period[rows], owner[rows]))]
    span = np.maximum(high[order] - low[order], 0.0)
    same = np.zeros(order.size, dtype=bool)
    if order.size > 1:
        prev, cur = order[:-1], order[1:]
        scale = np.maximum(span[:-1], span[1:])
        with np.errstate(invalid="ignore", divide="ignore"):
            close_extremes = np.all((np.abs(low[cur] - low[prev]) <= SAME_CYCLE * scale) &
                                    (np.abs(high[cur] - high[prev]) <= SAME_CYCLE * scale), axis=1)
        same[1:] = ((owner[cur] == owner[prev])
                    & (np.abs(period[cur] - period[prev]) <= SAME_CYCLE * period[cur]) & close_extremes)
    new_set = np.ones(order.size, dtype=bool)
    new_set[1:] = owner[order[1:]] != owner[order[:-1]]
    new_orbit = np.cumsum(~same)                        # running orbit counter over all sets
    first_of_set = np.maximum.accumulate(np.where(new_set, new_orbit, 0))
    number[order] = new_orbit - first_of_set
    return number
