"""Each parameter set's time scale and time horizon, from its steady states' eigenvalues.

The rule
--------
For an eigenvalue lambda of a steady state's Jacobian,

* its relaxation (or escape) rate is ``max(|Re lambda|, 1e-3 |lambda|)``: the time to
  approach a stable state, or to leave an unstable one, is a few multiples of
  ``1 / |Re lambda|``; the floor keeps a centre (Re lambda = 0) from giving an infinite
  horizon;
* its cycle rate, when it is complex, is ``|Im lambda| / (2 pi)``: one over the period of
  the linear oscillation.

The set's time scale ``tau`` is one over the slowest of these rates over all its steady
states and eigenvalues (zero eigenvalues, e.g. along a continuum of steady states, are
left out), and its horizon is ``Settings.horizon_factor * tau`` (100 tau by default:
enough to settle from far away, about ln(1e4) ~ 9 tau, to escape from a displaced
unstable state, ln(1e3) ~ 7 tau, and then to follow a few tens of cycles). A set without
steady states takes the eigenvalues of the Jacobian at its starting points instead.

Trajectories are looked at over windows that double in length, the first ending at
``first``: one over the slowest of ``max(|Re lambda|, |Im lambda| / (2 pi))``, the
visible time scale without the floor (around a centre, one linear period rather than
a thousand).

A trajectory stops earlier once classified; the horizon only bounds undecided ones, and
a budget of steps (`Settings.max_steps`) bounds the work. Both scale with time units,
which is what makes outcomes independent of them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

RELAXATION_FLOOR = 1e-3
ZERO_EIGENVALUE = 1e-10     # |lambda| below this fraction of the largest |lambda| is zero


@dataclass(frozen=True, eq=False)
class TimeScales:
    """Per parameter set (S,): ``tau`` the slowest time scale, ``horizon``, and ``first``
    the end of the first observation window; NaN where no non-zero eigenvalue was
    available."""

    tau: np.ndarray
    horizon: np.ndarray
    first: np.ndarray


def slowest_rate(eigenvalues: np.ndarray, floor: float = RELAXATION_FLOOR) -> np.ndarray:
    """(R, n) complex eigenvalues -> (R,) slowest relaxation or cycle rate of each row
    (inf when every eigenvalue is zero or not finite)."""
    modulus = np.abs(eigenvalues)
    top = np.nan_to_num(modulus, nan=0.0).max(axis=1, initial=0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        usable = np.isfinite(modulus) & (modulus > ZERO_EIGENVALUE * top[:, None])
        relax = np.maximum(np.abs(eigenvalues.real), floor * modulus)
        complex_ = np.abs(eigenvalues.imag) > ZERO_EIGENVALUE * top[:, None]
        cycle = np.where(complex_, np.abs(eigenvalues.imag) / (2 * np.pi), np.inf)
        rate = np.where(usable, np.minimum(relax, cycle), np.inf)
    return rate.min(axis=1, initial=np.inf)


def slowest_visible_rate(eigenvalues: np.ndarray) -> np.ndarray:
    """(R,) slowest max(|Re lambda|, |Im lambda| / (2 pi)) per row: how fast something
    can be seen to happen (inf without usable eigenvalues)."""
    modulus = np.abs(eigenvalues)
    top = np.nan_to_num(modulus, nan=0.0).max(axis=1, initial=0.0)
    with np.errstate(invalid="ignore"):
        usable = np.isfinite(modulus) & (modulus > ZERO_EIGENVALUE * top[:, None])
        visible = np.maximum(np.abs(eigenvalues.real), np.abs(eigenvalues.imag) / (2 * np.pi))
    return np.where(usable, visible, np.inf).min(axis=1, initial=np.inf)


def time_scales(n_sets: int, steady_owner: np.ndarray, steady_eigenvalues: np.ndarray,
                start_owner: np.ndarray, start_eigenvalues: np.ndarray,
                horizon_factor: float) -> TimeScales:
    """Time scale and horizon of every set (see the module docstring for the rule).

    Parameters
    ----------
    n_sets : number of parameter sets S.
    steady_owner, steady_eigenvalues : (R,) set index and (R, n) eigenvalues of each steady state.
    start_owner, start_eigenvalues : the same for the Jacobian at each starting point,
        used only for sets without a usable steady state.
    horizon_factor : horizon in multiples of the time scale.
    """
    rate = _per_set(n_sets, steady_owner, slowest_rate(steady_eigenvalues),
                    start_owner, slowest_rate(start_eigenvalues))
    visible = _per_set(n_sets, steady_owner, slowest_visible_rate(steady_eigenvalues),
                       start_owner, slowest_visible_rate(start_eigenvalues))
    with np.errstate(divide="ignore"):
        tau = np.where(np.isfinite(rate) & (rate > 0), 1.0 / rate, np.nan)
        first = np.where(np.isfinite(visible) & (visible > 0), 1.0 / visible, np.nan)
    return TimeScales(tau=tau, horizon=horizon_factor * tau, first=np.fmin(first, tau))


def _per_set(n_sets, steady_owner, steady_rate, start_owner, start_rate) -> np.ndarray:
    """The smallest rate per set over its steady states, or over its starts without any."""
    rate = np.full(n_sets, np.inf)
    if steady_owner.size:
        np.minimum.at(rate, steady_owner, steady_rate)
    missing = ~np.isfinite(rate)
    if missing.any() and start_owner.size:
        from_starts = np.full(n_sets, np.inf)
        np.minimum.at(from_starts, start_owner, start_rate)
        rate = np.where(missing, from_starts, rate)
    return rate
