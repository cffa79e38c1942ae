"""Long-run behaviour by batched simulation (poise.longrun), against known results.

Every check names its outside source beside the assertion: closed forms and textbook
results (Lefever & Nicolis 1971 and Strogatz, Nonlinear Dynamics and Chaos, 1994, for
the Brusselator; Strogatz 1994 section 7.5 for the van der Pol oscillator; the
Lotka-Volterra first integral), analytic basins of one-dimensional systems, and
scipy.integrate.solve_ivp as a reference integrator.
"""

from __future__ import annotations

import textwrap

import numpy as np
import pytest
from scipy.integrate import solve_ivp

import poise
from poise.analysis.intervals import wilson_interval
from poise.longrun import (CYCLES, SETTLES, UNBOUNDED, UNDETERMINED, Settings, long_run)
from poise.longrun.outcomes import NEUTRAL_ORBITS, REST_UNLISTED
from poise.model import compile_model

BRUSSELATOR = """
    title = "Brusselator"
    [model]
    states = ["x", "y"]
    [model.ode]
    x = "a - (b + 1)*x + x**2*y"
    y = "b*x - x**2*y"
    [parameters]
    a = { dist = "uniform", low = 0.5, high = 2 }
    b = { dist = "uniform", low = 0.5, high = 5 }
"""

# Lienard form of x'' - mu (1 - x^2) x' + x = 0 (Strogatz 1994, section 7.5), with
# w = x - x^3/3 - x'/mu: the same x(t), and well scaled for large mu
VAN_DER_POL = """
    title = "van der Pol"
    [model]
    states = ["x", "w"]
    [model.domain]
    x = [-inf, inf]
    w = [-inf, inf]
    [model.ode]
    x = "mu*(x - x**3/3 - w)"
    w = "x/mu"
    [parameters]
    mu = { dist = "loguniform", low = 0.1, high = 1000 }
"""

LOTKA_VOLTERRA = """
    title = "Lotka-Volterra"
    [model]
    states = ["x", "y"]
    [model.ode]
    x = "x*(1 - 0.5*y)"
    y = "y*(0.2*x - g)"
    [parameters]
    g = { dist = "uniform", low = 0.5, high = 2 }
"""

CUBIC = """
    title = "one state, three steady states"
    [model]
    states = ["x"]
    [model.domain]
    x = [-inf, inf]
    [model.ode]
    x = "-(x - r1)*(x - r2)*(x - r3)"
    [parameters]
    r1 = -1
    r2 = { dist = "uniform", low = -0.5, high = 0.5 }
    r3 = 1.5
"""


def compile_text(folder, text, name="study.toml"):
    """Kernels of a study written from `text` into `folder`."""
    path = folder / name
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return compile_model(poise.load_study(path)).kernels


@pytest.fixture(scope="module")
def models(tmp_path_factory):
    folder = tmp_path_factory.mktemp("longrun")
    return {name: compile_text(folder, text, f"{name}.toml") for name, text in
            (("brusselator", BRUSSELATOR), ("vdp", VAN_DER_POL), ("lv", LOTKA_VOLTERRA), ("cubic", CUBIC))}


def brusselator_sets(count, seed=3):
    rng = np.random.default_rng(seed)
    return np.column_stack([rng.uniform(0.5, 2.0, count), rng.uniform(0.5, 5.0, count)])


def brusselator_run(kernels, params, initial=(1.0, 1.0), settings=Settings()):
    a, b = params.T
    # the only steady state, (a, b/a), by hand
    return long_run(kernels, params, np.arange(len(a)), np.column_stack([a, b / a]),
                    initial=np.asarray(initial), settings=settings)


def any_per_set(owner, mask, n_sets):
    out = np.zeros(n_sets, bool)
    np.logical_or.at(out, owner, mask)
    return out


# --------------------------------------------------------------------------- Brusselator

@pytest.mark.slow
def test_brusselator_oscillates_exactly_where_b_exceeds_one_plus_a_squared(models):
    params = brusselator_sets(160)
    a, b = params.T
    run = brusselator_run(models["brusselator"], params)
    tr = run.trajectories
    cycles = any_per_set(tr.starts.owner, tr.outcome == CYCLES, len(a))
    undetermined = any_per_set(tr.starts.owner, tr.outcome == UNDETERMINED, len(a))
    hopf = b > 1 + a ** 2
    # Lefever & Nicolis (1971); Strogatz (1994) section 7.3: the steady state (a, b/a) is
    # unstable exactly when b > 1 + a^2, and then a stable limit cycle surrounds it
    # (Poincare-Bendixson); otherwise every trajectory tends to the steady state.
    margin = np.abs(b - 1 - a ** 2)
    assert np.array_equal(cycles[margin > 0.05], hopf[margin > 0.05])
    assert not undetermined[margin > 0.05].any()
    # box a ~ U(0.5, 2), b ~ U(0.5, 5): P(b > 1 + a^2) = int_0.5^2 (4 - a^2) da / 6.75 = 1/2 exactly
    low, high = wilson_interval(int(cycles.sum()), len(a))
    assert low <= 0.5 <= high
    settled = tr.outcome == SETTLES
    assert np.all(~hopf[tr.starts.owner[settled]] | (margin[tr.starts.owner[settled]] <= 0.05))


def test_brusselator_periods_and_extremes_agree_with_solve_ivp(models):
    params = np.array([[1.0, 3.0], [0.6, 2.5], [1.5, 4.0]])
    run = brusselator_run(models["brusselator"], params)
    tr = run.trajectories
    for s, (a, b) in enumerate(params):
        row = np.flatnonzero((tr.starts.owner == s) & (tr.outcome == CYCLES))[0]

        def f(t, z):
            return [a - (b + 1) * z[0] + z[0] ** 2 * z[1], b * z[0] - z[0] ** 2 * z[1]]

        def section(t, z):
            return z[0] - a
        section.direction = 1
        ref = solve_ivp(f, (0, 25 * tr.period[row]), [1.0, 1.0], method="DOP853", rtol=1e-11, atol=1e-13,
                        events=section, dense_output=True)
        crossings = ref.t_events[0]
        period = crossings[-1] - crossings[-2]
        late = ref.sol(np.linspace(crossings[-2], crossings[-1], 20_001))
        # reference: scipy's DOP853 at rtol 1e-11 (a different integrator and event finder)
        assert tr.period[row] == pytest.approx(period, rel=1e-5)
        assert tr.high[row] == pytest.approx(late.max(axis=1), rel=1e-4)
        assert tr.low[row] == pytest.approx(late.min(axis=1), rel=1e-4)
        assert tr.multiplier[row] < 1.0


# --------------------------------------------------------------------------- van der Pol

def test_van_der_pol_period_and_amplitude(models):
    mu = np.array([0.1, 10.0, 1000.0])
    run = long_run(models["vdp"], mu[:, None], np.arange(3), np.zeros((3, 2)), initial=np.array([0.5, 0.0]))
    tr = run.trajectories
    assert np.all(tr.outcome == CYCLES)
    period = {m: tr.period[tr.starts.owner == i] for i, m in enumerate(mu)}
    amplitude = tr.high[:, 0]
    # Strogatz (1994) section 7.5: amplitude about 2 for every mu (small-mu averaging and
    # the relaxation limit both give 2)
    assert np.allclose(amplitude, 2.0, rtol=0.01)
    assert np.allclose(tr.low[:, 0], -2.0, rtol=0.01)
    # small mu: period 2 pi (harmonic limit; Strogatz 1994 section 7.5)
    assert np.allclose(period[0.1], 2 * np.pi, rtol=0.01)
    # large mu: period (3 - 2 ln 2) mu (relaxation limit, Strogatz 1994 section 7.5)
    assert np.allclose(period[1000.0], (3 - 2 * np.log(2)) * 1000.0, rtol=0.01)
    # all starts of one set find one orbit: same period to 1e-6
    for values in period.values():
        assert np.ptp(values) <= 1e-6 * values[0]


def test_van_der_pol_period_agrees_with_solve_ivp_at_mu_10(models):
    mu = 10.0
    run = long_run(models["vdp"], np.array([[mu]]), [0], np.zeros((1, 2)), initial=np.array([0.5, 0.0]))
    period = run.trajectories.period[0]

    def f(t, z):
        return [mu * (z[0] - z[0] ** 3 / 3 - z[1]), z[0] / mu]

    def up(t, z):
        return z[0]
    up.direction = 1
    ref = solve_ivp(f, (0, 8 * period), [0.5, 0.0], method="LSODA", rtol=1e-11, atol=1e-13, events=up)
    # reference: scipy's LSODA at rtol 1e-11
    assert period == pytest.approx(np.diff(ref.t_events[0])[-1], rel=1e-6)


# --------------------------------------------------------------------------- Lotka-Volterra centre

def test_lotka_volterra_centre_is_not_reported_as_a_limit_cycle(models):
    g = np.array([0.5, 1.0, 2.0])
    # steady states by hand: (g/0.2, 1/0.5) a centre, (0, 0) a saddle
    owner = np.r_[0:3, 0:3]
    free = np.concatenate([np.column_stack([g / 0.2, np.full(3, 2.0)]), np.zeros((3, 2))])
    run = long_run(models["lv"], g[:, None], owner, free, initial=np.array([3.0, 1.0]),
                   domain_low=np.zeros(2), domain_high=np.full(2, np.inf))
    tr = run.trajectories
    start = tr.starts.kind == 0
    # Lotka-Volterra: V = 0.2 x - g ln x + 0.5 y - ln y is conserved, so every orbit is
    # closed and none attracts its neighbours: a family of cycles, not an isolated one
    assert np.all(tr.outcome[start] == UNDETERMINED)
    assert np.all(tr.reason[start] == NEUTRAL_ORBITS)
    assert np.all(np.abs(tr.multiplier[start] - 1.0) < Settings().neutral_band)
    assert not np.any(tr.outcome == CYCLES)
    # the period it measured is that of the closed orbit through the initial state
    for row in np.flatnonzero(start):
        gi = g[tr.starts.owner[row]]

        def f(t, z):
            return [z[0] * (1 - 0.5 * z[1]), z[1] * (0.2 * z[0] - gi)]

        def section(t, z):
            return z[0] - 3.0
        section.direction = 1
        ref = solve_ivp(f, (0, 3 * tr.period[row]), [3.0 - 1e-9, 1.0], method="DOP853", rtol=1e-11,
                        atol=1e-13, events=section)
        # reference: scipy's DOP853 at rtol 1e-11
        assert tr.period[row] == pytest.approx(np.diff(ref.t_events[0])[0], rel=1e-5)


def test_lotka_volterra_prey_alone_grows_without_bound(models):
    g = np.array([1.0])
    # the saddle (0, 0): its unstable direction is the prey axis, where x' = x (y = 0),
    # so x = x0 e^t grows without bound (closed form); the other side (x < 0) is outside
    run = long_run(models["lv"], g[:, None], [0, 0], np.array([[5.0, 2.0], [0.0, 0.0]]),
                   domain_low=np.zeros(2), domain_high=np.full(2, np.inf))
    tr = run.trajectories
    assert tr.count == 1 and tr.starts.kind[0] == 1
    assert tr.outcome[0] == UNBOUNDED


# --------------------------------------------------------------------------- period doubling, chaos

ROSSLER = """
    title = "Rossler"
    [model]
    states = ["x", "y", "z"]
    [model.domain]
    x = [-inf, inf]
    y = [-inf, inf]
    z = [-inf, inf]
    [model.ode]
    x = "-y - z"
    y = "x + 0.2*y"
    z = "0.2 + z*(x - c)"
    [parameters]
    c = { dist = "uniform", low = 2, high = 6 }
"""


def rossler_reference(c):
    """Returns to the section x = 0 (upwards) of a tight DOP853 run from (1, 1, 0): the
    smallest lag at which they repeat and the period, or (None, None)."""
    def f(t, z):
        return [-z[1] - z[2], z[0] + 0.2 * z[1], 0.2 + z[2] * (z[0] - c)]

    def section(t, z):
        return z[0]
    section.direction = 1
    sol = solve_ivp(f, (0, 600), [1.0, 1.0, 0.0], method="DOP853", rtol=1e-11, atol=1e-12, events=section)
    points, times = sol.y_events[0][-40:], sol.t_events[0][-40:]
    for lag in range(1, 9):
        if np.abs(points[lag:] - points[:-lag]).max() < 1e-6 * np.abs(points).max():
            return lag, times[-1] - times[-1 - lag]
    return None, None


@pytest.mark.slow
def test_rossler_period_doubling_and_chaos(tmp_path):
    # Rossler (1976) with a = b = 0.2: a period-1 orbit at c = 2.5, period-2 at c = 3.5,
    # chaos at c = 5 (the period-doubling route, Strogatz 1994 section 12.3; recalled
    # from memory, and checked here by the reference run's returns)
    kernels = compile_text(tmp_path, ROSSLER)
    c = np.array([2.5, 3.5, 5.0])
    root = np.sqrt(c ** 2 - 4 * 0.2 * 0.2)
    # steady states by hand: z = (c -+ sqrt(c^2 - 4ab)) / (2a), x = a z, y = -z
    z = np.concatenate([(c - root) / 0.4, (c + root) / 0.4])
    free = np.column_stack([0.2 * z, -z, z])
    run = long_run(kernels, c[:, None], np.r_[0:3, 0:3], free, initial=np.array([1.0, 1.0, 0.0]))
    tr = run.trajectories
    first = tr.starts.kind == 0
    for s in range(3):
        lag, period = rossler_reference(c[s])
        row = np.flatnonzero(first & (tr.starts.owner == s))[0]
        if lag is None:
            # the reference never repeats: never report an orbit
            assert s == 2
            assert not np.any(tr.outcome[tr.starts.owner == s] == CYCLES)
            assert tr.outcome[row] == UNDETERMINED
        else:
            assert lag == s + 1
            assert tr.outcome[row] == CYCLES
            # reference: scipy's DOP853 at rtol 1e-11; one period of the whole orbit
            assert tr.period[row] == pytest.approx(period, rel=1e-3)


# --------------------------------------------------------------------------- basins

def test_double_well_basins_are_one_half_each(tmp_path):
    kernels = compile_text(tmp_path, """
        title = "double well"
        [model]
        states = ["x"]
        [model.domain]
        x = [-inf, inf]
        [model.ode]
        x = "k*(x - x**3)"
        [parameters]
        k = { dist = "loguniform", low = 0.1, high = 10 }
    """)
    k = np.array([0.1, 1.0, 10.0])
    owner = np.repeat(np.arange(3), 3)
    free = np.tile([[-1.0], [0.0], [1.0]], (3, 1))
    run = long_run(kernels, k[:, None], owner, free, box_low=[-2.0], box_high=[2.0], box_samples=256,
                   seed=5, steady_labels=np.tile(["x<0", "x=0", "x>0"], 3))
    tr, basins = run.trajectories, run.basins
    box = tr.starts.kind == 2
    # x' = k x (1 - x^2): every start x0 < 0 goes to -1, x0 > 0 to +1 (sign of x is invariant)
    expected = np.where(tr.starts.x[box, 0] < 0, 0, 2) + 3 * tr.starts.owner[box]
    assert np.all(tr.outcome[box] == SETTLES)
    assert np.array_equal(tr.steady[box], expected)
    # with x0 uniform on [-2, 2] each basin holds exactly one half of the box
    for share in (basins.pooled["x<0"], basins.pooled["x>0"]):
        assert share.low <= 0.5 <= share.high
    stable = np.isin(np.arange(9) % 3, [0, 2])
    assert np.all((basins.per_steady.low[stable] <= 0.5) & (0.5 <= basins.per_steady.high[stable]))
    assert np.all(basins.per_steady.successes[~stable] == 0)


def test_asymmetric_cubic_basins_follow_the_middle_root(models):
    rng = np.random.default_rng(11)
    r2 = rng.uniform(-0.5, 0.5, 40)
    owner = np.repeat(np.arange(40), 3)
    free = np.column_stack([np.full(40, -1.0), r2, np.full(40, 1.5)]).reshape(-1, 1)
    run = long_run(models["cubic"], r2[:, None], owner, free, box_low=[-2.0], box_high=[2.0],
                   box_samples=64, set_ids=np.arange(100, 140), seed=1,
                   steady_labels=np.tile(["low", "middle", "high"], 40))
    tr, basins = run.trajectories, run.basins
    box = tr.starts.kind == 2
    x0, s = tr.starts.x[box, 0], tr.starts.owner[box]
    # x' = -(x + 1)(x - r2)(x - 1.5): starts below the unstable middle root r2 go to -1,
    # above it to 1.5 (one dimension: the middle root separates the basins)
    assert np.all(tr.outcome[box] == SETTLES)
    assert np.array_equal(tr.steady[box], 3 * s + np.where(x0 < r2[s], 0, 2))
    # basin of -1 = (r2 + 2) / 4 for x0 uniform on [-2, 2] (closed form), per set and pooled
    truth = (r2 + 2) / 4
    low, high = basins.per_steady.low[0::3], basins.per_steady.high[0::3]
    assert np.mean((low <= truth) & (truth <= high)) >= 0.9       # 95 % intervals
    pooled = basins.pooled["low"]
    assert pooled.low <= truth.mean() <= pooled.high
    assert basins.pooled["undetermined"].successes == 0


# --------------------------------------------------------------------------- honesty

def test_a_steady_state_missing_from_the_list_is_flagged(models):
    # give only the unstable middle root: trajectories come to rest elsewhere
    run = long_run(models["cubic"], np.array([[0.0]]), [0], [[0.0]], initial=np.array([1.0]))
    tr = run.trajectories
    assert np.all(tr.outcome == UNDETERMINED)
    assert np.all(tr.reason == REST_UNLISTED)
    # where they came to rest: the roots -1 and 1.5 that were left out (by hand)
    assert np.allclose(np.sort(tr.final[:, 0]), [-1.0, 1.5, 1.5], atol=1e-4)


def test_a_weakly_damped_spiral_is_never_reported_as_an_orbit(tmp_path):
    kernels = compile_text(tmp_path, """
        title = "weakly damped focus"
        [model]
        states = ["x", "y"]
        [model.domain]
        x = [-inf, inf]
        y = [-inf, inf]
        [model.ode]
        x = "-e*x - y"
        y = "x - e*y"
        [parameters]
        e = { dist = "loguniform", low = 1e-6, high = 1e-1 }
    """)
    e = np.array([1e-1, 1e-2, 1e-3, 1e-4, 1e-5, 1e-6])
    run = long_run(kernels, e[:, None], np.arange(6), np.zeros((6, 2)), initial=np.array([1.0, 0.0]))
    tr = run.trajectories
    # closed form: r = r0 exp(-e t), every trajectory spirals into the origin; there is no
    # periodic orbit however weak the damping
    assert not np.any(tr.outcome == CYCLES)
    assert tr.outcome[0] == SETTLES
    assert np.all((tr.outcome == SETTLES) | (tr.outcome == UNDETERMINED))


def test_outcomes_do_not_depend_on_the_batch_and_repeat_exactly(models):
    kernels = models["brusselator"]
    params = brusselator_sets(24, seed=8)
    everything = brusselator_run(kernels, params).trajectories
    again = brusselator_run(kernels, params).trajectories
    for name in ("outcome", "reason", "steady", "period", "low", "high", "multiplier", "final", "steps"):
        assert np.array_equal(getattr(everything, name), getattr(again, name), equal_nan=True), name
    # the same sets in another order, half of them, with other companions
    pick = np.array([17, 3, 9, 22, 0, 11])
    others = np.vstack([params[pick], brusselator_sets(5, seed=99)])
    part = brusselator_run(kernels, others).trajectories
    for new_set, old_set in enumerate(pick):
        a = np.flatnonzero(part.starts.owner == new_set)
        b = np.flatnonzero(everything.starts.owner == old_set)
        for name in ("outcome", "reason", "period", "low", "high", "final", "steps"):
            assert np.array_equal(getattr(part, name)[a], getattr(everything, name)[b], equal_nan=True), name


@pytest.mark.slow
def test_outcomes_do_not_depend_on_units(tmp_path, models):
    # the Brusselator with time in minutes instead of hours (x 60), x in milli-units
    # (x 1000) and y in hecto-units (x 0.01): same trajectories, rescaled
    ct, cx, cy = 60.0, 1000.0, 0.01
    rescaled = compile_text(tmp_path, f"""
        title = "Brusselator, other units"
        [model]
        states = ["X", "Y"]
        [model.ode]
        X = "{cx / ct}*(a - (b + 1)*(X/{cx}) + (X/{cx})**2*(Y/{cy}))"
        Y = "{cy / ct}*(b*(X/{cx}) - (X/{cx})**2*(Y/{cy}))"
        [parameters]
        a = {{ dist = "uniform", low = 0.5, high = 2 }}
        b = {{ dist = "uniform", low = 0.5, high = 5 }}
    """)
    params = brusselator_sets(40, seed=21)
    a, b = params.T
    plain = brusselator_run(models["brusselator"], params).trajectories
    other = long_run(rescaled, params, np.arange(40), np.column_stack([cx * a, cy * b / a]),
                     initial=np.array([cx * 1.0, cy * 1.0])).trajectories
    assert np.array_equal(plain.outcome, other.outcome)
    assert np.array_equal(plain.steady, other.steady)
    cyc = plain.outcome == CYCLES
    # equal up to the integration error and the match tolerance (1e-4 of the range: the
    # rescaled coefficients round differently, so the two runs stop at other returns)
    assert np.allclose(other.period[cyc], ct * plain.period[cyc], rtol=1e-5)
    assert np.allclose(other.high[cyc], [cx, cy] * plain.high[cyc], rtol=1e-4)
    # the multiplier is a rough estimate (a decayed kick near the noise), but < 1 in both
    assert np.all(other.multiplier[cyc] < 1) and np.all(plain.multiplier[cyc] < 1)
