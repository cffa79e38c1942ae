"""Basin stability: the share of starting states from a box that reach each attractor.

Basin stability (Menck, Heitzig, Marwan & Kurths 2013, Nature Physics 9:89) of an
attractor is the probability that a state drawn from a given region of state space
ends on it. It is estimated per parameter set from the trajectories started from the
set's box sample (`starts.box_starts`), with a Wilson score interval (Wilson 1927), and
pooled over all sets (each start of each set one draw: the probability over the
parameter distribution and the box together).

Trajectories that are undetermined are counted as such, never left out: the fractions of
a set's attractors plus its "unbounded" and "undetermined" fractions add up to 1.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from poise.analysis.intervals import wilson_interval
from poise.longrun.outcomes import CYCLES, SETTLES, UNBOUNDED, UNDETERMINED, Trajectories
from poise.longrun.starts import BOX

CYCLE_LABEL, UNBOUNDED_LABEL, UNDETERMINED_LABEL = "periodic orbit", "unbounded", "undetermined"


@dataclass(frozen=True, eq=False)
class Share:
    """A share with its interval: `successes` of `draws`, `fraction`, Wilson `low`/`high`
    (arrays of one shape; fraction NaN where draws is 0)."""

    successes: np.ndarray
    draws: np.ndarray
    fraction: np.ndarray
    low: np.ndarray
    high: np.ndarray


@dataclass(frozen=True, eq=False)
class BasinStability:
    """Basin fractions from the box starts.

    Attributes
    ----------
    per_steady : Share of shape (R,), for each steady state (row of SteadyStates), among
        its own set's box starts (0 of N for unstable ones).
    per_cycle : Share of shape (S, C), for each set's orbit number 0..C-1 (`Trajectories.cycle`).
    cycles, unbounded, undetermined : Share of shape (S,), per set.
    pooled : dict label -> Share (scalars) over all sets: each steady-state label given,
        then "periodic orbit", "unbounded", "undetermined".
    """

    per_steady: Share
    per_cycle: Share
    cycles: Share
    unbounded: Share
    undetermined: Share
    pooled: dict


def basin_stability(trajectories: Trajectories, n_sets: int, steady_owner: np.ndarray,
                    steady_labels=None, confidence: float = 0.95) -> BasinStability:
    """Fractions of each set's box starts reaching each attractor, per set and pooled.

    Parameters
    ----------
    trajectories : from `simulate`; only starts of kind BOX count.
    n_sets : number of parameter sets S.
    steady_owner : (R,) the set of each steady state (SteadyStates.owner).
    steady_labels : (R,) labels of the steady states for the pooled shares (e.g. which
        states are zero); default: one label per steady state row ("steady state r").
    confidence : of the Wilson intervals.
    """
    box = trajectories.starts.kind == BOX
    owner = trajectories.starts.owner[box]
    outcome = trajectories.outcome[box]
    draws = np.bincount(owner, minlength=n_sets)
    steady_owner = np.asarray(steady_owner, dtype=np.int64)
    rows = steady_owner.size

    settled = outcome == SETTLES
    reached = np.bincount(trajectories.steady[box][settled], minlength=rows)[:rows]
    per_steady = _share(reached, draws[steady_owner], confidence)

    cycle = trajectories.cycle[box]
    width = int(cycle.max(initial=-1)) + 1
    on_cycle = (outcome == CYCLES) & (cycle >= 0)
    per_cycle_counts = np.zeros((n_sets, width), np.int64)
    np.add.at(per_cycle_counts, (owner[on_cycle], cycle[on_cycle]), 1)
    per_cycle = _share(per_cycle_counts, np.broadcast_to(draws[:, None], per_cycle_counts.shape), confidence)

    def per_set(mask):
        return _share(np.bincount(owner[mask], minlength=n_sets), draws, confidence)

    cycles, unbounded, undetermined = per_set(outcome == CYCLES), per_set(outcome == UNBOUNDED), \
        per_set(outcome == UNDETERMINED)

    labels = (np.array([f"steady state {r}" for r in range(rows)], dtype=object)
              if steady_labels is None else np.asarray(steady_labels, dtype=object))
    total = int(draws.sum())
    pooled = {}
    for label in dict.fromkeys(labels.tolist()):      # a loop over labels, in first-seen order
        pooled[label] = _share(np.array(reached[labels == label].sum()), np.array(total), confidence)
    for label, share in ((CYCLE_LABEL, cycles), (UNBOUNDED_LABEL, unbounded), (UNDETERMINED_LABEL, undetermined)):
        pooled[label] = _share(np.array(share.successes.sum()), np.array(total), confidence)
    return BasinStability(per_steady=per_steady, per_cycle=per_cycle, cycles=cycles, unbounded=unbounded,
                          undetermined=undetermined, pooled=pooled)


def _share(successes, draws, confidence) -> Share:
    successes = np.asarray(successes, dtype=np.int64)
    draws = np.asarray(draws, dtype=np.int64)
    low, high = wilson_interval(successes, draws, confidence)
    with np.errstate(invalid="ignore", divide="ignore"):
        fraction = np.where(draws > 0, successes / np.maximum(draws, 1), np.nan)
    return Share(successes=successes, draws=draws, fraction=fraction,
                 low=np.asarray(low, dtype=float), high=np.asarray(high, dtype=float))
