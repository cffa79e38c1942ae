"""Tolerances and budgets of the long-run simulation, in one place.

Every tolerance is relative: to a state's own size or range along the trajectory, or to
the set's time scale (see `poise.longrun.timescales`), so that outcomes do not depend
on the units a model is written in. The defaults were chosen by measurement on the
models in tests/test_longrun*.py and benchmarks/bench_longrun.py (common practice, no
source, where a value is not derived in a comment).
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Settings:
    """Knobs of `poise.longrun.simulate`.

    Attributes
    ----------
    rtol : float
        Relative local error per step.
    atol_fraction : float
        Absolute error per step, as a fraction of the largest size the state has
        reached along its trajectory (so it scales with the state's units).
    horizon_factor : float
        Time horizon = horizon_factor x the set's time scale (slowest relaxation or
        linear period of its steady states).
    max_steps : int
        Budget of attempted steps per trajectory.
    settle_distance : float
        A trajectory settles at a stable steady state once every state is this close to
        it, relative to the state's size ...
    settle_linearity : float
        ... and f there is its linearisation at the steady state up to this fraction,
        i.e. the trajectory is where linear stability decides its fate.
    match_tolerance : float
        Two returns to the section are "the same point" when every state differs by at
        most this fraction of its range along the trajectory.
    lag_tolerance : float
        A return is compared with the earlier return closest to it within this fraction
        (finds orbits that cross the section more than once per period).
    required_matches : int
        Consecutive matching returns, with periods agreeing to `match_tolerance`, before
        an orbit counts as periodic.
    max_lag : int
        Most section crossings per period looked for.
    perturbation : float
        Size of the kick (fraction of each state's range on the orbit) that tests
        whether a periodic orbit attracts.
    check_returns : int
        Returns after the kick within which the kick must decay to `attract_ratio`
        of its size, else the return-map multiplier is estimated from the returns.
    attract_ratio : float
    neutral_band : float
        A multiplier within 1 +- neutral_band counts as neither attracting nor repelling
        (a family of closed orbits, such as around a centre).
    stationary : float
        A trajectory whose states all varied by less than this fraction of their size
        over a whole observation window has come to rest.
    growth : float
        A state that exceeds this many times its reference size (start, steady states)
        counts as growing without bound.
    """

    rtol: float = 1e-6
    atol_fraction: float = 1e-9
    horizon_factor: float = 100.0
    max_steps: int = 20_000
    settle_distance: float = 1e-4
    settle_linearity: float = 0.1
    match_tolerance: float = 1e-4
    lag_tolerance: float = 0.05
    required_matches: int = 3
    max_lag: int = 4
    perturbation: float = 1e-2
    check_returns: int = 8
    attract_ratio: float = 0.1
    neutral_band: float = 1e-3
    stationary: float = 1e-7
    growth: float = 1e8
