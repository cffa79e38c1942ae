"""The steady states a caller found, with what the long run needs from them.

Trajectories are matched against these (a trajectory "settles at steady state r"),
their eigenvalues set each parameter set's time scale, and their unstable directions
give starting points.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

# An eigenvalue's real part counts as zero within this fraction of the largest |eigenvalue|
# of its Jacobian: relative, so the verdict does not depend on the time unit.
ZERO_REAL_PART = 1e-8


@dataclass(frozen=True, eq=False)
class SteadyStates:
    """Steady states of a batch of parameter sets, in the model's free states.

    Attributes
    ----------
    owner : (R,) int array
        Index of each steady state's parameter set (row of the parameter array).
    free : (R, n) array
        The free states (after eliminating conserved totals), as the kernels use them.
    jacobian : (R, n, n) array
        The reduced Jacobian at each.
    eigenvalues : (R, n) complex array
    stable : (R,) bool array
        Every eigenvalue has a negative real part.
    unstable : (R,) bool array
        Some eigenvalue has a positive real part.
    """

    owner: np.ndarray
    free: np.ndarray
    jacobian: np.ndarray
    eigenvalues: np.ndarray
    stable: np.ndarray
    unstable: np.ndarray

    @property
    def count(self) -> int:
        return int(self.owner.size)


def as_parameter_array(params, m: int) -> np.ndarray:
    """Parameter sets as an (S, m) float array (a 1-D array is S sets of one parameter)."""
    params = np.asarray(params, dtype=float)
    if params.ndim == 1 and m == 1:
        params = params[:, None]
    if params.ndim != 2 or params.shape[1] != m:
        raise ValueError(f"expected parameter sets of shape (S, {m}), got {params.shape}")
    return params


def steady_states(kernels, params: np.ndarray, owner, free, jacobian=None) -> SteadyStates:
    """Bundle found steady states with their Jacobians, eigenvalues and stability.

    Parameters
    ----------
    kernels : poise.model.Kernels
    params : (S, m) array of the parameter sets.
    owner : (R,) index into `params` of each steady state.
    free : (R, n) free states of each.
    jacobian : (R, n, n) array, optional
        Computed with `kernels.jacobian` when not given.

    Returns
    -------
    SteadyStates
    """
    owner = np.asarray(owner, dtype=np.int64).reshape(-1)
    free = np.asarray(free, dtype=float).reshape(owner.size, kernels.n)
    if jacobian is None:
        jacobian = kernels.jacobian(free, params[owner]) if owner.size else np.zeros((0, kernels.n, kernels.n))
    jacobian = np.asarray(jacobian, dtype=float).reshape(owner.size, kernels.n, kernels.n)
    finite = np.isfinite(jacobian).all(axis=(1, 2))
    eigenvalues = np.full((owner.size, kernels.n), np.nan, dtype=complex)
    if finite.any():
        eigenvalues[finite] = np.linalg.eigvals(jacobian[finite])
    size = np.abs(eigenvalues).max(axis=1, initial=0.0)
    rightmost = eigenvalues.real.max(axis=1, initial=-np.inf)
    zero = ZERO_REAL_PART * size
    with np.errstate(invalid="ignore"):
        stable = finite & (rightmost < -zero)
        unstable = finite & (rightmost > zero)
    return SteadyStates(owner=owner, free=free, jacobian=jacobian, eigenvalues=eigenvalues,
                        stable=stable, unstable=unstable)


def state_sizes(steady: SteadyStates, n_sets: int, fallback: np.ndarray | None = None) -> np.ndarray:
    """Each state's own size in each set: its largest |value| over the set's steady states.

    Parameters
    ----------
    steady : SteadyStates
    n_sets : number of sets S.
    fallback : (S, n) array, optional
        Used where the steady states give no size (the state vanishes at every steady
        state, or the set has none), e.g. the initial state.

    Returns
    -------
    (S, n) array
        Positive sizes; NaN where the state has no size of its own.
    """
    n = steady.free.shape[1]
    sizes = np.zeros((n_sets, n))
    if steady.count:
        np.maximum.at(sizes, steady.owner, np.nan_to_num(np.abs(steady.free), nan=0.0, posinf=0.0))
    if fallback is not None:
        sizes = np.where(sizes > 0, sizes, np.abs(np.nan_to_num(fallback, nan=0.0)))
    return np.where(sizes > 0, sizes, np.nan)
