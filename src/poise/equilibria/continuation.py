"""Steady states by homotopy continuation, in the same form as the Newton finder's.

The tracker (`poise.equilibria.homotopy`) returns the real roots of the system with
denominators cleared. Here they are checked once more on the model's own right-hand
side (two Newton steps, residual relative to the size of f's terms), snapped to zero,
kept if in the domain and sorted like the Newton finder's output. Sets where some
path failed are solved again by multistart Newton, so a tracking failure never loses
a set.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from poise.equilibria.finder import (CORRECTION_TOLERANCE, RESIDUAL_TOLERANCE, FoundStates,
                                     find_steady_states, in_domain, sorted_states, state_scales)
from poise.equilibria.homotopy import solve_batch as track
from poise.equilibria.linalg import solve_batch
from poise.equilibria.polynomial import PolynomialSystem
from poise.model.kernels import Kernels
from poise.sampling import make_design, map_to_parameters
from poise.sampling.distributions import Distribution

SEED = 0   # fixed: the start system must not depend on the chunk
HUB_SEED = 1
HUB_COUNT = 64  # more hubs shorten paths a little more but cost a longer set-up


def hub_parameters(distributions: Mapping[str, Distribution], names: Sequence[str],
                   count: int = HUB_COUNT, seed: int = HUB_SEED) -> np.ndarray | None:
    """``count`` parameter sets spread over the study's distributions (a scrambled Sobol
    design with a fixed seed), from which the homotopy starts its paths; None when
    nothing varies or a name has no distribution (then every path starts at the
    generic start system)."""
    names = tuple(names)
    if not names or any(name not in distributions for name in names):
        return None
    design = make_design(names, "sobol", count, seed=seed, sobol_indices=False)
    return map_to_parameters(design, distributions)


def find_by_homotopy(kernels: Kernels, system: PolynomialSystem, params: np.ndarray,
                     domain_low: np.ndarray, domain_high: np.ndarray,
                     hubs: np.ndarray | None = None, **newton_settings) -> FoundStates:
    """Every real steady state in the domain for each parameter set (see module doc).

    ``hubs`` (see `hub_parameters`) shorten the paths; results depend on them and on
    each set's own values only, never on the rest of the batch."""
    result = track(system, params, seed=SEED, hubs=hubs)
    owner, slot = np.nonzero(np.isfinite(result.roots).all(axis=2))
    x = result.roots[owner, slot]
    p = params[owner]
    for _ in range(2):
        f, jac = kernels.rhs_and_jacobian(x, p)
        d, ok = solve_batch(jac, f)
        x = np.where(ok[:, None], x - d, x)
    scale = state_scales(kernels, params)
    f, jac = kernels.rhs_and_jacobian(x, p)
    d, solved = solve_batch(jac, f)
    with np.errstate(invalid="ignore"):
        small_residual = (np.abs(f) <= RESIDUAL_TOLERANCE * kernels.term_size(x, p) + 1e-300).all(axis=1)
        small_correction = solved & (np.abs(d) <= CORRECTION_TOLERANCE * (np.abs(x) + scale[owner])).all(axis=1)
    good = np.isfinite(x).all(axis=1) & (small_residual | small_correction)
    owner, x = owner[good], x[good]

    owner, full = in_domain(kernels, params, scale, domain_low, domain_high, owner, x)
    ok = result.status != 2
    reason = np.where(ok, "", np.char.add("the model cannot be evaluated at this parameter set: ",
                                          result.message.astype(str))).astype(object)

    retry = np.flatnonzero(result.status == 1)
    if retry.size:
        keep = ~np.isin(owner, retry)
        owner, full = owner[keep], full[keep]
        again = find_steady_states(kernels, params[retry], domain_low, domain_high,
                                   **newton_settings)
        owner = np.concatenate([owner, retry[again.owner]])
        full = np.concatenate([full, again.full])
        ok[retry], reason[retry] = again.ok, again.reason

    return sorted_states(kernels, owner, full, ok, reason)
