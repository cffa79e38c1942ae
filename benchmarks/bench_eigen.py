"""Throughput of poise.stability.classify on stacks of small Jacobians.

Compares, in one process and on the same stack of B random matrices:

* ``classify(stack)``: eigenvalues (closed forms for d = 2, 3) plus the class rules;
* ``np.linalg.eigvals(stack)``: batched LAPACK eigenvalues alone, no classification;
* a Python loop calling ``np.linalg.eigvals`` on one matrix at a time.

Run:  PYTHONPATH=src python benchmarks/bench_eigen.py [--size B] [--repeat R]
Not a test: timings depend on the machine and its load.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from poise.stability import classify


def best_time(func, repeat: int) -> float:
    """Shortest wall time of `repeat` calls (least disturbed by other load)."""
    best = np.inf
    for _ in range(repeat):
        start = time.perf_counter()
        func()
        best = min(best, time.perf_counter() - start)
    return best


def per_matrix_loop(stack: np.ndarray) -> list:
    return [np.linalg.eigvals(mat) for mat in stack]


def stacks(rng: np.random.Generator, size: int, dim: int) -> dict[str, np.ndarray]:
    plain = rng.standard_normal((size, dim, dim))
    # entries spread over six decades: the 3x3 closed form hands more to LAPACK here
    spread = plain * 10.0 ** rng.uniform(-3, 3, (size, dim, dim))
    return {"N(0,1) entries": plain, "entries over 6 decades": spread}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=100_000, help="matrices per stack")
    parser.add_argument("--repeat", type=int, default=3, help="timed runs, best kept")
    args = parser.parse_args()
    rng = np.random.default_rng(0)

    print(f"B = {args.size:,} matrices per stack; best of {args.repeat} runs")
    header = (f"{'d':>2}  {'stack':<24}{'classify /s':>14}{'eigvals /s':>14}"
              f"{'loop /s':>12}{'vs eigvals':>12}{'vs loop':>10}")
    print(header)
    print("-" * len(header))
    for dim in (2, 3):
        for label, stack in stacks(rng, args.size, dim).items():
            t_classify = best_time(lambda: classify(stack), args.repeat)
            t_batched = best_time(lambda: np.linalg.eigvals(stack), args.repeat)
            t_loop = best_time(lambda: per_matrix_loop(stack), 1)
            rate = args.size / np.array([t_classify, t_batched, t_loop])
            print(f"{dim:>2}  {label:<24}{rate[0]:>14,.0f}{rate[1]:>14,.0f}{rate[2]:>12,.0f}"
                  f"{t_batched / t_classify:>11.2f}x{t_loop / t_classify:>9.1f}x")
    print("\nvs eigvals / vs loop: how many times faster classify is (> 1 = faster);")
    print("classify also applies the class rules, the baselines only compute eigenvalues.")


if __name__ == "__main__":
    main()
