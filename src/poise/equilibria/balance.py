"""Per-system units for homotopy continuation: states and equations rescaled so that
the coefficients of each polynomial system are as close to one as they can be.

With ``x = sigma * y`` and each equation multiplied by ``e_i``, coefficient ``c_ik`` of
monomial ``x^a_ik`` becomes ``e_i c_ik sigma^a_ik``. Choosing ``log sigma`` and
``log e`` to minimise ``sum (log|c_ik| + a_ik . log sigma + log e_i)^2`` is the
variable and equation scaling of Meintjes & Morgan (1987, "A methodology for solving
chemical equilibrium systems", Appl. Math. Comput. 22:333; also Morgan 1987, *Solving
Polynomial Systems Using Continuation*, ch. 5). Its roots ``y`` are then of order one
where the model's terms balance, whatever the model's units: rewriting a state in other
units shifts ``log sigma`` by exactly that factor and leaves the balanced system as it
was. Path tracking's tolerances and its test for a root "at infinity" are relative to
the size of the point, so they need exactly this: a root of 1e10 next to one of 1 is
lost, a root of 1 next to 1e-10 is not.
"""

from __future__ import annotations

import numpy as np

from poise.model.magnitudes import solve_levels

_LOG_LIMIT = 690.0


def balance(exponents: np.ndarray, live: np.ndarray, coefficients: np.ndarray) -> np.ndarray:
    """log sigma (B, n) balancing each system's coefficients.

    Parameters
    ----------
    exponents : (q, K, n+1) int, column 0 the homogenising exponent (ignored).
    live : (q, K) bool, terms that exist.
    coefficients : (B, q, K) real or complex; zero coefficients are left out.
    """
    q, K, nv = exponents.shape
    n = nv - 1
    rows = np.flatnonzero(live.ravel())
    A = np.zeros((rows.size, n + q))
    A[:, :n] = exponents.reshape(q * K, nv)[rows, 1:]
    A[np.arange(rows.size), n + rows // K] = 1.0
    with np.errstate(divide="ignore", invalid="ignore"):
        b = -np.log(np.abs(coefficients.reshape(len(coefficients), q * K)[:, rows]))
    b = np.where(np.isfinite(b), b, np.nan)
    return np.clip(solve_levels(A, b)[:, :n], -_LOG_LIMIT, _LOG_LIMIT)


def rescale(exponents: np.ndarray, coefficients: np.ndarray, log_sigma: np.ndarray,
            reference: np.ndarray | None = None) -> np.ndarray:
    """Coefficients in units ``x = sigma y``, each equation divided by its largest
    coefficient, computed in logarithms so that nothing overflows.

    ``coefficients`` (B, q, K, ...) may carry trailing axes (coefficients of powers of
    a path parameter); ``reference`` (B, q, K), default the coefficients themselves
    (first entry of the trailing axes), sets the equation's largest coefficient.
    """
    shift = np.einsum("ikj,bj->bik", exponents[:, :, 1:].astype(float), log_sigma)   # (B, q, K)
    reference = coefficients if reference is None else reference
    while reference.ndim > shift.ndim:
        reference = reference[..., 0]
    with np.errstate(divide="ignore", invalid="ignore"):
        size = np.log(np.abs(reference)) + shift
        top = np.max(np.where(np.isfinite(size), size, -np.inf), axis=2, keepdims=True)
        top = np.where(np.isfinite(top), top, 0.0)
        factor = np.exp(np.clip(shift - top, -_LOG_LIMIT, _LOG_LIMIT))
    while factor.ndim < coefficients.ndim:
        factor = factor[..., None]
    return coefficients * factor
