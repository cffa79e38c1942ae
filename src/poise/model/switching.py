"""Steady states that lie on a switching surface of a piecewise right-hand side.

A ``piecewise`` whose conditions compare states (``piecewise(a, x < K, b)``) makes
the right-hand side smooth on each side of the surface ``x = K`` but not across it.
Newton's method works on each smooth piece; a steady state found *on* the surface
cannot be classified from one Jacobian (the eigenvalues differ on the two sides),
so it must be flagged and called undetermined, never guessed.

The test is scale-free: a point lies on the surface ``g = lhs - rhs = 0`` when
``|lhs - rhs| <= tolerance * (|terms of lhs| + |terms of rhs|)``, so it does not
change when the states, parameters or time are measured in other units.
Conditions that involve only parameters are resolved per parameter set by the
compiled kernels and never count here.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np
import sympy

from poise.model.constants import floating_constants
from poise.model.system import ReducedSystem

TOLERANCE = 1e-7  # relative to the size of the two sides' terms; Newton roots are far tighter


@dataclass(frozen=True)
class SwitchingSurfaces:
    """The state-dependent switching conditions of a reduced system, compiled.

    Attributes
    ----------
    conditions : tuple of sympy relationals
        Every comparison in a piecewise condition that involves a free state.
    gap : callable
        (X (B, n), P (B, m)) -> (B, k): lhs - rhs of each condition.
    size : callable
        (X, P) -> (B, k): sum of |terms| of lhs and rhs, the scale of each gap.
    """

    conditions: tuple[sympy.Basic, ...]
    gap: Callable[[np.ndarray, np.ndarray], np.ndarray] | None
    size: Callable[[np.ndarray, np.ndarray], np.ndarray] | None

    @property
    def any(self) -> bool:
        return bool(self.conditions)


def switching_conditions(system: ReducedSystem) -> tuple[sympy.Basic, ...]:
    """Comparisons inside piecewise conditions of the reduced right-hand side that
    depend on the free states, in a fixed order, without repeats."""
    states = set(system.free_symbols)
    found: list[sympy.Basic] = []
    for expr in system.rhs:
        if not isinstance(expr, sympy.Basic):
            continue
        for piecewise in sorted(expr.atoms(sympy.Piecewise), key=sympy.default_sort_key):
            for _value, condition in piecewise.args:
                if not isinstance(condition, sympy.Basic):
                    continue
                for relation in sorted(condition.atoms(sympy.core.relational.Relational),
                                       key=sympy.default_sort_key):
                    if relation.free_symbols & states and relation not in found:
                        found.append(relation)
    return tuple(found)


def compile_surfaces(system: ReducedSystem) -> SwitchingSurfaces:
    """Compile the gap and scale of every state-dependent switching condition."""
    conditions = switching_conditions(system)
    if not conditions:
        return SwitchingSurfaces((), None, None)
    arguments = [*system.free_symbols, *system.parameter_symbols]
    gaps = [c.lhs - c.rhs for c in conditions]
    sizes = [_term_size(c.lhs) + _term_size(c.rhs) for c in conditions]
    return SwitchingSurfaces(conditions, _batch(arguments, gaps), _batch(arguments, sizes))


def on_switching_surface(surfaces: SwitchingSurfaces, states: np.ndarray, params: np.ndarray,
                         tolerance: float = TOLERANCE) -> np.ndarray:
    """Which steady states lie on a switching surface.

    Parameters
    ----------
    surfaces : SwitchingSurfaces
        From `compile_surfaces` of the model's reduced system.
    states : array (B, n)
        Steady states (free states, kernel column order), one per row.
    params : array (B, m)
        The varying parameters of each row's set.
    tolerance : float
        Relative tolerance of the scale-free test (see the module docstring).

    Returns
    -------
    array of bool (B,)
        True where some condition's two sides agree to `tolerance` relative to their
        terms (the point is on a surface: classify it undetermined, with this reason).
    """
    states = np.atleast_2d(np.asarray(states, dtype=float))
    params = np.asarray(params, dtype=float).reshape(states.shape[0], -1)
    if not surfaces.any or states.shape[0] == 0:
        return np.zeros(states.shape[0], dtype=bool)
    with np.errstate(all="ignore"):
        gap = np.abs(surfaces.gap(states, params))
        size = surfaces.size(states, params)
    on = gap <= tolerance * size
    # both sides exactly zero (x = 0 against 0): on the surface as well
    on |= (gap == 0)
    return on.any(axis=1)


def _term_size(expr: sympy.Expr) -> sympy.Expr:
    return sympy.Add(*[sympy.Abs(t) for t in sympy.Add.make_args(expr)])


def _batch(arguments: Sequence[sympy.Symbol], exprs: Sequence[sympy.Expr]):
    function = sympy.lambdify(arguments, [floating_constants(e) for e in exprs], modules="numpy")
    count = len(exprs)

    def evaluate(X: np.ndarray, P: np.ndarray) -> np.ndarray:
        values = function(*X.T, *P.T)
        out = np.empty((X.shape[0], count))
        for j, value in enumerate(values):
            out[:, j] = np.real_if_close(value)
        return out

    return evaluate
