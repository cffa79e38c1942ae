"""Damped Newton iterations on whole batches of (parameter set, start) pairs, with
optional deflation of roots already found.

Deflation (Farrell, Birkisson & Funke, SIAM J. Sci. Comput. 37 (2015) A2026) solves
G(x) = M(x) f(x) with M(x) = Π_r (1/‖x − r‖² + 1) for the known roots r, so Newton can
no longer converge to them. The Newton step for G is the step for f scaled by
1 / (1 + ∇log M · d) (Sherman–Morrison on the rank-one update of J), so one linear
solve per iteration serves both.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from poise.equilibria.linalg import solve_batch
from poise.model.kernels import Kernels

STEP_TOLERANCE = 1e-11      # relative change that counts as converged
MAX_STEP = 4.0              # longest step, in units of (|x| + scale)
BACKTRACKS = 4
FAR_AWAY = 1e8              # |x| beyond this many scales: the iterate diverges
PATIENCE = 6                # iterations without a 10 % better merit before giving up


@dataclass
class NewtonResult:
    x: np.ndarray           # (K, n) final iterates
    converged: np.ndarray   # (K,) bool: the step became negligible
    evaluable: np.ndarray   # (K,) bool: f was finite at the start


@dataclass
class _Deflation:
    roots: np.ndarray       # (K, R, n)
    mask: np.ndarray        # (K, R)

    def log_factor(self, x, rows, scale):
        """log M(x) and its gradient for M = Π_r (1/‖(x − r)/s‖² + 1)."""
        diff = (x[:, None, :] - self.roots[rows]) / scale[:, None, :]      # (K, R, n)
        dist2 = np.einsum("krn,krn->kr", diff, diff)
        mask = self.mask[rows]
        with np.errstate(all="ignore"):
            term = np.where(mask, np.log1p(1.0 / dist2), 0.0)
            # d/dx log(1/d² + 1) = -2 (x − r)/s² / (d² (1 + d²))
            weight = np.where(mask, -2.0 / (dist2 * (1.0 + dist2)), 0.0)
            grad = np.einsum("kr,krn->kn", weight, diff) / scale
        return grad, term.sum(axis=1)


def newton(kernels: Kernels, x0: np.ndarray, params: np.ndarray, scale: np.ndarray,
           max_iterations: int, known: np.ndarray | None = None,
           known_mask: np.ndarray | None = None) -> NewtonResult:
    """Run damped (optionally deflated) Newton from every row of `x0`.

    Parameters
    ----------
    x0 : (K, n) starts; params : (K, m) the parameter set of each start.
    scale : (K, n) typical size of each state, for step control and deflation norms.
    known, known_mask : (K, R, n) roots to deflate and (K, R) which of them are real.
    """
    deflation = _Deflation(known, known_mask) if known is not None else None
    x = x0.copy()
    count = x.shape[0]
    converged = np.zeros(count, bool)
    f = kernels.rhs(x, params)
    evaluable = np.isfinite(f).all(axis=1)
    active = np.flatnonzero(evaluable)
    best = np.full(count, np.inf)
    waited = np.zeros(count, int)
    for _ in range(max_iterations):
        if active.size == 0:
            break
        xa, pa, sa, fa = x[active], params[active], scale[active], f[active]
        d, ok = solve_batch(kernels.jacobian(xa, pa), fa)
        with np.errstate(divide="ignore", invalid="ignore"):
            log_merit = np.log(np.sqrt(np.einsum("kn,kn->k", fa, fa)))
        if deflation is not None:
            grad, log_m = deflation.log_factor(xa, active, sa)
            with np.errstate(all="ignore"):
                d = d / (1.0 + np.einsum("ki,ki->k", grad, d))[:, None]
            log_merit = log_merit + log_m
        # Give up on iterates that stopped making progress or ran off: deflated
        # iterates have nowhere left to go once every root is known.
        improved = log_merit < best[active] + np.log(0.9)
        best[active] = np.where(improved, log_merit, best[active])
        waited[active] = np.where(improved, 0, waited[active] + 1)
        ok &= (np.isfinite(d).all(axis=1) & (waited[active] <= PATIENCE)
               & (np.abs(xa) <= FAR_AWAY * sa).all(axis=1) & ~np.isnan(log_merit))
        step = -d
        # Cap the step length so one wild step cannot throw an iterate far away.
        size = np.abs(step / (np.abs(xa) + sa)).max(axis=1, initial=0.0)
        with np.errstate(all="ignore"):
            step *= np.minimum(1.0, MAX_STEP / np.where(ok, size, 1.0))[:, None]
        step[~ok] = 0.0
        xa_new, fa_new = _backtrack(kernels, xa, pa, sa, fa, step, log_merit, deflation, active)
        done = ok & (np.abs(xa_new - xa) <= STEP_TOLERANCE * (np.abs(xa_new) + sa)).all(axis=1)
        x[active], f[active] = xa_new, fa_new
        converged[active[done]] = True
        active = active[ok & ~done]
    return NewtonResult(x=x, converged=converged, evaluable=evaluable)


def _backtrack(kernels, xa, pa, sa, fa, step, log_merit, deflation, active):
    """Halve steps that do not reduce the merit ‖f‖ (or ‖M f‖), a few times at most;
    the last trial is taken anyway so that iterates keep moving. Returns the new
    points and f there (reused by the next iteration)."""
    alpha = np.ones(xa.shape[0])
    x_new, f_new = xa.copy(), fa.copy()
    pending = np.flatnonzero(np.any(step != 0.0, axis=1))
    for attempt in range(BACKTRACKS):
        trial = xa[pending] + alpha[pending, None] * step[pending]
        f_trial = kernels.rhs(trial, pa[pending])
        x_new[pending], f_new[pending] = trial, f_trial
        if attempt == BACKTRACKS - 1:
            break
        with np.errstate(divide="ignore", invalid="ignore"):
            value = np.log(np.sqrt(np.einsum("kn,kn->k", f_trial, f_trial)))
        if deflation is not None:
            value = value + deflation.log_factor(trial, active[pending], sa[pending])[1]
        better = np.isfinite(value) & (value <= log_merit[pending] + np.log1p(-1e-4 * alpha[pending]))
        better |= np.isneginf(value)   # landed exactly on a root
        pending = pending[~better]
        if pending.size == 0:
            break
        alpha[pending] *= 0.5
    return x_new, f_new
