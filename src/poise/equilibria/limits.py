"""Steady states at the limits of double precision: flagged, never classified as if sure.

In a model that is nonlinear in its states, a steady state with values beyond about
1e±150 cannot have its squares and products formed without overflow or underflow (a
linear model forms none, and is solved exactly whatever its sizes; an evaluation that
overflows marks its set as not evaluable anyway). A steady state whose Jacobian,
measured in its own units, has a condition number beyond 1e14 is determined only to a
few digits: rounding alone could move its class. Such sets are reported as not
analysed, with the reason, instead of classified. Eigenvalues are computed on scaled
matrices and need no such limit.
"""

from __future__ import annotations

import numpy as np

from poise.equilibria.zeros import equation_units, own_units
from poise.model.kernels import Kernels

EXTREME = 1e150      # |value| beyond this, or nonzero below 1 / this
ILL_CONDITIONED = 1e14
# only Jacobians whose eigenvalue magnitudes spread over more than this are tested for
# their condition number (an SVD per steady state would cost more than the search)
SPREAD_TO_TEST = 1e8


def beyond_limits(kernels: Kernels, free: np.ndarray, full: np.ndarray, params: np.ndarray,
                  jacobians: np.ndarray, eigenvalues: np.ndarray, hyperbolic: np.ndarray,
                  nonlinear: bool = True) -> np.ndarray:
    """Why each steady state (rows) is beyond double precision's limits, "" if it is not.

    The condition number is tested only where the class claims every eigenvalue off the
    imaginary axis (`hyperbolic`); a zero eigenvalue is reported as such already."""
    reason = np.full(len(full), "", dtype=object)
    with np.errstate(all="ignore"):
        size = np.abs(full)
        extreme = ((size > EXTREME) | ((size > 0) & (size < 1.0 / EXTREME))).any(axis=1) & nonlinear
        reason[extreme] = ("a steady-state value beyond 1e±150 in a model nonlinear in its states "
                           "(the limit of double precision)")
        rate = np.abs(eigenvalues)
        spread = rate.max(axis=1, initial=0.0) / np.where(rate.min(axis=1, initial=0.0) > 0,
                                                          rate.min(axis=1, initial=0.0), np.nan)
        test = np.flatnonzero(~(spread <= SPREAD_TO_TEST) & (reason == "") & hyperbolic
                              & np.isfinite(jacobians).all(axis=(1, 2)))
    if test.size and free.shape[1]:
        x, p = free[test], params[test]
        unit = own_units(kernels, x, p)
        rows = equation_units(kernels, x, p, jacobians[test], unit)
        scaled = jacobians[test] * unit[:, None, :] / rows[:, :, None]
        with np.errstate(all="ignore"):
            condition = np.linalg.cond(np.nan_to_num(scaled))
        bad = ~(condition <= ILL_CONDITIONED)
        reason[test[bad]] = ("the Jacobian's condition number in the steady state's own units exceeds 1e14: "
                             "its class could change with rounding")
    return reason
