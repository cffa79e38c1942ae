"""Homotopy continuation vs multistart Newton: throughput and completeness.

Two models with several steady states:

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

    PYTHONPATH=src python benchmarks/bench_homotopy.py [--sets 300] [--starts 30] [--seed 0]
"""

from __future__ import annotations

import argparse
import time
from dataclasses import dataclass
from typing import Callable

import numpy as np
import sympy
from scipy.optimize import root

from poise.equilibria.homotopy import generic_root_count, solve_batch
from poise.equilibria.polynomial import polynomial_form

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


def _run_homotopy(case: Case, params: np.ndarray, seed: int):
    system = polynomial_form(case.rhs, case.states, case.params)
    t0 = time.perf_counter()
    paths = generic_root_count(system, seed=seed)
    setup = time.perf_counter() - t0
    t0 = time.perf_counter()
    result = solve_batch(system, params, seed=seed)
    elapsed = time.perf_counter() - t0
    found = [result.roots[i, :result.count[i]] for i in range(len(params))]
    note = f"{paths} paths/set, start solve {setup:.2f} s, status!=0: {(result.status != 0).sum()}"
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


def _run_poise_newton(case: Case, params: np.ndarray):
    try:
        from poise.equilibria.finder import find_steady_states
        from poise.model.kernels import compile_kernels
        from poise.model.system import ReducedSystem
    except Exception as exc:  # the Newton stack is developed in parallel
        return None, None, f"not available ({type(exc).__name__}: {exc})"
    names = tuple(str(s) for s in case.states)
    low = 0.0 if case.nonnegative else -np.inf
    reduced = ReducedSystem(states=names, free=names, eliminated={}, rhs=tuple(case.rhs),
                            parameters=tuple(str(p) for p in case.params),
                            domain={s: (low, np.inf) for s in names},
                            scales={s: None for s in names})
    kernels = compile_kernels(reduced)
    t0 = time.perf_counter()
    states = find_steady_states(kernels, params, np.abs(params).max(axis=1),
                                np.full(len(names), low), np.full(len(names), np.inf))
    elapsed = time.perf_counter() - t0
    found = [states.free[states.owner == i] for i in range(len(params))]
    return found, elapsed, "find_steady_states defaults"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sets", type=int, default=300)
    parser.add_argument("--starts", type=int, default=30)
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args()

    for case in _cases():
        rng = np.random.default_rng(args.seed)
        params = case.sample(rng, args.sets)
        expected = [_in_domain(case.reference(p), case.nonnegative) for p in params]
        runs = {
            "homotopy": _run_homotopy(case, params, args.seed),
            "scipy root multistart": _run_scipy(case, params, args.starts, args.seed),
            "poise batched Newton": _run_poise_newton(case, params),
        }
        base = runs["homotopy"]
        base_rate = args.sets / base[1]
        print(f"\n{case.name}: {args.sets} parameter sets, "
              f"{np.mean([len(e) for e in expected]):.2f} steady states per set on average")
        print(f"{'method':<24}{'sets/s':>10}{'complete':>10}{'homotopy/this':>16}  notes")
        for name, (found, elapsed, note) in runs.items():
            if found is None:
                print(f"{name:<24}{'-':>10}{'-':>10}{'-':>16}  {note}")
                continue
            rate = args.sets / elapsed
            complete = np.mean([_complete(_in_domain(f, case.nonnegative), e)
                                for f, e in zip(found, expected)])
            print(f"{name:<24}{rate:>10.1f}{100 * complete:>9.1f}%{base_rate / rate:>16.2f}  {note}")


if __name__ == "__main__":
    main()
