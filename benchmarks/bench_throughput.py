"""Throughput and completeness of poise's batched steady-state finder against a
textbook per-set loop, on the bundled studies in `configs/`.

For each study, parameter sets are drawn from the study's own distributions. Two
methods then find and classify every steady state in the domain:

* poise: `find_steady_states` on the whole batch, then the Jacobians and
  `poise.stability.classify` on every root (one vectorised pass);
* textbook loop: for each set in turn, `scipy.optimize.root` (method "hybr", analytic
  Jacobian lambdified from sympy) from a regular grid of starts over the box
  [0, 2 s]^n (s: the state's bound from the model where it has one, else the largest
  parameter value), de-duplication, the domain filter, and `numpy.linalg.eigvals` on
  each root's Jacobian.

The truth for every set is a closed form: the reef model's three candidate steady
states; for the toggle switch (Hill exponent 2) the real roots of the quintic in u
obtained by eliminating v, via `numpy.roots`; for the phosphorylation cycle the real
roots of the polynomial in X obtained by eliminating the complexes and Xp (sympy),
via `numpy.roots`. `--check-reference` also compares each closed form with a much
denser poise solve (256 Sobol starts, 8 deflation rounds). A method is *complete* on
a set when it finds every true steady state, and *exact* when it also reports
nothing else.

Everything runs on one core (thread counts are set to 1 before numpy is imported, and
numpy's elementwise work is single-threaded); each rate is the best of a few runs, as
other load on the machine only ever slows a run down. Timings depend on the machine; this is not a test.

Usage::

    PYTHONPATH=src python benchmarks/bench_throughput.py [--sets 2000] [--loop-sets 150]
        [--seed 0] [--repeat 5] [--loop-repeat 3] [--check-reference]
"""

from __future__ import annotations

import os

for _name in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
              "NUMEXPR_NUM_THREADS", "VECLIB_MAXIMUM_THREADS"):
    os.environ[_name] = "1"

import argparse  # noqa: E402
import itertools  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402
import sympy  # noqa: E402
from scipy.optimize import root  # noqa: E402

from poise.equilibria.finder import find_steady_states  # noqa: E402
from poise.model import compile_model  # noqa: E402
from poise.sampling import make_design, map_to_parameters  # noqa: E402
from poise.stability import classify  # noqa: E402
from poise.study.loader import load_study  # noqa: E402

CONFIGS = Path(__file__).resolve().parent.parent / "configs"
SAME = 1e-6          # relative distance under which two steady states are one


# ----------------------------------------------------------------------------- truth

def _reef_truth(values: dict[str, np.ndarray]) -> list[np.ndarray]:
    """Kelp-urchin model with a type II response: (0, 0), (cap, 0) and, when the urchins
    can grow on a full reef, the interior state k* = loss*half/(eff*graze - loss) with
    u* = r (1 - k*/cap)(half + k*)/graze (solve urchin' = 0 for k, then kelp' = 0)."""
    r, cap, graze, half = values["r"], values["cap"], values["graze"], values["half"]
    eff, loss = values["eff"], values["loss"]
    out = []
    for i in range(cap.size):
        states = [(0.0, 0.0), (cap[i], 0.0)]
        gain = eff[i] * graze[i] - loss[i]
        if gain > 0:
            k = loss[i] * half[i] / gain
            if k < cap[i]:
                states.append((k, r[i] * (1 - k / cap[i]) * (half[i] + k) / graze[i]))
        out.append(np.array(states))
    return out


def _toggle_truth(values: dict[str, np.ndarray]) -> list[np.ndarray]:
    """Mutual repression with Hill exponent 2. v = (leak + tv Ku²/(Ku² + u²))/decay;
    putting it into decay u (Kv² + v²) = leak (Kv² + v²) + tu Kv² and clearing the
    denominators gives a quintic in u whose real roots are the steady states."""
    assert np.all(values["n"] == 2), "the closed form assumes Hill exponent 2"
    P = np.polynomial.Polynomial
    out = []
    for i in range(values["decay"].size):
        leak, decay = values["leak"][i], values["decay"][i]
        tu, tv, ku, kv = values["top_u"][i], values["top_v"][i], values["Ku"][i], values["Kv"][i]
        d = P([ku**2, 0.0, 1.0])                       # Ku² + u²
        num = leak * d + tv * ku**2                    # decay v D
        kvd = kv**2 * decay**2 * d**2
        poly = (P([-leak, decay])) * (kvd + num**2) - tu * kvd
        us = _real_roots(poly.coef[::-1])
        us = us[us > 0]
        vs = (leak + tv * ku**2 / (ku**2 + us**2)) / decay
        out.append(np.column_stack([us, vs]))
    return out


def _phospho_truth_factory():
    """Single phosphorylation cycle with mass action through complexes. At a steady
    state C1 = kt X/(K1 + X) (K1 = (d1 + k1)/a1), k2 C2 = k1 C1, E1 = kt - C1,
    E2 = pt - C2, Xp = (d2 + k2) C2/(a2 E2); the substrate total then gives one rational
    equation in X, whose numerator is a polynomial (built here with sympy)."""
    X = sympy.Symbol("X")
    a1, d1, k1, a2, d2, k2, kt, pt, st = sympy.symbols("a1 d1 k1 a2 d2 k2 kt pt st")
    c1 = kt * X / ((d1 + k1) / a1 + X)
    c2 = k1 * c1 / k2
    xp = (d2 + k2) * c2 / (a2 * (pt - c2))
    numerator, _ = sympy.fraction(sympy.together(X + xp + c1 + c2 - st))
    coefficients = sympy.Poly(sympy.expand(numerator), X).all_coeffs()
    coefficient_fn = sympy.lambdify([a1, d1, k1, a2, d2, k2, kt, pt, st], coefficients)

    def truth(values: dict[str, np.ndarray]) -> list[np.ndarray]:
        out = []
        for i in range(values["a1"].size):
            p = [values[k][i] for k in ("a1", "d1", "k1", "a2", "d2", "k2",
                                        "kinase_total", "phosphatase_total", "substrate_total")]
            xs = _real_roots(np.array(coefficient_fn(*p), dtype=float))
            a1_, d1_, k1_, a2_, d2_, k2_, kt_, pt_, _ = p
            C1 = kt_ * xs / ((d1_ + k1_) / a1_ + xs)
            C2 = k1_ * C1 / k2_
            E1, E2 = kt_ - C1, pt_ - C2
            Xp = (d2_ + k2_) * C2 / (a2_ * E2)
            full = np.column_stack([xs, Xp, E1, C1, E2, C2])   # study order
            out.append(full[(full >= 0).all(axis=1)])
        return out

    return truth


def _real_roots(coefficients: np.ndarray) -> np.ndarray:
    """Real roots of a polynomial (highest power first), reference library numpy.roots."""
    roots = np.roots(coefficients)
    return np.sort(roots[np.abs(roots.imag) <= 1e-7 * (1 + np.abs(roots))].real)


STUDIES = {
    "reef_grazing": _reef_truth,
    "toggle_switch": _toggle_truth,
    "phospho_cycle": _phospho_truth_factory(),
}


# ----------------------------------------------------------------------------- methods

def run_poise(model, params: np.ndarray, settings) -> tuple[list[np.ndarray], float]:
    """poise: every steady state and its class, for the whole batch at once."""
    kernels = model.kernels
    start = time.perf_counter()
    found = find_steady_states(kernels, params, model.domain_low, model.domain_high,
                               starts=settings.get("starts", 0),
                               deflation_rounds=settings.get("deflation_rounds", 2),
                               max_iterations=settings.get("max_iterations", 60))
    at = params[found.owner]
    classify(kernels.jacobian(found.free, at), kernels.jacobian_terms(found.free, at))
    elapsed = time.perf_counter() - start
    bounds = np.searchsorted(found.owner, np.arange(params.shape[0] + 1))
    return [found.full[bounds[i]:bounds[i + 1]] for i in range(params.shape[0])], elapsed


class TextbookLoop:
    """The per-set loop a modeller would write with scipy."""

    def __init__(self, model, levels: int):
        system = model.system
        x, p = system.free_symbols, system.parameter_symbols
        self.rhs = sympy.lambdify([x, p], list(system.rhs), modules="numpy")
        self.jac = sympy.lambdify([x, p], system.jacobian, modules="numpy")
        self.model = model
        self.unit = np.array(list(itertools.product(np.linspace(0.0, 2.0, levels), repeat=len(x))))

    def box(self, params: np.ndarray) -> np.ndarray:
        """Upper corner of the start box per set: twice the model's bound on each state,
        else twice the largest parameter."""
        bound = np.abs(self.model.kernels.scales(params))
        largest = max((abs(v) for v in self.model.fixed_values.values()), default=0.0)
        fallback = np.maximum(1.0, np.maximum(largest, np.abs(params).max(axis=1, initial=0.0)))[:, None]
        return np.where(np.isfinite(bound) & (bound > 0), bound, fallback)

    def run(self, params: np.ndarray) -> tuple[list[np.ndarray], float]:
        kernels, low, high = self.model.kernels, self.model.domain_low, self.model.domain_high
        start = time.perf_counter()
        box = self.box(params)
        results = []
        for i in range(params.shape[0]):
            p = params[i]
            fun = lambda s: np.asarray(self.rhs(s, p), dtype=float)    # noqa: E731
            jac = lambda s: np.asarray(self.jac(s, p), dtype=float)    # noqa: E731
            roots: list[np.ndarray] = []
            for x0 in self.unit * box[i]:
                with np.errstate(all="ignore"):
                    sol = root(fun, x0, jac=jac, method="hybr")
                if not (sol.success and np.isfinite(sol.x).all()):
                    continue
                if any(np.all(np.abs(sol.x - r) <= SAME * (np.abs(sol.x) + np.abs(r) + box[i])) for r in roots):
                    continue
                roots.append(sol.x)
            free = np.array(roots).reshape(-1, kernels.n)
            full = kernels.full_states(free, np.repeat(p[None, :], len(free), axis=0))
            tol = 1e-9 * (1 + np.abs(full))
            inside = ((full >= low - tol) & (full <= high + tol)).all(axis=1)
            for r in free[inside]:
                np.linalg.eigvals(jac(r))
            results.append(full[inside])
        return results, time.perf_counter() - start


# ----------------------------------------------------------------------------- scoring

def score(found: list[np.ndarray], truth: list[np.ndarray]) -> tuple[float, float]:
    """Fractions of sets where every true steady state was found (complete), and where
    moreover nothing else was reported (exact)."""
    complete = exact = 0
    for mine, true in zip(found, truth):
        scale = 1e-6 * (1 + np.abs(true).max(initial=0.0))
        matched = [np.any(np.all(np.abs(mine - t) <= SAME * (np.abs(mine) + np.abs(t)) + scale, axis=1))
                   for t in true]
        if all(matched):
            complete += 1
            exact += len(mine) == len(true)
    return complete / len(truth), exact / len(truth)


def all_values(study, model, params: np.ndarray) -> dict[str, np.ndarray]:
    values = {k: np.full(params.shape[0], v) for k, v in model.fixed_values.items()}
    values.update({k: params[:, j] for j, k in enumerate(model.varying)})
    return values


def reference_check(model, params: np.ndarray, truth: list[np.ndarray]) -> int:
    """Sets where the closed form disagrees with a much denser poise solve (256 Sobol
    starts, 8 deflation rounds): a check on the closed forms themselves."""
    dense, _ = run_poise(model, params, {"starts": 256, "deflation_rounds": 8, "max_iterations": 100})
    return sum(score([d], [t]) != (1.0, 1.0) or score([t], [d]) != (1.0, 1.0) for d, t in zip(dense, truth))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sets", type=int, default=2000, help="parameter sets for poise")
    parser.add_argument("--loop-sets", type=int, default=150, help="of them, sets for the textbook loop")
    parser.add_argument("--levels", type=int, default=0, help="textbook grid levels per axis (0: 5 in 2-D, 3 in 3-D)")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--repeat", type=int, default=5, help="poise runs; the fastest counts")
    parser.add_argument("--loop-repeat", type=int, default=3, help="textbook runs; the fastest counts")
    parser.add_argument("--studies", nargs="*", default=list(STUDIES))
    parser.add_argument("--skip-loop", action="store_true")
    parser.add_argument("--check-reference", action="store_true",
                        help="also compare the closed forms with a dense poise solve")
    args = parser.parse_args()

    print(f"{args.sets} parameter sets per study (seed {args.seed}); the textbook loop on the first "
          f"{min(args.loop_sets, args.sets)}; one core; best of {args.repeat} (poise) and "
          f"{args.loop_repeat} (loop) runs")
    header = (f"{'study':<15}{'n':>2}{'poise sets/s':>13}{'loop sets/s':>12}{'ratio':>7}"
              f"{'poise complete/exact':>22}{'same subset':>13}{'loop complete/exact':>21}  sets by true count")
    rows = []
    for name in args.studies:
        study = load_study(CONFIGS / f"{name}.toml")
        model = compile_model(study)
        design = make_design(model.varying, "random", args.sets, args.seed, sobol_indices=False)
        params = map_to_parameters(design, study.uncertain)
        truth = STUDIES[name](all_values(study, model, params))

        run_poise(model, params[:50], {})                 # warm-up (first-call costs)
        found, elapsed = min((run_poise(model, params, {}) for _ in range(args.repeat)), key=lambda r: r[1])
        poise_rate = args.sets / elapsed
        poise_complete, poise_exact = score(found, truth)

        subset = slice(0, min(args.loop_sets, args.sets))
        sub_complete, sub_exact = score(found[subset], truth[subset])
        loop_rate = loop_complete = loop_exact = float("nan")
        if not args.skip_loop:
            loop = TextbookLoop(model, args.levels or (5 if model.dimension <= 2 else 3))
            loop_found, loop_elapsed = min((loop.run(params[subset]) for _ in range(args.loop_repeat)),
                                           key=lambda r: r[1])
            loop_rate = len(loop_found) / loop_elapsed
            loop_complete, loop_exact = score(loop_found, truth[subset])
        counts = np.bincount([len(t) for t in truth])
        line = (f"{name:<15}{model.dimension:>2}{poise_rate:>13.0f}{loop_rate:>12.1f}{poise_rate / loop_rate:>7.0f}"
                f"{poise_complete:>15.4f}/{poise_exact:.4f}{sub_complete:>7.3f}/{sub_exact:.3f}"
                f"{loop_complete:>15.3f}/{loop_exact:.3f}  "
                + " ".join(f"{k}:{c}" for k, c in enumerate(counts) if c))
        if args.check_reference:
            line += f"  closed form vs dense solve: {reference_check(model, params, truth)} sets differ"
        rows.append(line)
        print(line, flush=True)
    print()
    print(header)
    print("\n".join(rows))


if __name__ == "__main__":
    main()
