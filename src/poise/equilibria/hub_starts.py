"""Newton starts from the steady states of nearby hubs.

A study's parameter sets are spread over its distributions; steady states move
continuously with the parameters away from folds. So the steady states of a few *hub*
sets (a fixed Sobol design over the same distributions, `HUBS` of them), each solved
once with a much wider search, are excellent starts for every sampled set near them:
the set's Newton iterations then begin next to its own steady states, and far fewer
space-filling starts are needed (`REDUCED_STARTS` per state instead of 64, for more
than three states). The hubs are a fixed design, so each set's result still depends
on that set alone, never on its batch, chunk or worker.

Hub roots are carried to a set in units of each state's typical size (a root at twice
a state's typical size at the hub starts at twice its typical size at the set), and the
nearest hub is chosen on the logarithms of the parameters, which the units of the
states do not touch.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

HUBS = 16
WIDER = 4            # hubs are solved with this many times the usual number of starts
REDUCED_STARTS = 8  # space-filling starts per state for a set that has hub starts


@dataclass(frozen=True)
class HubRoots:
    """Steady states of the hubs, for `poise.equilibria.finder.find_steady_states`."""

    keys: np.ndarray    # (H, m) where each hub sits (`parameter_key`)
    roots: np.ndarray   # (H, R, n) free states, NaN-padded
    sizes: np.ndarray   # (H, n) each state's typical size at the hub


def parameter_key(params: np.ndarray) -> np.ndarray:
    """Logarithm of positive parameters (rates act by ratios), the value otherwise."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(params > 0, np.log(np.where(params > 0, params, 1.0)), params)


def solve_hubs(kernels, hub_params: np.ndarray, domain_low: np.ndarray, domain_high: np.ndarray,
               starts: int, deflation_rounds: int, max_iterations: int) -> HubRoots | None:
    """Every steady state of each hub, by a wider Newton search."""
    from poise.equilibria.finder import find_steady_states, state_scales

    n = kernels.n
    if hub_params is None or n <= 3 or not len(hub_params):
        return None
    wide = WIDER * (starts or 64 * n)
    found = find_steady_states(kernels, hub_params, domain_low, domain_high, starts=wide,
                               deflation_rounds=deflation_rounds + 1, max_iterations=max_iterations)
    count = np.bincount(found.owner, minlength=len(hub_params))
    roots = np.full((len(hub_params), max(int(count.max(initial=0)), 1), n), np.nan)
    slot = np.arange(len(found.owner)) - np.searchsorted(found.owner, found.owner)
    roots[found.owner, slot] = found.free
    return HubRoots(keys=parameter_key(hub_params), roots=roots, sizes=state_scales(kernels, hub_params))


def hub_start_points(hubs: HubRoots, params: np.ndarray, scale: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Starts (B, R, n) from each set's nearest hub, in the set's units, and which are real."""
    from poise.equilibria.tracker import nearest_rows

    near = nearest_rows(np.ascontiguousarray(parameter_key(params), dtype=float),
                        np.ascontiguousarray(hubs.keys, dtype=float))
    starts = hubs.roots[near] * (scale / hubs.sizes[near])[:, None, :]
    return starts, np.isfinite(starts).all(axis=2)


_SOLVED: dict = {}


def hubs_for(kernels, hub_params: np.ndarray | None, domain_low: np.ndarray, domain_high: np.ndarray,
             starts: int, deflation_rounds: int, max_iterations: int) -> HubRoots | None:
    """`solve_hubs`, once per compiled model and settings in this process."""
    if hub_params is None:
        return None
    key = (id(kernels), np.ascontiguousarray(hub_params).tobytes(), starts, deflation_rounds, max_iterations)
    if key not in _SOLVED:
        # the kernels are kept with the result, so their id cannot be reused meanwhile
        _SOLVED[key] = (kernels, solve_hubs(kernels, hub_params, domain_low, domain_high, starts,
                                            deflation_rounds, max_iterations))
    return _SOLVED[key][1]
