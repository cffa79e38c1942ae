"""Where the model's own initial state settles: pseudo-transient continuation.

Multistart Newton finds roots near its starts; a steady state that real trajectories
reach can still lie outside every start's basin (strongly nonlinear models with rates
over many decades, e.g. gene-regulation models read from SBML). Following the dynamics
from the model's initial state finds it: implicit Euler steps
``(I/dt - J) d = f``, ``x <- x + d``, with the step ``dt`` doubled after each step
(and quartered when a step would leave the domain), approach a stable steady state the
way a trajectory does and end with Newton's fast convergence (Kelley & Keyes 1998,
"Convergence analysis of pseudo-transient continuation", SIAM J. Numer. Anal. 35:508).
Steps grown by the fall of the residual instead (switched evolution relaxation) stalled
on a gene-regulation model, whose residual relative to each equation's terms stays
near one for most of the way. Each set's iterate is its own; the end points are starts for the Newton
search, which polishes, verifies and de-duplicates them like any other.

The residual is measured relative to the size of each equation's terms and the first
step from the fastest rate of the Jacobian's diagonal, so the iteration is the same in
any units of time and states.
"""

from __future__ import annotations

import numpy as np

from poise.equilibria.linalg import solve_rows
from poise.model.kernels import Kernels

ITERATIONS = 200
FIRST_STEP = 0.1          # first dt, in units of the fastest diagonal rate's time scale
GROWTH = 2.0              # dt's factor per step taken
SETTLED = 1e-9            # relative residual at which the iterate is handed to Newton


def settle(kernels: Kernels, params: np.ndarray, x0: np.ndarray, low: np.ndarray,
           high: np.ndarray) -> np.ndarray:
    """End points (B, n) of pseudo-transient continuation from ``x0`` (n,) for each set
    (rows of ``params``), kept inside [low, high] (free states). NaN where it failed."""
    batch, n = params.shape[0], kernels.n
    x = np.ascontiguousarray(np.broadcast_to(np.asarray(x0, float)[:, None], (n, batch))).copy()
    P = np.ascontiguousarray(params.T)
    lo, hi = low[:, None], high[:, None]
    failed = np.zeros(batch, bool)
    with np.errstate(all="ignore"):
        fj = kernels.rhs_and_jacobian_rows(x, P)
        residual = _residual(kernels, x, params, fj[:n])
        diagonal = np.abs(fj[n:].reshape(n, n, batch)[np.arange(n), np.arange(n)]).max(axis=0)
        dt = FIRST_STEP / np.where(diagonal > 0, diagonal, 1.0)
        failed |= ~(np.isfinite(residual) & np.isfinite(dt))
        live = np.flatnonzero(~failed & (residual > SETTLED))      # sets still moving
        for _ in range(ITERATIONS):
            if not live.size:
                break
            f, jac = fj[:n, live], -fj[n:, live].reshape(n, n, live.size)
            jac[np.arange(n), np.arange(n)] += 1.0 / dt[live]
            trial = x[:, live] + solve_rows(jac.reshape(n * n, live.size), f)
            step = (trial >= lo).all(axis=0) & (trial <= hi).all(axis=0) & np.isfinite(trial).all(axis=0)
            moved = live[step]
            x[:, moved] = trial[:, step]
            fj[:, moved] = kernels.rhs_and_jacobian_rows(x[:, moved], P[:, moved])
            residual[moved] = _residual(kernels, x[:, moved], params[moved], fj[:n, moved])
            # a step that left the domain is taken again four times shorter
            dt[live] *= np.where(step, GROWTH, 0.25)
            failed[live] |= ~np.isfinite(residual[live]) | ~(dt[live] > 0)
            live = live[~failed[live] & (residual[live] > SETTLED)]
    x = x.T
    x[failed | ~np.isfinite(x).all(axis=1)] = np.nan
    return x


def _residual(kernels: Kernels, x_rows: np.ndarray, params: np.ndarray, f_rows: np.ndarray) -> np.ndarray:
    """max_i |f_i| / (size of f_i's terms) per set."""
    size = kernels.term_size(x_rows.T, params).T
    relative = np.abs(f_rows) / np.where(size > 0, size, 1.0)
    return np.where(np.isfinite(relative).all(axis=0), relative.max(axis=0, initial=0.0), np.inf)
