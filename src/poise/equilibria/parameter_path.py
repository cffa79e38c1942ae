"""Homotopy paths through parameter space, for coefficients polynomial in the parameters.

Tracking from a start system to a target along a straight line in *coefficient* space
needs as many paths as a generic system with the same monomials has roots. A model's
parameters usually tie the coefficients together (a rate appears in several terms, a
conservation total in one), and then every target has fewer roots: the surplus paths
diverge at every parameter set, and paths to infinity are the most expensive kind.

Along a straight line in *parameter* space, ``p(s) = p_target + s (p_start - p_target)``
with a generic complex start ``p_start``, only as many paths are needed as a generic
member of the model's own family has roots, and every isolated root of the target is
the end of one of them with probability one (Morgan & Sommese 1989, "Coefficient-
parameter polynomial continuation", the parameter homotopy; Sommese & Wampler 2005,
ch. 7). The tracker needs ``c(p(s))`` for complex ``s``: when every coefficient is a
polynomial in the parameters, ``c(p(s))`` is a polynomial in ``s`` of at most their total
degree ``D``, whose coefficients are recovered exactly (to rounding) from values at the
``D + 1`` roots of unity by a discrete Fourier transform. Coefficients such as
``sqrt(K)`` or ``exp(E/T)`` are not polynomial (and have branch cuts for complex
arguments); such systems keep the coefficient-space line.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
import sympy

from poise.model.constants import floating_constants


@dataclass(frozen=True, eq=False)
class ParameterFamily:
    """Coefficients of a term table as polynomials in the parameters.

    Attributes
    ----------
    degree : int
        Largest total degree of a coefficient in the parameters (at least 1).
    evaluate : callable
        Complex parameter values (B, m) -> complex coefficients (B, q, K).
    """

    degree: int
    evaluate: Callable[[np.ndarray], np.ndarray]


def parameter_family(params: Sequence[sympy.Symbol],
                     exprs: Sequence[Sequence[sympy.Expr]]) -> ParameterFamily | None:
    """The family of a (q, K) grid of coefficient expressions, or None when some
    coefficient is not a polynomial in ``params`` (or there are no parameters)."""
    params = tuple(params)
    flat = [e for row in exprs for e in row]  # sympy coefficients of sympy.Poly, not text
    if not params or not flat:
        return None
    degree = 0
    for expr in flat:
        if expr.free_symbols - set(params) or not expr.is_polynomial(*params):
            return None
        if expr != 0:
            degree = max(degree, sympy.Poly(expr, *params).total_degree())
    shape = (len(exprs), len(exprs[0]))
    fn = sympy.lambdify(params, [floating_constants(e) for e in flat], modules="numpy", cse=True)

    def evaluate(values: np.ndarray) -> np.ndarray:
        values = np.asarray(values, dtype=complex)
        out = np.empty((values.shape[0], len(flat)), dtype=complex)
        with np.errstate(all="ignore"):
            for idx, v in enumerate(fn(*values.T)):
                out[:, idx] = v  # constants broadcast over the batch
        return out.reshape((values.shape[0],) + shape)

    return ParameterFamily(degree=max(degree, 1), evaluate=evaluate)


def along_line(family: ParameterFamily, target: np.ndarray, start: np.ndarray) -> np.ndarray:
    """Coefficients of ``c(target + s (start - target))`` as polynomials in ``s``.

    ``target`` and ``start`` are (B, m) parameter values (``start`` complex). Returns
    ``C`` of shape (B, q, K, D + 1) with ``c(s) = sum_m C[..., m] s**m``.
    """
    points = family.degree + 1
    nodes = np.exp(2j * np.pi * np.arange(points) / points)
    target = np.asarray(target, dtype=complex)
    step = np.asarray(start, dtype=complex) - target
    B, m = target.shape
    values = family.evaluate((target[:, None, :] + nodes[None, :, None] * step[:, None, :]).reshape(-1, m))
    values = values.reshape((B, points) + values.shape[1:])      # (B, D+1, q, K)
    # values at the roots of unity -> polynomial coefficients (inverse DFT)
    return np.moveaxis(np.fft.fft(values, axis=1) / points, 1, -1)
