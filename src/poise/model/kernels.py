"""Numeric kernels compiled from the reduced system.

Each kernel takes X of shape (B, n) (free states) and P of shape (B, m) (varying
parameters) and returns arrays with the batch dimension first. They are generated
with `sympy.lambdify` from expressions poise built itself (never from user text) and
evaluate whole batches with numpy, so there is no Python loop over parameter sets.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import reduce as fold
from typing import Callable

import numpy as np
import sympy
from sympy.printing.numpy import NumPyPrinter
from sympy.printing.precedence import PRECEDENCE

from poise.model.constants import floating_constants
from poise.model.magnitudes import absolute_form
from poise.model.system import ReducedSystem

_MIN = sympy.Function("poise_min")
_MAX = sympy.Function("poise_max")
_NUMERIC = {
    "poise_min": lambda *args: fold(np.minimum, args),
    "poise_max": lambda *args: fold(np.maximum, args),
}


@dataclass(frozen=True)
class Kernels:
    """Vectorised f, J and helpers for one reduced system."""

    n: int
    m: int
    free_columns: tuple[int, ...]   # position of each free state among all states
    rhs: Callable[[np.ndarray, np.ndarray], np.ndarray]
    jacobian: Callable[[np.ndarray, np.ndarray], np.ndarray]
    rhs_and_jacobian: Callable[[np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray]]
    term_size: Callable[[np.ndarray, np.ndarray], np.ndarray]
    full_states: Callable[[np.ndarray, np.ndarray], np.ndarray]
    scales: Callable[[np.ndarray], np.ndarray]
    # Row layout for solvers: (n, K) state rows and (m, K) parameter rows in, an
    # (n + n*n, K) array out (f, then J row by row). Contiguous rows keep the many
    # elementwise operations of a Newton step cache-friendly.
    rhs_and_jacobian_rows: Callable[[np.ndarray, np.ndarray], np.ndarray] | None = None
    # Scale-aware helpers (`poise.model.scales`): typical state sizes P -> (B, n), and the
    # size of the terms of each Jacobian entry (B, n, n) and of each full state (B, N).
    sizes: Callable[[np.ndarray], np.ndarray] | None = None
    jacobian_terms: Callable[[np.ndarray, np.ndarray], np.ndarray] | None = None
    full_terms: Callable[[np.ndarray, np.ndarray], np.ndarray] | None = None
    # the model's own initial state (SBML), free states (n,), when it gives one: a start
    initial: np.ndarray | None = None


def compile_kernels(system: ReducedSystem) -> Kernels:
    """Compile f (reduced right-hand side), J (its Jacobian), the size of f's terms (for
    scale-aware residual tests), the full state vector, and per-state size bounds."""
    x = system.free_symbols
    p = system.parameter_symbols
    n, m = len(x), len(p)
    rhs = list(system.rhs)
    jac = _lazy(lambda: list(system.jacobian) if n else [])  # seconds on large models
    terms = lambda: [absolute_form(f) for f in rhs]  # noqa: E731
    state_symbols = {s: sympy.Symbol(s, real=True) for s in system.states}
    full = [system.eliminated.get(s, state_symbols[s]) for s in system.states]
    scale_exprs = [system.scales[s] if system.scales[s] is not None else sympy.nan for s in system.free]

    rhs_fn = _vector_kernel(x, p, rhs)
    jac_fn = _vector_kernel(x, p, jac)
    term_fn = _vector_kernel(x, p, terms)
    full_fn = _vector_kernel(x, p, full)
    scale_fn = _vector_kernel([], p, scale_exprs)

    both_fn = _vector_kernel(x, p, lambda: rhs + jac())  # one pass shares common subexpressions
    rows_fn = _row_kernel(x, p, lambda: rhs + jac())

    def jacobian(X: np.ndarray, P: np.ndarray) -> np.ndarray:
        return jac_fn(X, P).reshape(X.shape[0], n, n)

    def rhs_and_jacobian(X: np.ndarray, P: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        both = both_fn(X, P)
        return both[:, :n], both[:, n:].reshape(X.shape[0], n, n)

    free_columns = tuple(system.states.index(s) for s in system.free)
    return Kernels(n=n, m=m, free_columns=free_columns, rhs=rhs_fn, jacobian=jacobian,
                   rhs_and_jacobian=rhs_and_jacobian, term_size=term_fn,
                   full_states=full_fn, scales=lambda P: scale_fn(np.zeros((P.shape[0], 0)), P),
                   rhs_and_jacobian_rows=rows_fn)


def _vector_kernel(x, p, exprs) -> Callable[[np.ndarray, np.ndarray], np.ndarray]:
    """A function (X (B, n), P (B, m)) -> (B, len(exprs)) evaluating `exprs` (a list, or
    a function returning it, called when the kernel is first used)."""
    function = _lazy(lambda: _lambdify(x, p, exprs))

    def kernel(X: np.ndarray, P: np.ndarray) -> np.ndarray:
        batch = X.shape[0]
        if function() is None:
            return np.zeros((batch, 0))
        with np.errstate(all="ignore"):
            values = function()(*X.T, *P.T)
        out = np.empty((batch, len(values)))
        for j, value in enumerate(values):
            out[:, j] = _real(value)
        return out

    return kernel


def _lambdify(x, p, exprs, printer=None):
    listed = [_numeric_friendly(e) for e in (exprs() if callable(exprs) else exprs)]
    if not listed:
        return None
    options = {"printer": printer} if printer else {}
    return sympy.lambdify([*x, *p], listed, modules=[_NUMERIC, "numpy"], cse=True, **options)


def _lazy(build: Callable[[], Callable]) -> Callable[[], Callable]:
    """Generate a kernel's code on its first use: on a large model (hundreds of Jacobian
    entries) code generation takes seconds, and `poise check` uses no kernel."""
    built: list[Callable] = []

    def get() -> Callable:
        if not built:
            built.append(build())
        return built[0]

    return get


def _real(value):
    """A complex value (log or power of a negative number) is no real rate: NaN, so the
    set is recorded as failed instead of silently losing the imaginary part."""
    if isinstance(value, np.ndarray) and value.dtype.kind == "c" or isinstance(value, complex):
        value = np.where(np.imag(value) == 0, np.real(value), np.nan)
    return value


def _row_kernel(x, p, exprs) -> Callable[[np.ndarray, np.ndarray], np.ndarray]:
    """A function (XR (n, K), PR (m, K)) -> (len(exprs), K) evaluating `exprs`, with small
    integer powers written as products (numpy's general power is several times slower
    than a multiplication)."""
    function = _lazy(lambda: _lambdify(x, p, exprs, printer=_ProductPowerPrinter))

    def kernel(XR: np.ndarray, PR: np.ndarray) -> np.ndarray:
        if function() is None:
            return np.zeros((0, XR.shape[1]))
        with np.errstate(all="ignore"):
            values = function()(*XR, *PR)
            out = np.empty((len(values), XR.shape[1]))
            for j, value in enumerate(values):
                out[j] = _real(value)
        return out

    return kernel


class _ProductPowerPrinter(NumPyPrinter):
    """Prints x**k for integer 2 <= |k| <= 4 as repeated products (1/(...) when k < 0)."""

    def _print_Pow(self, expr, rational=False):
        base, exponent = expr.args
        if exponent.is_Integer and 2 <= abs(int(exponent)) <= 4 or exponent == -1:
            factor = self.parenthesize(base, PRECEDENCE["Mul"], strict=True)
            product = "*".join([factor] * abs(int(exponent)))
            return f"(1.0/({product}))" if exponent < 0 else f"({product})"
        return super()._print_Pow(expr, rational=rational)


def _numeric_friendly(expr: sympy.Expr) -> sympy.Expr:
    """Replace Min/Max by elementwise numpy versions (sympy prints them as reductions)."""
    expr = floating_constants(expr)
    return expr.replace(sympy.Min, lambda *a: _MIN(*a)).replace(sympy.Max, lambda *a: _MAX(*a))
