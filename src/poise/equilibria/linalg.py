"""Batched solves of small linear systems, tolerant of singular members.

`numpy.linalg.solve` on a stack fails as a whole when one matrix is singular; here
each member succeeds or fails on its own. Arrays are in row layout, the batch index
last, so that every operation below is elementwise over the batch: a member's result
never depends on the other members. 1×1 to 3×3 systems use closed forms (Cramer's
rule), which beat LAPACK calls on tiny matrices; larger ones use Gaussian elimination
with partial pivoting, vectorised over the batch.
"""

from __future__ import annotations

import numpy as np


def solve_rows(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Solve a[:, :, k] @ x[:, k] = b[:, k] for every k.

    Parameters
    ----------
    a : (n*n, K) array, the matrix entries row by row (a[i*n + j] is entry (i, j)).
    b : (n, K) array

    Returns
    -------
    x : (n, K) array; not finite where the matrix is singular or not finite.
    """
    n = b.shape[0]
    with np.errstate(all="ignore"):
        if n == 1:
            return b / a
        if n == 2:
            a00, a01, a10, a11 = a
            b0, b1 = b
            inverse = a00 * a11
            inverse -= a01 * a10
            np.divide(1.0, inverse, out=inverse)
            x = np.empty(b.shape)
            np.multiply(b0, a11, out=x[0])
            x[0] -= a01 * b1
            x[0] *= inverse
            np.multiply(a00, b1, out=x[1])
            x[1] -= b0 * a10
            x[1] *= inverse
            return x
        if n == 3:
            a00, a01, a02, a10, a11, a12, a20, a21, a22 = a
            c00 = a11 * a22 - a12 * a21
            c01 = a12 * a20 - a10 * a22
            c02 = a10 * a21 - a11 * a20
            det = a00 * c00 + a01 * c01 + a02 * c02
            b0, b1, b2 = b
            x0 = c00 * b0 + (a02 * a21 - a01 * a22) * b1 + (a01 * a12 - a02 * a11) * b2
            x1 = c01 * b0 + (a00 * a22 - a02 * a20) * b1 + (a02 * a10 - a00 * a12) * b2
            x2 = c02 * b0 + (a01 * a20 - a00 * a21) * b1 + (a00 * a11 - a01 * a10) * b2
            return np.stack([x0, x1, x2]) / det
        return _eliminate(a.reshape(n, n, -1), b)


def _eliminate(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Gaussian elimination with partial pivoting on (n, n, K) matrices."""
    n, count = b.shape
    m = np.concatenate([a, b[:, None, :]], axis=1)          # augmented (n, n+1, K)
    columns = np.arange(count)
    for j in range(n):
        pivot = j + np.argmax(np.abs(m[j:, j, :]), axis=0)    # (K,)
        row_j, row_p = m[j].copy(), m[pivot, :, columns].T
        m[j] = row_p
        m[pivot, :, columns] = row_j.T
        factor = m[j + 1:, j, :] / m[j, j, :]
        m[j + 1:] -= factor[:, None, :] * m[j][None, :, :]
    x = np.empty((n, count))
    for i in range(n - 1, -1, -1):
        x[i] = (m[i, n] - (m[i, i + 1:n] * x[i + 1:]).sum(axis=0)) / m[i, i]
    return x


def solve_batch(a: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Solve a[k] @ x[k] = b[k] for every k (batch-first layout).

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
    x = solve_rows(np.ascontiguousarray(a.reshape(k, n * n).T), np.ascontiguousarray(b.T)).T.copy()
    ok = np.isfinite(x).all(axis=1)
    x[~ok] = np.nan
    return x, ok
