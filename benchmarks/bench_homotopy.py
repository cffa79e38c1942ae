"""Homotopy continuation vs multistart Newton: throughput and completeness.

Part 1, the bundled studies in `configs/` (parameter sets drawn from each study's own
distributions): poise's batched Newton (`find_steady_states`, the study defaults) and
poise's homotopy (`find_by_homotopy` with the 64 hubs a run uses), side by side. The
truth is the closed form from `bench_throughput.py` (reef, toggle switch, phosphorylation
cycle); the SBML enzyme reactor has none, so there the two methods are compared with each
other. Rates are the best of ``--repeat`` runs after a warm-up (compilation, start solve
and hubs are paid once per process and reported separately as "set-up"). Each study also gets the counted work behind
`solver.method = "auto"` (Newton iterations and homotopy evaluations per set), the cost
of one evaluation in Newton iterations measured here, and what auto picks.

Part 2, two synthetic models with many steady states:

* toggle switch, Hill exponent 3: u' = a1/(1 + v^3) - u, v' = a2/(1 + u^3) - v
  (steady states with u, v >= 0 count);
* coupled cubics, up to 9 real steady states: x' = a1 x - x^3 + c y, y' = a2 y - y^3 + c x.

The reference steady states of every parameter set come from elimination (the toggle
switch's univariate polynomial, the sympy resultant of the cubics) and numpy.roots.
A method is complete on a set when it finds exactly the reference steady states.

Methods: `poise.equilibria.homotopy.solve_batch`; a loop of `scipy.optimize.root`
from random starts per set; and poise's batched Newton with deflation
(`poise.equilibria.finder.find_steady_states`) when it can be imported.

Usage::

    PYTHONPATH=src python benchmarks/bench_homotopy.py [--sets 4000] [--loop-sets 300]
        [--starts 30] [--seed 0] [--repeat 3]
"""

from __future__ import annotations

import argparse
import dataclasses
import time
from dataclasses import dataclass
from typing import Callable

import numpy as np
import sympy
from scipy.optimize import root

from poise.equilibria.choice import EVALUATION_COST, choose, polynomial_system
from poise.equilibria.continuation import SEED, find_by_homotopy, hub_parameters
from poise.equilibria.finder import find_steady_states, newton_work
from poise.equilibria.homotopy import generic_root_count, paths_per_set, solve_batch
from poise.equilibria.polynomial import polynomial_form
from poise.model import compile_model
from poise.sampling import make_design, map_to_parameters
from poise.study.loader import load_study

from bench_throughput import CONFIGS, STUDIES, all_values, score

u, v, x, y = sympy.symbols("u v x y", real=True)
a1, a2, c = sympy.symbols("a1 a2 c", real=True)


@dataclass
class Case:
    name: str
    states: tuple
    params: tuple
    rhs: tuple
    sample: Callable[[np.random.Generator, int], np.ndarray]
    reference: Callable[[np.ndarray], np.ndarray]   # (m,) -> (R, n) real steady states
    box: tuple[float, float]                         # start box for multistart
    nonnegative: bool                                # domain: states >= 0, else all reals


def _real(roots: np.ndarray) -> np.ndarray:
    keep = np.abs(roots.imag) <= 1e-7 * (1 + np.abs(roots))
    return np.sort(roots[keep].real)


def _toggle_reference(p: np.ndarray) -> np.ndarray:
    P = np.polynomial.Polynomial
    q = P([1.0, 0.0, 0.0, 1.0])
    us = _real((p[0] * q**3 - P([0.0, 1.0]) * (q**3 + p[1] ** 3)).roots())
    return np.column_stack([us, p[1] / (1 + us**3)])


def _cubics_reference_factory():
    f1 = a1 * x - x**3 + c * y
    f2 = a2 * y - y**3 + c * x
    coefficients = sympy.lambdify([a1, a2, c], sympy.Poly(sympy.resultant(f1, f2, y), x).all_coeffs())

    def reference(p: np.ndarray) -> np.ndarray:
        xs = _real(np.roots(np.array(coefficients(*p), dtype=float)))
        ys = (xs**3 - p[0] * xs) / p[2]
        pts = np.column_stack([xs, ys])
        for _ in range(3):  # Newton polish of the back-substituted y (ill-conditioned for small c)
            X, Y = pts[:, 0], pts[:, 1]
            F = np.stack([p[0] * X - X**3 + p[2] * Y, p[1] * Y - Y**3 + p[2] * X], axis=-1)
            J = np.empty((len(X), 2, 2))
            J[:, 0, 0], J[:, 0, 1] = p[0] - 3 * X**2, p[2]
            J[:, 1, 0], J[:, 1, 1] = p[2], p[1] - 3 * Y**2
            pts = pts - np.linalg.solve(J, F[..., None])[..., 0]
        return pts

    return reference


def _cases() -> list[Case]:
    def toggle_sample(rng, size):
        return rng.uniform(0.5, 5.0, size=(size, 2))

    def cubics_sample(rng, size):
        coupling = rng.uniform(0.02, 0.6, size) * rng.choice([-1.0, 1.0], size)
        return np.column_stack([rng.uniform(0.2, 2.0, size), rng.uniform(0.2, 2.0, size), coupling])

    return [
        Case("toggle switch (Hill 3)", (u, v), (a1, a2),
             (a1 / (1 + v**3) - u, a2 / (1 + u**3) - v), toggle_sample, _toggle_reference,
             (0.0, 6.0), True),
        Case("coupled cubics (<= 9)", (x, y), (a1, a2, c),
             (a1 * x - x**3 + c * y, a2 * y - y**3 + c * x), cubics_sample,
             _cubics_reference_factory(), (-2.5, 2.5), False),
    ]


def _in_domain(points: np.ndarray, nonnegative: bool) -> np.ndarray:
    if not nonnegative or len(points) == 0:
        return points
    return points[(points >= -1e-9).all(axis=1)]


def _complete(found: np.ndarray, expected: np.ndarray) -> bool:
    if len(found) != len(expected):
        return False
    if len(found) == 0:
        return True
    gap = np.abs(found[:, None, :] - expected[None, :, :]).max(axis=-1)
    return bool((gap.min(axis=0) <= 1e-6 * (1 + np.abs(expected).max(axis=1))).all())


def _run_homotopy(case: Case, params: np.ndarray, seed: int, repeat: int):
    system = polynomial_form(case.rhs, case.states, case.params)
    hubs = case.sample(np.random.default_rng([seed, 64]), 64)  # 64 hubs, as a run uses
    t0 = time.perf_counter()
    solve_batch(system, params[:8], seed=seed, hubs=hubs)
    setup = time.perf_counter() - t0
    result, elapsed = _best_time(lambda: solve_batch(system, params, seed=seed, hubs=hubs), repeat)
    found = [result.roots[i, :result.count[i]] for i in range(len(params))]
    note = (f"{paths_per_set(system, hubs, seed=seed)} paths/set from 64 hubs "
            f"({generic_root_count(system, seed=seed)} generic), set-up {setup:.2f} s, "
            f"status!=0: {(result.status != 0).sum()}")
    return found, elapsed, note


def _run_scipy(case: Case, params: np.ndarray, starts: int, seed: int):
    f = sympy.lambdify([case.states, case.params], list(case.rhs), "numpy")
    jac = sympy.lambdify([case.states, case.params],
                         sympy.Matrix(case.rhs).jacobian(sympy.Matrix(case.states)), "numpy")
    rng = np.random.default_rng(seed)
    low, high = case.box
    found = []
    t0 = time.perf_counter()
    for p in params:  # the reference loop: one scipy call per start and set
        roots: list[np.ndarray] = []
        for x0 in rng.uniform(low, high, size=(starts, len(case.states))):
            sol = root(lambda s: f(s, p), x0, jac=lambda s: np.array(jac(s, p), dtype=float),
                       method="hybr")
            if not (sol.success and np.isfinite(sol.x).all()):
                continue
            if np.max(np.abs(f(sol.x, p))) > 1e-9 * (1 + np.abs(sol.x).max() ** 3):
                continue
            if all(np.abs(sol.x - r).max() > 1e-7 * (1 + np.abs(r).max()) for r in roots):
                roots.append(sol.x)
        found.append(np.array(roots).reshape(-1, len(case.states)))
    elapsed = time.perf_counter() - t0
    return found, elapsed, f"{starts} starts/set in [{low}, {high}]^n, method hybr"


def _run_poise_newton(case: Case, params: np.ndarray, repeat: int):
    try:
        from poise.equilibria.finder import find_steady_states
        from poise.model.kernels import compile_kernels
        from poise.model.scales import scale_kernels
        from poise.model.system import ReducedSystem
    except Exception as exc:  # the Newton stack is developed in parallel
        return None, None, f"not available ({type(exc).__name__}: {exc})"
    names = tuple(str(s) for s in case.states)
    low = 0.0 if case.nonnegative else -np.inf
    reduced = ReducedSystem(states=names, free=names, eliminated={}, rhs=tuple(case.rhs),
                            parameters=tuple(str(p) for p in case.params),
                            domain={s: (low, np.inf) for s in names},
                            scales={s: None for s in names})
    kernels = dataclasses.replace(compile_kernels(reduced), **scale_kernels(reduced))
    box = (np.full(len(names), low), np.full(len(names), np.inf))
    find_steady_states(kernels, params[:8], *box)
    states, elapsed = _best_time(lambda: find_steady_states(kernels, params, *box), repeat)
    found = [states.free[states.owner == i] for i in range(len(params))]
    return found, elapsed, "find_steady_states defaults"



# ------------------------------------------------------------------ bundled studies

BUNDLED = ("reef_grazing", "toggle_switch", "phospho_cycle", "sbml_enzyme/study")


def _best_time(run: Callable[[], object], repeat: int) -> tuple[object, float]:
    best, result = np.inf, None
    for _ in range(repeat):
        t0 = time.perf_counter()
        result = run()
        best = min(best, time.perf_counter() - t0)
    return result, best


def _per_set(found, batch: int) -> list[np.ndarray]:
    bounds = np.searchsorted(found.owner, np.arange(batch + 1))
    return [found.full[bounds[i]:bounds[i + 1]] for i in range(batch)]


def bundled(sets: int, seed: int, repeat: int) -> None:
    print(f"bundled studies: {sets} parameter sets each, best of {repeat}")
    print(f"{'study':<16}{'method':<10}{'sets/s':>10}{'complete':>10}{'vs Newton':>11}  notes")
    for name in BUNDLED:
        study = load_study(CONFIGS / f"{name}.toml")
        model = compile_model(study)
        system = polynomial_system(model)
        design = make_design(tuple(study.uncertain), "random", sets, seed=seed, sobol_indices=False)
        params = map_to_parameters(design, study.uncertain)
        box = (model.domain_low, model.domain_high)
        hubs = hub_parameters(study.uncertain, model.varying)
        t0 = time.perf_counter()
        find_by_homotopy(model.kernels, system, params[:8], *box, hubs=hubs)
        setup = time.perf_counter() - t0
        find_steady_states(model.kernels, params[:8], *box)
        newton, t_newton = _best_time(lambda: find_steady_states(model.kernels, params, *box), repeat)
        homotopy, t_hom = _best_time(lambda: find_by_homotopy(model.kernels, system, params, *box,
                                                              hubs=hubs), repeat)
        by_newton, by_homotopy = _per_set(newton, sets), _per_set(homotopy, sets)
        label = name.split("/")[0]
        if label in STUDIES:
            truth = STUDIES[label](all_values(study, model, params))
            complete = [score(by_newton, truth)[0], score(by_homotopy, truth)[0]]
            reference = "closed form"
        else:  # no closed form: each method against the other
            complete = [score(by_newton, by_homotopy)[0], score(by_homotopy, by_newton)[0]]
            reference = "the other method"
        print(f"{label:<16}{'Newton':<10}{sets / t_newton:>10.0f}{100 * complete[0]:>9.2f}%{1.0:>11.2f}"
              f"  complete vs {reference}")
        print(f"{'':<16}{'homotopy':<10}{sets / t_hom:>10.0f}{100 * complete[1]:>9.2f}%{t_newton / t_hom:>11.2f}"
              f"  {paths_per_set(system, hubs)} paths/set ({generic_root_count(system)} generic), "
              f"set-up {setup:.2f} s")
        # counted work behind solver.method = "auto" (poise.equilibria.choice)
        iterations = newton_work(model.kernels, params, *box)
        evaluations = solve_batch(system, params, seed=SEED, hubs=hubs).evaluations.mean()
        chosen, estimate = choose(dataclasses.replace(study, solver=dataclasses.replace(study.solver, method="auto")),
                                  model)
        print(f"{'':<16}work/set: Newton {iterations:.0f} iterations, homotopy {evaluations:.0f} evaluations; "
              f"one evaluation costs {(t_hom / evaluations) / (t_newton / iterations):.1f} iterations here "
              f"(rule: {EVALUATION_COST:g}); auto picks {chosen} (predicted {estimate.predicted_speed:.2f}x)")
    print()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sets", type=int, default=4000, help="sets for poise's methods")
    parser.add_argument("--loop-sets", type=int, default=300, help="sets for the scipy loop")
    parser.add_argument("--starts", type=int, default=30)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    bundled(args.sets, args.seed, args.repeat)

    for case in _cases():
        rng = np.random.default_rng(args.seed)
        params = case.sample(rng, args.sets)
        expected = [_in_domain(case.reference(p), case.nonnegative) for p in params]
        loop = slice(0, min(args.loop_sets, args.sets))
        runs = {  # name: (found, seconds, note, number of sets)
            "poise batched Newton": (*_run_poise_newton(case, params, args.repeat), args.sets),
            "homotopy": (*_run_homotopy(case, params, args.seed, args.repeat), args.sets),
            "scipy root multistart": (*_run_scipy(case, params[loop], args.starts, args.seed),
                                      loop.stop),
        }
        newton_rate = args.sets / runs["poise batched Newton"][1]
        print(f"\n{case.name}: {args.sets} parameter sets ({loop.stop} for the scipy loop), "
              f"{np.mean([len(e) for e in expected]):.2f} steady states per set on average")
        print(f"{'method':<24}{'sets/s':>10}{'complete':>10}{'vs Newton':>11}  notes")
        for name, (found, elapsed, note, count) in runs.items():
            if found is None:
                print(f"{name:<24}{'-':>10}{'-':>10}{'-':>11}  {note}")
                continue
            rate = count / elapsed
            complete = np.mean([_complete(_in_domain(f, case.nonnegative), e)
                                for f, e in zip(found, expected[:count])])
            print(f"{name:<24}{rate:>10.1f}{100 * complete:>9.2f}%{rate / newton_rate:>11.2f}  {note}")


if __name__ == "__main__":
    main()
