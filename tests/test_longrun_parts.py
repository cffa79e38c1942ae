"""The parts of poise.longrun on their own: the Rosenbrock step, time scales, starts,
orbit numbering, basin shares, conserved states, and outcomes that must be flagged.

Sources are named beside each check: closed-form solutions, the Prothero-Robinson
stiff test problem, scipy (solve_ivp, stats.kstest), and the rules the modules state.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from scipy.integrate import solve_ivp
from test_longrun import BRUSSELATOR, compile_text

from poise.analysis.intervals import wilson_interval
from poise.longrun import (BOX, CYCLES, UNBOUNDED, UNDETERMINED, Settings, basin_stability, box_starts,
                           initial_starts, long_run, rosenbrock, simulate, state_sizes, steady_states,
                           unstable_starts)
from poise.longrun.outcomes import BUDGET, NO_TIME_SCALE, REST_UNSTABLE, number_cycles
from poise.longrun.timescales import time_scales

RADIAL = """
    title = "circle attractor"
    [model]
    states = ["x", "y"]
    [model.domain]
    x = [-inf, inf]
    y = [-inf, inf]
    [model.ode]
    x = "-w*y + x*(1 - x**2 - y**2)"
    y = "w*x + y*(1 - x**2 - y**2)"
    [parameters]
    w = { dist = "uniform", low = 0.5, high = 2 }
"""


@pytest.fixture(scope="module")
def radial(tmp_path_factory):
    return compile_text(tmp_path_factory.mktemp("radial"), RADIAL)


def radial_exact(t, r0, angle0, w):
    """Closed form: r' = r (1 - r^2), angle' = w."""
    r = 1 / np.sqrt(1 + (1 / r0 ** 2 - 1) * np.exp(-2 * t))
    return np.array([r * np.cos(angle0 + w * t), r * np.sin(angle0 + w * t)])


def fixed_steps(kernels, x, params, h, count):
    """`count` steps of size h for each column; returns the end point and the last error."""
    P = params.T.copy()
    h = np.full(x.shape[1], h)
    for _ in range(count):
        both = kernels.rhs_and_jacobian_rows(x, P)
        n = x.shape[0]
        x, error, _ = rosenbrock.step(kernels, x, P, both[:n], both[n:], h, np.ones(x.shape[1], bool),
                                      np.full(x.shape, 1.0), 0.0)
    return x, error


# --------------------------------------------------------------------------- the step

def test_rosenbrock_step_has_order_four(radial):
    w = np.array([1.3])
    start = radial_exact(0.0, 0.2, 0.3, w)
    errors = []
    for count in (20, 40, 80, 160):
        end, _ = fixed_steps(radial, start.copy(), w[:, None], 2.0 / count, count)
        errors.append(np.abs(end - radial_exact(2.0, 0.2, 0.3, w)).max())
    ratios = np.array(errors[:-1]) / np.array(errors[1:])
    # order p: halving h divides the global error by 2^p = 16 (Hairer & Wanner 1996, ch. IV.7)
    assert np.all((ratios > 14) & (ratios < 19))


def test_embedded_error_estimate_is_order_four_locally(radial):
    w = np.array([0.8])
    start = radial_exact(0.0, 0.5, 0.0, w)
    estimates = [fixed_steps(radial, start.copy(), w[:, None], h, 1)[1][0] for h in (0.1, 0.05, 0.025)]
    # a third-order embedded solution has local error O(h^4): ratio 16 per halving
    # (Hairer & Wanner 1996, ch. IV.7)
    ratios = np.array(estimates[:-1]) / np.array(estimates[1:])
    assert np.all((ratios > 12) & (ratios < 20))


def test_stiff_problem_with_steps_far_beyond_explicit_stability(tmp_path):
    kernels = compile_text(tmp_path, """
        title = "Prothero-Robinson"
        [model]
        states = ["y", "c", "s"]
        [model.domain]
        y = [-inf, inf]
        c = [-inf, inf]
        s = [-inf, inf]
        [model.ode]
        y = "lam*(y - c) - s"
        c = "-s"
        s = "c"
        [parameters]
        lam = { dist = "uniform", low = -2e6, high = -1e6 }
    """)
    # Prothero & Robinson (1974): y' = lam (y - cos t) - sin t has the solution y = cos t
    # (here cos and sin carried as the states c, s). With h |lam| = 1e5 an explicit
    # method explodes; an L-stable one stays on the solution.
    start = np.array([[1.0], [1.0], [0.0]])
    end, _ = fixed_steps(kernels, start, np.array([[-1e6]]), 0.1, 20)
    assert abs(end[0, 0] - np.cos(2.0)) < 1e-4
    assert abs(end[1, 0] - np.cos(2.0)) < 1e-4


# --------------------------------------------------------------------------- time scales

def test_time_scale_rule():
    values = np.array([[-2.0, -0.5],                     # slowest relaxation 1/0.5
                       [-0.1 + 1j, -0.1 - 1j],           # relaxation 0.1, cycle 1/(2 pi): 0.1 slower
                       [0 + 1j, 0 - 1j],                 # centre: floor 1e-3 |lambda|
                       [-5 + 50j, -5 - 50j]])            # cycle 50/(2 pi) slower than 5? no: 5 < 7.96
    times = time_scales(4, np.arange(4), values, np.zeros(0, np.int64), np.zeros((0, 2)), 100.0)
    # the rule stated in poise.longrun.timescales
    assert times.tau == pytest.approx([2.0, 10.0, 1000.0, 1 / 5.0])
    assert times.horizon == pytest.approx(100 * times.tau)
    # first window: slowest max(|Re|, |Im| / 2 pi), no floor (a centre: one linear period)
    assert times.first == pytest.approx([2.0, 2 * np.pi, 2 * np.pi, 1 / (50 / (2 * np.pi))])


# --------------------------------------------------------------------------- starts

def test_unstable_starts_lie_along_eigenvectors(tmp_path):
    kernels = compile_text(tmp_path, BRUSSELATOR)
    params = np.array([[1.0, 2.5], [1.0, 4.5], [1.0, 1.5]])   # focus, node, stable
    a, b = params.T
    steady = steady_states(kernels, params, np.arange(3), np.column_stack([a, b / a]))
    sizes = state_sizes(steady, 3)
    starts = unstable_starts(steady, sizes)
    # closed form: J = [[b - 1, a^2], [-b, -a^2]] at (a, b/a); trace b - 1 - a^2, det a^2
    trace, det = b - 1 - a ** 2, a ** 2
    assert np.array_equal(steady.unstable, trace > 0)
    # focus (trace^2 < 4 det): one start; node: two eigenvalues, two sides each
    assert np.array_equal(np.bincount(starts.owner, minlength=3), [1, 4, 0])
    for row in range(starts.count):
        s = starts.owner[row]
        d = starts.x[row] - steady.free[s]
        # displacement 1e-3 of each state's size in the largest scaled coordinate
        assert np.abs(d / sizes[s]).max() == pytest.approx(1e-3)
        if trace[s] ** 2 > 4 * det[s]:
            J = steady.jacobian[s]
            lam = (trace[s] + np.array([1, -1]) * np.sqrt(trace[s] ** 2 - 4 * det[s])) / 2
            # J d = lam d for one of the closed-form eigenvalues
            assert min(np.abs(J @ d - value * d).max() for value in lam) < 1e-12


def test_box_starts_are_uniform_and_independent_of_the_batch():
    ids = np.arange(500, 700)
    starts = box_starts([0.0, -1.0], [2.0, 3.0], 64, ids, seed=4)
    x = starts.x
    assert np.all((x >= [0.0, -1.0]) & (x <= [2.0, 3.0]))
    # reference: scipy.stats.kstest against the uniform distribution of each coordinate
    assert stats.kstest((x[:, 0] - 0) / 2, "uniform").pvalue > 0.01
    assert stats.kstest((x[:, 1] + 1) / 4, "uniform").pvalue > 0.01
    # a set's sample depends on its identifier only, not on its neighbours
    alone = box_starts([0.0, -1.0], [2.0, 3.0], 64, ids[[37]], seed=4)
    assert np.array_equal(alone.x, x[starts.owner == 37])
    # and differs between sets and seeds
    assert not np.array_equal(x[starts.owner == 0], x[starts.owner == 1])
    other = box_starts([0.0, -1.0], [2.0, 3.0], 64, ids[[37]], seed=5)
    assert not np.array_equal(other.x, alone.x)


# --------------------------------------------------------------------------- results

def test_number_cycles_within_sets():
    owner = np.array([0, 0, 0, 1, 1, 2])
    period = np.array([5.0, 5.001, 9.0, 5.0, np.nan, 3.0])
    low = np.array([[0.0], [0.0], [1.0], [0.0], [np.nan], [0.0]])
    high = low + 1.0
    # by hand: set 0 has two orbits (periods 5 and 9), set 1 one, set 2 one
    assert number_cycles(owner, period, low, high).tolist() == [0, 0, 1, 0, -1, 0]


def test_pooled_basin_share_is_the_wilson_interval_of_all_box_starts(tmp_path):
    kernels = compile_text(tmp_path, """
        title = "double well, tilted"
        [model]
        states = ["x"]
        [model.domain]
        x = [-inf, inf]
        [model.ode]
        x = "-(x + 1)*(x - c)*(x - 1)"
        [parameters]
        c = { dist = "uniform", low = -0.5, high = 0.5 }
    """)
    c = np.array([-0.3, 0.0, 0.4])
    free = np.column_stack([-np.ones(3), c, np.ones(3)]).reshape(-1, 1)
    run = long_run(kernels, c[:, None], np.repeat(np.arange(3), 3), free, box_low=[-2.0], box_high=[2.0],
                   box_samples=32, steady_labels=np.tile(["low", "middle", "high"], 3))
    pooled = run.basins.pooled["low"]
    successes = int(run.basins.per_steady.successes[0::3].sum())
    # reference: poise.analysis.intervals.wilson_interval (Wilson 1927) of all 96 draws
    assert pooled.successes == successes and pooled.draws == 96
    assert (pooled.low, pooled.high) == pytest.approx(wilson_interval(successes, 96))
    shares = [run.basins.pooled[k].successes for k in ("low", "middle", "high", "periodic orbit", "unbounded",
                                                       "undetermined")]
    assert sum(shares) == 96       # every start is counted once


def test_conserved_state_extremes_on_the_orbit(tmp_path):
    kernels = compile_text(tmp_path, """
        title = "Brusselator with a reservoir"
        [model]
        states = ["x", "y", "r"]
        [model.conserved]
        T = "x + y + r"
        [model.ode]
        x = "a - (b + 1)*x + x**2*y"
        y = "b*x - x**2*y"
        r = "-(a - (b + 1)*x + x**2*y) - (b*x - x**2*y)"
        [parameters]
        T = 100
        a = 1
        b = { dist = "uniform", low = 2.5, high = 3.5 }
    """)
    b = 3.0
    run = long_run(kernels, np.array([[b]]), [0], [[1.0, b]], initial=np.array([1.0, 1.0]))
    tr = run.trajectories
    row = np.flatnonzero(tr.starts.kind == 0)[0]
    assert tr.outcome[row] == CYCLES

    def f(t, z):
        return [1 - (b + 1) * z[0] + z[0] ** 2 * z[1], b * z[0] - z[0] ** 2 * z[1]]
    ref = solve_ivp(f, (0, 30 * tr.period[row]), [1.0, 1.0], method="DOP853", rtol=1e-11, atol=1e-13,
                    dense_output=True)
    late = ref.sol(np.linspace(ref.t[-1] - tr.period[row], ref.t[-1], 20_001))
    reservoir = 100 - late[0] - late[1]          # the conserved total, by hand
    # reference: scipy's DOP853; the eliminated state's range comes out right
    assert tr.low[row, 2] == pytest.approx(reservoir.min(), rel=1e-6)
    assert tr.high[row, 2] == pytest.approx(reservoir.max(), rel=1e-6)


# --------------------------------------------------------------------------- flagged, never dropped

def test_exponential_growth_is_unbounded(tmp_path):
    kernels = compile_text(tmp_path, """
        title = "growth"
        [model]
        states = ["x"]
        [model.ode]
        x = "r*x"
        [parameters]
        r = { dist = "uniform", low = 0.5, high = 2 }
    """)
    run = long_run(kernels, np.array([[1.0], [0.5]]), [0, 1], [[0.0], [0.0]], initial=np.array([1.0]))
    # closed form x = e^(r t): unbounded from any x0 > 0
    assert np.all(run.trajectories.outcome == UNBOUNDED)


def test_no_time_scale_and_rest_at_an_unstable_state_are_flagged(tmp_path):
    kernels = compile_text(tmp_path, """
        title = "flat and cubic"
        [model]
        states = ["x"]
        [model.domain]
        x = [-inf, inf]
        [model.ode]
        x = "c*x*(1 - x*x)"
        [parameters]
        c = { dist = "uniform", low = -1, high = 1 }
    """)
    # c = 0: f is identically zero, no eigenvalue, no time scale; c = 1 started exactly at
    # the unstable steady state 0 (f(0) = 0 exactly): it stays there
    run = long_run(kernels, np.array([[0.0], [1.0]]), [1, 1, 1], [[-1.0], [0.0], [1.0]],
                   initial=np.array([0.0]))
    tr = run.trajectories
    first = tr.starts.kind == 0
    assert tr.outcome[first & (tr.starts.owner == 0)] == UNDETERMINED
    assert tr.reason[first & (tr.starts.owner == 0)] == NO_TIME_SCALE
    assert tr.reason[first & (tr.starts.owner == 1)] == REST_UNSTABLE
    assert tr.steady[first & (tr.starts.owner == 1)] == 1


def test_a_small_budget_leaves_every_trajectory_with_an_outcome(tmp_path):
    kernels = compile_text(tmp_path, BRUSSELATOR)
    params = np.array([[1.0, 3.0], [1.0, 1.5]])
    a, b = params.T
    steady = steady_states(kernels, params, [0, 1], np.column_stack([a, b / a]))
    starts = initial_starts(np.array([1.0, 1.0]), 2)
    tr = simulate(kernels, params, steady, starts, Settings(max_steps=30))
    assert tr.count == 2
    assert np.all(tr.outcome == UNDETERMINED) and np.all(tr.reason == BUDGET)
    assert np.all(tr.steps == 30)


def test_basin_stability_counts_only_box_starts(tmp_path):
    kernels = compile_text(tmp_path, BRUSSELATOR)
    params = np.array([[1.0, 1.5]])
    steady = steady_states(kernels, params, [0], [[1.0, 1.5]])
    from poise.longrun import combine
    starts = combine(initial_starts(np.array([1.0, 1.0]), 1), box_starts([0.1, 0.1], [3.0, 3.0], 16, [0], 0))
    tr = simulate(kernels, params, steady, starts)
    basins = basin_stability(tr, 1, steady.owner)
    # the only steady state is stable and attracts everything (Strogatz 1994 section 7.3,
    # b < 1 + a^2): 16 of 16 box starts, the initial start not counted
    assert basins.per_steady.successes.tolist() == [16]
    assert basins.per_steady.draws.tolist() == [16]
    assert np.sum(tr.starts.kind == BOX) == 16
