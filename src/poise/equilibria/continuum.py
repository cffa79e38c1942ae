"""Is a steady state isolated, or does it lie on a curve (or surface) of steady states?

Only steady states whose Jacobian has a real zero eigenvalue can lie on a continuum.
For those, step a small distance h along the Jacobian's null vector v and solve
f(y) = 0 restricted to the hyperplane v · (y − y₀) = 0 through that point
(Gauss–Newton with the pseudo-inverse of the bordered Jacobian [J; vᵀ]). On a continuum
a solution exists about h away from the steady state; at an isolated degenerate steady
state (a fold) the restricted system has no root near it and the residual stays large.

Everything happens in the steady state's own units: each state measured by its own
size (its typical size where it is zero) and each equation by the size of its terms.
The null vector, the step and the distance moved are taken there, so the verdict does
not depend on the units of the model, and h is far larger than the root's accuracy.
"""

from __future__ import annotations

import numpy as np

from poise.equilibria.zeros import equation_units, own_units
from poise.model.kernels import Kernels

STEP = 1e-4          # h, relative to each state's own size
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
    unit = own_units(kernels, xr, pr)                                # (K, n)
    with np.errstate(all="ignore"):
        # each equation in units of how much a move of one own unit can change it
        rows_size = equation_units(kernels, xr, pr, jacobians[rows], unit)
        scaled = jacobians[rows] * unit[:, None, :] / rows_size[:, :, None]
        v = np.linalg.svd(np.nan_to_num(scaled))[2][:, -1, :]       # (K, n), own units
        v /= np.abs(v).max(axis=1, keepdims=True)
        y0 = xr + STEP * v * unit
        y = y0.copy()
        for _ in range(ITERATIONS):
            f, jac = kernels.rhs_and_jacobian(y, pr)
            residual = np.concatenate([f / rows_size, np.einsum("kn,kn->k", v, (y - y0) / unit)[:, None]], axis=1)
            bordered = np.concatenate([jac * unit[:, None, :] / rows_size[:, :, None], v[:, None, :]], axis=1)
            step = np.einsum("knm,km->kn", np.linalg.pinv(np.nan_to_num(bordered)), residual) * unit
            y = np.where(np.isfinite(step).all(axis=1)[:, None], y - step, y)
        f = kernels.rhs(y, pr)
        solved = (np.abs(f) <= RESIDUAL * kernels.term_size(y, pr)).all(axis=1)
        moved = np.abs((y - xr) / unit).max(axis=1) >= 0.5 * STEP
    result[rows] = solved & moved
    return result
