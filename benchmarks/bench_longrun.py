"""Speed of poise's batched long-run simulation against a per-set `solve_ivp` loop.

For each model, parameter sets are drawn from a box and their steady states found
(closed form for the Brusselator, poise's finder for the curated SBML models). Both
methods follow the same starts (the initial state, and small displacements of each
unstable steady state along its unstable directions) and classify each trajectory
(settles at a stable steady state / periodic orbit / undetermined):

* poise: `poise.longrun.long_run` on the whole batch (one Rosenbrock step per
  trajectory per pass, classification while integrating);
* loop: for each trajectory in turn, `scipy.integrate.solve_ivp` (LSODA, analytic
  Jacobian from the same kernels, the same relative tolerance) up to twice the time at
  which poise stopped that trajectory (an advantage for the loop: it is told how far to
  go; without online tests it would need the whole horizon), then the same tests on the
  result: the end point within 1e-4 of a stable steady
  state; else upward crossings of the middle of the most varying state's range over
  the second half, the last three periods equal to 1e-4; and for an orbit, a second
  `solve_ivp` from the last crossing kicked by 1 % within the section, whose returns
  must approach the orbit (to a tenth of the kick, or by 0.1 % per period).

The loop runs on a random subsample of the sets (`--loop-sets`); rates are sets per
second. poise is timed on all sets and on the loop's subsample alone (a small batch
shows the fixed cost per pass). Everything runs on one core (thread counts set to 1
before numpy is imported). Timings depend on the machine; this is not a test.

Usage::

    PYTHONPATH=src python benchmarks/bench_longrun.py [--sets 1000] [--loop-sets 30] [--seed 0]
        [--models brusselator,circadian,cellcycle]
"""

from __future__ import annotations

import os

for _name in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
              "NUMEXPR_NUM_THREADS", "VECLIB_MAXIMUM_THREADS"):
    os.environ[_name] = "1"

import argparse  # noqa: E402
import tempfile  # noqa: E402
import textwrap  # noqa: E402
from collections import Counter  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402
from scipy.integrate import solve_ivp  # noqa: E402

import poise  # noqa: E402
from poise.equilibria.finder import find_steady_states  # noqa: E402
from poise.longrun import CYCLES, OUTCOME_NAMES, SETTLES, UNDETERMINED, Settings, long_run  # noqa: E402
from poise.model import compile_model  # noqa: E402

BIOMODELS = Path(__file__).resolve().parents[2] / "shared" / "data" / "biomodels"

STUDIES = {
    "brusselator": """
        title = "Brusselator"
        [model]
        states = ["x", "y"]
        [model.ode]
        x = "a - (b + 1)*x + x**2*y"
        y = "b*x - x**2*y"
        [parameters]
        a = { dist = "uniform", low = 0.5, high = 2 }
        b = { dist = "uniform", low = 0.5, high = 5 }
    """,
    # Goldbeter (1995) circadian clock, two rates +-30 % around their published values
    "circadian": f"""
        title = "circadian clock"
        [model]
        sbml = "{BIOMODELS / 'BIOMD0000000016.xml'}"
        [parameters]
        rM_Vs = {{ dist = "uniform", low = 0.53, high = 0.99 }}
        rVd_Vd = {{ dist = "uniform", low = 0.66, high = 1.24 }}
    """,
    # Tyson (1991) cell cycle, 6 species with rates six decades apart (stiff)
    "cellcycle": f"""
        title = "cell cycle"
        [model]
        sbml = "{BIOMODELS / 'BIOMD0000000005.xml'}"
        [parameters]
        Reaction9_k4 = {{ dist = "uniform", low = 150, high = 250 }}
        Reaction1_k6 = {{ dist = "uniform", low = 0.8, high = 1.2 }}
    """,
}
INITIAL = {"brusselator": np.array([1.0, 1.0])}


def prepare(name, sets, seed, folder):
    path = Path(folder) / f"{name}.toml"
    path.write_text(textwrap.dedent(STUDIES[name]), encoding="utf-8")
    study = poise.load_study(path)
    model = compile_model(study)
    lows = np.array([study.uncertain[p].ppf(0.0) for p in model.varying])
    highs = np.array([study.uncertain[p].ppf(1.0) for p in model.varying])
    params = np.random.default_rng(seed).uniform(lows, highs, (sets, len(lows)))
    if name == "brusselator":
        a, b = params.T
        owner, free = np.arange(sets), np.column_stack([a, b / a])
    else:
        found = find_steady_states(model.kernels, params, model.domain_low,
                                   model.domain_high)
        owner, free = found.owner, found.free
    if name in INITIAL:
        x0 = INITIAL[name]
    else:
        x0 = np.array([study.initial[s] for s in study.states])[list(model.kernels.free_columns)]
    return model, params, owner, free, x0


def run_poise(model, params, owner, free, x0):
    start = time.perf_counter()
    run = long_run(model.kernels, params, owner, free, initial=x0, domain_low=model.domain_low,
                   domain_high=model.domain_high)
    return run, time.perf_counter() - start


def loop_one(kernels, p, x0, t_end, steady, stable, rtol, period_hint):
    """One trajectory with solve_ivp and the same tests; returns (outcome, period)."""
    P = p[None, :]

    def f(t, x):
        return kernels.rhs(x[None, :], P)[0]

    def jac(t, x):
        return kernels.jacobian(x[None, :], P)[0]

    size = np.maximum(np.abs(steady).max(axis=0, initial=0.0), np.abs(x0))
    atol = 1e-9 * np.where(size > 0, size, 1.0)
    sol = solve_ivp(f, (0, t_end), x0, method="LSODA", rtol=rtol, atol=atol, jac=jac, dense_output=True)
    end = sol.y[:, -1]
    peak = np.abs(sol.y).max(axis=1)
    for x_star, ok in zip(steady, stable):
        if ok and np.all(np.abs(end - x_star) <= 1e-4 * np.maximum(peak, np.abs(x_star))):
            return SETTLES, np.nan
    t = np.linspace(t_end / 2, t_end, 20_001)
    y = sol.sol(t)
    relative = np.ptp(y, axis=1) / np.maximum(np.abs(y).max(axis=1), 1e-300)
    j = int(np.argmax(relative))
    level = 0.5 * (y[j].max() + y[j].min())
    up = np.flatnonzero((y[j][:-1] < level) & (y[j][1:] >= level))
    if up.size < 4:
        return UNDETERMINED, np.nan
    times = t[up] + (level - y[j][up]) / (y[j][up + 1] - y[j][up]) * (t[1] - t[0])
    periods = np.diff(times)[-3:]
    if np.ptp(periods) > 1e-4 * periods[-1]:
        return UNDETERMINED, np.nan
    period = periods[-1]
    # attraction: kick the last crossing by 1 % of the ranges within the section
    point = sol.sol(times[-1])
    kick = 0.01 * np.ptp(y, axis=1) * np.where(np.arange(len(point)) % 2 == 0, 1.0, -1.0)
    kick[j] = 0.0

    def section(t, x):
        return x[j] - level
    section.direction = 1
    again = solve_ivp(f, (0, 8.5 * period), point + kick, method="LSODA", rtol=rtol, atol=atol, jac=jac,
                      events=section)
    returns = again.y_events[0]
    scale = np.maximum(np.ptp(y, axis=1), 1e-300)
    if returns.shape[0] < 2:
        return UNDETERMINED, period
    distance = np.max(np.abs(returns - point) / scale, axis=1)
    # the kick decayed to a tenth, or shrank by more than 0.1 % per period
    if distance[-1] < 0.1 * np.max(np.abs(kick) / scale) or \
            (distance[-1] / distance[0]) ** (1 / (returns.shape[0] - 1)) < 1 - 1e-3:
        return CYCLES, period
    return UNDETERMINED, period


def run_loop(model, params, owner, free, x0, run, pick):
    kernels = model.kernels
    steady = run.steady
    tr = run.trajectories
    rows = np.flatnonzero(np.isin(tr.starts.owner, pick))
    outcomes, periods = np.empty(rows.size, np.int8), np.empty(rows.size)
    start = time.perf_counter()
    for i, row in enumerate(rows):          # the per-set loop being measured
        s = tr.starts.owner[row]
        mine = steady.owner == s
        outcomes[i], periods[i] = loop_one(kernels, params[s], tr.starts.x[row], 2 * tr.time[row],
                                           steady.free[mine], steady.stable[mine], Settings().rtol, tr.period[row])
    return rows, outcomes, periods, time.perf_counter() - start


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sets", type=int, default=1000)
    parser.add_argument("--loop-sets", type=int, default=30)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--models", default="brusselator,circadian,cellcycle")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as folder:
        for name in args.models.split(","):
            model, params, owner, free, x0 = prepare(name, args.sets, args.seed, folder)
            run_poise(model, params[:2], owner[owner < 2], free[owner < 2], x0)   # compile, warm caches
            run, seconds = run_poise(model, params, owner, free, x0)
            pick = np.sort(np.random.default_rng(args.seed + 1).choice(args.sets, args.loop_sets, replace=False))
            keep = np.isin(owner, pick)
            remap = np.full(args.sets, -1)
            remap[pick] = np.arange(pick.size)
            small, small_seconds = run_poise(model, params[pick], remap[owner[keep]], free[keep], x0)
            rows, outcomes, periods, loop_seconds = run_loop(model, params, owner, free, x0, run, pick)
            tr = run.trajectories
            same = np.mean(outcomes == tr.outcome[rows])
            both = (outcomes == CYCLES) & (tr.outcome[rows] == CYCLES)
            gap = np.nanmax(np.abs(periods[both] / tr.period[rows][both] - 1)) if both.any() else np.nan
            rate, small_rate, loop_rate = args.sets / seconds, pick.size / small_seconds, pick.size / loop_seconds
            counts = {k: int(np.sum(tr.outcome == code)) for k, code in
                      (("settles", SETTLES), ("cycles", CYCLES), ("undetermined", UNDETERMINED))}
            print(f"{name}: {tr.count} trajectories over {args.sets} sets {counts}, "
                  f"mean steps {tr.steps.mean():.0f}")
            print(f"  poise, all sets     {rate:9.1f} sets/s ({seconds:.2f} s)")
            print(f"  poise, {pick.size} sets      {small_rate:9.1f} sets/s ({small_seconds:.2f} s)")
            print(f"  solve_ivp loop      {loop_rate:9.1f} sets/s ({loop_seconds:.2f} s for {pick.size} sets)")
            print(f"  ratio {rate / loop_rate:.1f}x (same batch as the loop: {small_rate / loop_rate:.1f}x); "
                  f"same outcome on {same:.1%} of the loop's trajectories, periods within {gap:.1e}")
            differ = outcomes != tr.outcome[rows]
            if differ.any():
                pairs = Counter(zip(np.asarray(OUTCOME_NAMES)[tr.outcome[rows][differ]],
                                    np.asarray(OUTCOME_NAMES)[outcomes[differ]]))
                print("  (poise, loop) where they differ:", dict(pairs))


if __name__ == "__main__":
    main()
