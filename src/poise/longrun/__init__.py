"""Long-run behaviour by batched simulation: where trajectories go, which sets oscillate.

Linear stability says what happens next to a steady state; this package follows
trajectories to see where they end: at a stable steady state, on a periodic orbit (with
its period and each state's range), off to infinity, or nowhere decidable within the
budget, with the reason. It works on whole batches of parameter sets at once.

API (plain data in and out)
---------------------------
``long_run(kernels, params, steady_owner, steady_free, steady_jacobian=None, *, initial=None,
box_low=None, box_high=None, box_samples=0, set_ids=None, seed=0, steady_labels=None,
domain_low=None, domain_high=None, settings=Settings()) -> LongRun``
    One call: starts at ``initial`` (one per set), next to every unstable steady state
    along each unstable direction, and (with ``box_samples``) a box sample per set;
    returns ``LongRun(steady, trajectories, basins)``.

The parts, for callers that want their own starts:

* ``steady_states(kernels, params, owner, free, jacobian=None) -> SteadyStates``
  (eigenvalues, ``stable``, ``unstable``); ``state_sizes``.
* ``initial_starts``, ``unstable_starts``, ``box_starts``, ``inside``, ``combine`` ->
  ``Starts(x, owner, kind, source, index)``.
* ``simulate(kernels, params, steady, starts, settings) -> Trajectories``: one row per
  start: ``outcome`` (``OUTCOME_NAMES``: settles / cycles / unbounded / undetermined),
  ``reason`` (``REASONS``), ``steady`` (row reached), ``period``, ``low``/``high``
  (every state of the model, conserved ones included, on the orbit), ``multiplier``
  (return-map multiplier of the orbit), ``cycle`` (orbit number within the set),
  ``final``, ``time``, ``steps``.
* ``basin_stability(trajectories, n_sets, steady_owner, steady_labels) -> BasinStability``:
  shares of the box starts per steady state, per orbit, per set and pooled, each a
  ``Share(successes, draws, fraction, low, high)`` with Wilson intervals.

Everything is in the model's free states (after eliminating conserved totals), as
`poise.model.Kernels` uses them; ``kernels.full_states`` maps back.

How it works
------------
`rosenbrock`: a fourth-order L-stable Rosenbrock step with an embedded error estimate
and the model's analytic Jacobian, compiled, each trajectory with its own step size;
`simulate`: one Python loop over time steps (not over sets); `scan`, `monitor`,
`cycles`: per-step tests, section returns, the attraction test; `timescales`: the
horizon rule (100 times the slowest time scale of the set's steady states, and a budget
of steps); `settings`: every tolerance, all relative (to each state's size or range
along its trajectory, and to the set's time scale), so outcomes do not depend on units.

Limits
------
Simulation covers the starts tried, not all of state space. An orbit is called periodic
only once its returns repeat to 1e-4 of each state's range and a kick of 1 % decays; a
very slowly attracting orbit, a very slowly unwinding spiral, a long-period or chaotic
motion ends "undetermined" (budget) rather than guessed, and so does an orbit around a
stable focus that damps too weakly for the returns to rule out a slow spiral into it. A state that is zero at every
steady state and at the start has no size of its own: it is displaced by 1e-3 in model
units and never judged to grow without bound (a blow-up then ends as a failure).

Wiring into the pipeline (not done here)
----------------------------------------
In ``poise.engine.chunk.analyse_sets``, after the steady states are classified and
continua merged, for the sets that are ``ok`` (optionally a stated random subsample,
chosen by sample_id so that it does not depend on chunks)::

    run = long_run(model.kernels, params[ok_sets], owner_within_ok, found.free, jacobians,
                   initial=x0_full[list(model.kernels.free_columns)],   # SBML initial or [model.initial]
                   box_low=..., box_high=..., box_samples=N,            # optional [long_run] box, free states
                   set_ids=sample_ids[ok_sets], seed=study.sampling.seed,
                   steady_labels=labels(study.states, found.full),
                   domain_low=model.domain_low, domain_high=model.domain_high)

Tables: ``equilibria.parquet`` gains ``basin, basin_low, basin_high`` (share of the set's
box starts that settle there; NaN without a box) and ``reached`` (the initial-state
trajectory settles there). ``outcomes.parquet`` gains ``long_run`` (outcome of the
initial-state trajectory), ``long_run_reason``, ``cycles`` (some trajectory of the set
ends on an attracting orbit), ``period``, ``min_<state>``, ``max_<state>``,
``amplitude_<state>`` (of that orbit; the initial state's orbit first), ``n_trajectories``
and ``n_undetermined``. A new ``trajectories.parquet`` holds one row per trajectory:
``sample_id, kind, source`` (equilibrium index within the set), ``outcome, reason,
steady`` (equilibrium index), ``period, multiplier, cycle, time, steps`` and
``min_<state>, max_<state>``. Claim words: ``cycles``, ``period``, ``amplitude(x)``,
``reaches(label)``, ``basin(label)``; ``summary.json`` gets P(cycles) with its Wilson
interval and the pooled basin shares with theirs. Undetermined trajectories are counted
and reported with their reasons, never dropped.
"""

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
