"""Long-run behaviour by batched simulation (placeholder docstring, rewritten below)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from poise.longrun.basins import BasinStability, Share, basin_stability
from poise.longrun.outcomes import (CYCLES, OUTCOME_NAMES, REASONS, SETTLES, UNBOUNDED, UNDETERMINED,
                                    Trajectories)
from poise.longrun.settings import Settings
from poise.longrun.simulate import simulate
from poise.longrun.starts import (BOX, INITIAL, KIND_NAMES, UNSTABLE_DIRECTION, Starts, box_starts, combine,
                                  initial_starts, inside, unstable_starts)
from poise.longrun.steady import SteadyStates, as_parameter_array, state_sizes, steady_states


@dataclass(frozen=True, eq=False)
class LongRun:
    """What `long_run` returns: every trajectory, and basin fractions when a box was given."""

    steady: SteadyStates
    trajectories: Trajectories
    basins: BasinStability | None


def long_run(kernels, params, steady_owner, steady_free, steady_jacobian=None, *, initial=None,
             box_low=None, box_high=None, box_samples: int = 0, set_ids=None, seed: int = 0,
             steady_labels=None, domain_low=None, domain_high=None,
             settings: Settings = Settings()) -> LongRun:
    """Simulate every parameter set from its starts and classify where each trajectory goes.

    Parameters
    ----------
    kernels : poise.model.Kernels
        Compiled kernels of the model (free states, see `poise.model.compile_model`).
    params : (S, m) array
        The sets' values of the kernels' varying parameters.
    steady_owner, steady_free : (R,) set index and (R, n) free states of each steady state found.
    steady_jacobian : (R, n, n) array, optional
        Their reduced Jacobians (computed when not given).
    initial : (n,) or (S, n) array, optional
        Initial free states: one trajectory per set from there.
    box_low, box_high : (n,) or (S, n) arrays, optional
        A box of free states; with `box_samples` > 0, that many starts per set from it and
        basin fractions.
    set_ids : (S,) int array, optional
        Identifiers of the sets (seeds the box samples; default 0..S-1). Give the run's
        sample ids so that a set's sample does not depend on its chunk.
    seed : int
    steady_labels : (R,) labels for pooled basin fractions.
    domain_low, domain_high : arrays over all states, optional
        Displacements from unstable steady states that leave this domain are not made
        (e.g. a species below zero); default: no limits.
    settings : Settings

    Returns
    -------
    LongRun
    """
    params = as_parameter_array(params, kernels.m)
    n_sets = params.shape[0]
    steady = steady_states(kernels, params, steady_owner, steady_free, steady_jacobian)
    fallback = None if initial is None else np.broadcast_to(np.asarray(initial, float), (n_sets, kernels.n))
    parts = [unstable_starts(steady, state_sizes(steady, n_sets, fallback))]
    if domain_low is not None and domain_high is not None:
        parts[0] = inside(parts[0], kernels, params, np.asarray(domain_low), np.asarray(domain_high))
    if initial is not None:
        parts.append(initial_starts(initial, n_sets))
    with_box = box_samples > 0 and box_low is not None and box_high is not None
    if with_box:
        ids = np.arange(n_sets) if set_ids is None else np.asarray(set_ids)
        parts.append(box_starts(box_low, box_high, box_samples, ids, seed))
    trajectories = simulate(kernels, params, steady, combine(*parts), settings)
    basins = basin_stability(trajectories, n_sets, steady.owner, steady_labels) if with_box else None
    return LongRun(steady=steady, trajectories=trajectories, basins=basins)


__all__ = ["BOX", "CYCLES", "INITIAL", "KIND_NAMES", "OUTCOME_NAMES", "REASONS", "SETTLES", "UNBOUNDED",
           "UNDETERMINED", "UNSTABLE_DIRECTION", "BasinStability", "LongRun", "Settings", "Share", "Starts",
           "SteadyStates", "Trajectories", "basin_stability", "box_starts", "combine", "initial_starts",
           "inside", "long_run", "simulate", "state_sizes", "steady_states", "unstable_starts"]
