"""Is a steady state isolated, or does it lie on a curve (or surface) of steady states?

Only steady states whose Jacobian has a real zero eigenvalue can lie on a continuum.
For those, step a small distance h along the Jacobian's null vector v and solve
f(y) = 0 restricted to the hyperplane v · (y − y₀) = 0 through that point
(Gauss–Newton with the pseudo-inverse of the bordered Jacobian [J; vᵀ]). On a continuum
a solution exists about h away from the steady state; at an isolated degenerate steady
state (a fold) the restricted system has no root near it and the residual stays large.
"""

from __future__ import annotations

import numpy as np

from poise.model.kernels import Kernels

STEP = 1e-4          # h relative to |x| + 1
ITERATIONS = 12
RESIDUAL = 1e-9      # |f| relative to the size of f's terms


def on_continuum(kernels: Kernels, x: np.ndarray, params: np.ndarray, jacobians: np.ndarray,
                 candidates: np.ndarray) -> np.ndarray:
    """Which steady states lie on a continuum of steady states.

    Parameters
    ----------
    x : (R, n) steady states (free states); params : (R, m) their parameter sets.
    jacobians : (R, n, n); candidates : (R,) bool, those with a real zero eigenvalue.
    """
    result = np.zeros(x.shape[0], bool)
    rows = np.flatnonzero(candidates & np.isfinite(jacobians).all(axis=(1, 2)))
    if rows.size == 0 or x.shape[1] == 0:
        return result
    xr, pr = x[rows], params[rows]
    v = np.linalg.svd(jacobians[rows])[2][:, -1, :]                 # (K, n) null directions
    h = STEP * (np.abs(xr).max(axis=1) + 1.0)
    y0 = xr + h[:, None] * v
    y = y0.copy()
    with np.errstate(all="ignore"):
        for _ in range(ITERATIONS):
            f, jac = kernels.rhs_and_jacobian(y, pr)
            residual = np.concatenate([f, np.einsum("kn,kn->k", v, y - y0)[:, None]], axis=1)
            bordered = np.concatenate([jac, v[:, None, :]], axis=1)  # (K, n+1, n)
            step = np.einsum("knm,km->kn", np.linalg.pinv(bordered), residual)
            y = np.where(np.isfinite(step).all(axis=1)[:, None], y - step, y)
        f = kernels.rhs(y, pr)
        size = kernels.term_size(y, pr)
        solved = (np.abs(f) <= RESIDUAL * size + 1e-14 * (size.max(axis=1, keepdims=True) + 1.0)).all(axis=1)
    moved = np.linalg.norm(y - xr, axis=1) >= 0.5 * h
    result[rows] = solved & moved
    return result
