"""Which coordinates of a steady state are exactly zero, and which lie in the domain.

A computed root never has a coordinate of exactly zero unless it started there, so
"is this state zero?" needs a rule. Comparing |x_i| with some typical size would make
the answer depend on the units (a state of 1e-6 in a model written in M is 1 in uM).
Instead a coordinate is zero when the model itself says so: setting it to exactly zero
must leave a steady state, every equation still balanced to `SNAP_RESIDUAL` of the
size of its terms (an invariant face such as x * g(y) = 0, or a root that sits at zero
for this parameter set). A genuinely small state fails that test, because its own
equation balances terms that involve it. An eliminated state (a conserved total minus
other states) is zero when it is below rounding of that difference.
"""

from __future__ import annotations

import numpy as np

from poise.model.kernels import Kernels

SNAP_RESIDUAL = 1e-10  # each |f_j| at the zeroed point, relative to the size of f_j's terms
NEAR_ZERO = 1e-3       # only coordinates below this fraction of the state's typical size are tried
ROUNDING = 1e-12       # an eliminated state below this fraction of its terms' size is rounding
DOMAIN_TOLERANCE = 1e-9  # a nonzero domain limit may be passed by this fraction of itself


def snap_zeros(kernels: Kernels, params: np.ndarray, owner: np.ndarray, x: np.ndarray,
               scale: np.ndarray):
    """Roots `x` (R, n) (free states) of sets `owner` with zero coordinates made exact.

    `scale` (B, n) is the typical size of each free state; it only preselects which
    coordinates to try. Returns the free states (R, n) and the full states (R, N).
    """
    x = np.array(x, dtype=float)
    P = params[owner]
    rows, cols = np.nonzero((np.abs(x) <= NEAR_ZERO * scale[owner]) & (x != 0))
    if rows.size:
        trial = x[rows].copy()
        trial[np.arange(rows.size), cols] = 0.0
        ok = _balanced(kernels, x[rows], trial, P[rows])
        snapped = x.copy()
        snapped[rows[ok], cols[ok]] = 0.0
        changed = np.flatnonzero((snapped != x).any(axis=1))
        together = _balanced(kernels, x[changed], snapped[changed], P[changed])
        x[changed[together]] = snapped[changed[together]]
    full = kernels.full_states(x, P)
    if kernels.full_terms is not None:
        with np.errstate(invalid="ignore"):
            full = np.where(np.abs(full) <= ROUNDING * kernels.full_terms(x, P), 0.0, full)
    return x, full


def _balanced(kernels: Kernels, before: np.ndarray, after: np.ndarray, P: np.ndarray) -> np.ndarray:
    """Whether `after` still satisfies every equation to SNAP_RESIDUAL of its terms."""
    with np.errstate(all="ignore"):
        f = kernels.rhs(after, P)
        size = np.maximum(kernels.term_size(before, P), kernels.term_size(after, P))
        return (np.abs(f) <= SNAP_RESIDUAL * size).all(axis=1)


def inside_domain(full: np.ndarray, low: np.ndarray, high: np.ndarray) -> np.ndarray:
    """Rows of `full` within [low, high]; a nonzero limit may be passed by rounding."""
    slack_low = DOMAIN_TOLERANCE * np.where(np.isfinite(low), np.abs(low), 0.0)
    slack_high = DOMAIN_TOLERANCE * np.where(np.isfinite(high), np.abs(high), 0.0)
    return ((full >= low - slack_low) & (full <= high + slack_high)).all(axis=1)


def own_units(kernels: Kernels, x: np.ndarray, params: np.ndarray) -> np.ndarray:
    """Each state's own size at steady states `x` (R, n): |x_i|, or the state's typical
    size where x_i is zero."""
    typical = np.ones_like(x) if kernels.sizes is None else np.abs(kernels.sizes(params))
    typical = np.where(np.isfinite(typical) & (typical > 0), typical, 1.0)
    return np.where(x != 0, np.abs(x), typical)


def equation_units(kernels: Kernels, x: np.ndarray, params: np.ndarray, jacobians: np.ndarray,
                   unit: np.ndarray) -> np.ndarray:
    """Each equation's own size at `x`: how much a move of one own unit (`unit`, (R, n))
    in each state can change it, from the size of the Jacobian's terms. (R, n), > 0."""
    terms = np.abs(jacobians) if kernels.jacobian_terms is None else kernels.jacobian_terms(x, params)
    with np.errstate(invalid="ignore", over="ignore"):
        size = np.einsum("kij,kj->ki", terms, unit)
    return np.maximum(np.where(np.isfinite(size), size, np.inf), np.finfo(float).tiny)
