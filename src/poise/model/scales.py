"""Scale-aware helpers compiled from the reduced system.

* ``sizes(P)``: typical size of each free state per parameter set: a conserved total or
  a finite domain limit where one bounds the state, else the model's own initial state
  where it gives a nonzero value (SBML), else the balance of the model's own terms
  (`poise.model.magnitudes`).
* ``jacobian_terms(X, P)``: for each Jacobian entry, the size of its terms
  (`poise.model.magnitudes.absolute_form`). Rounding and a root's own inaccuracy perturb an entry by a small fraction
  of that, never of the entry's value alone (terms may cancel), so it is the unit in
  which the classifier judges an eigenvalue to be zero.
* ``full_terms(X, P)``: the same for the full state vector (an eliminated state is a
  total minus other states, whose difference can cancel to rounding).

Each quantity changes with the model's units exactly as the quantity it measures,
so every decision taken relative to them is the same in any units.
"""

from __future__ import annotations

import numpy as np
import sympy

from poise.model.kernels import _vector_kernel
from poise.model.magnitudes import absolute_form, magnitude_program
from poise.model.system import ReducedSystem


def scale_kernels(system: ReducedSystem, initial: dict[str, float] | None = None) -> dict:
    """The kernels above, as keyword arguments for `Kernels` (with ``initial``, the
    model's initial state, where it gives one: free states, also a size where no
    conserved total bounds a state)."""
    x, p = system.free_symbols, system.parameter_symbols
    n = len(x)
    program = magnitude_program(system.rhs, x, p)
    bounds = [system.scales[s] if system.scales[s] is not None else sympy.nan for s in system.free]
    bound_fn = _vector_kernel([], p, bounds)
    jac_terms = _vector_kernel(x, p, lambda: [absolute_form(e) for e in system.jacobian] if n else [])
    symbols = {s: sympy.Symbol(s, real=True) for s in system.states}
    full_terms = _vector_kernel(x, p, lambda: [absolute_form(system.eliminated.get(s, symbols[s])) for s in system.states])

    start = None
    if initial and all(s in initial for s in system.free):
        start = np.array([float(initial[s]) for s in system.free])
        start = start if np.isfinite(start).all() else None
    given = np.abs(start) if start is not None else np.zeros(n)

    def sizes(P: np.ndarray) -> np.ndarray:
        bound = np.abs(bound_fn(np.zeros((P.shape[0], 0)), P))
        typical = np.where(given > 0, given, program.sizes(P))
        return np.where(np.isfinite(bound) & (bound > 0), bound, typical)

    def jacobian_terms(X: np.ndarray, P: np.ndarray) -> np.ndarray:
        return jac_terms(X, P).reshape(X.shape[0], n, n)

    return dict(sizes=sizes, jacobian_terms=jacobian_terms, full_terms=full_terms, initial=start)
