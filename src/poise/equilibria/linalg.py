"""Batched solves of small linear systems, tolerant of singular members.

`numpy.linalg.solve` on a stack fails as a whole when one matrix is singular; here
each member succeeds or fails on its own, and tiny systems use closed forms, which
beat LAPACK calls on 1×1 to 3×3 matrices.
"""

from __future__ import annotations

import numpy as np


def solve_batch(a: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Solve a[k] @ x[k] = b[k] for every k.

    Parameters
    ----------
    a : (K, n, n) array
    b : (K, n) array

    Returns
    -------
    x : (K, n) array, NaN where the matrix is singular or not finite.
    ok : (K,) bool array
    """
    k, n = b.shape
    with np.errstate(all="ignore"):
        if n == 1:
            x = b / a[:, :, 0]
        elif n == 2:
            det = a[:, 0, 0] * a[:, 1, 1] - a[:, 0, 1] * a[:, 1, 0]
            x = np.empty_like(b)
            x[:, 0] = (b[:, 0] * a[:, 1, 1] - a[:, 0, 1] * b[:, 1]) / det
            x[:, 1] = (a[:, 0, 0] * b[:, 1] - b[:, 0] * a[:, 1, 0]) / det
        elif n == 3:
            c0, c1, c2 = a[:, :, 0], a[:, :, 1], a[:, :, 2]
            det = np.einsum("ki,ki->k", c0, np.cross(c1, c2))
            x = np.empty_like(b)
            x[:, 0] = np.einsum("ki,ki->k", b, np.cross(c1, c2)) / det
            x[:, 1] = np.einsum("ki,ki->k", c0, np.cross(b, c2)) / det
            x[:, 2] = np.einsum("ki,ki->k", c0, np.cross(c1, b)) / det
        else:
            x = np.full_like(b, np.nan)
            finite = np.isfinite(a).all(axis=(1, 2)) & np.isfinite(b).all(axis=1)
            if finite.any():
                scale = np.abs(a[finite]).max(axis=(1, 2))
                # Reject near-singular members before LAPACK sees them.
                conditioned = np.linalg.cond(a[finite]) < 1e14
                rows = np.flatnonzero(finite)[conditioned & (scale > 0)]
                if rows.size:
                    x[rows] = np.linalg.solve(a[rows], b[rows][..., None])[..., 0]
    ok = np.isfinite(x).all(axis=1)
    x[~ok] = np.nan
    return x, ok
