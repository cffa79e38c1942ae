"""The symbolic model, its conservation laws, and compiled numeric kernels."""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from functools import cached_property
from typing import Mapping, Sequence

import numpy as np

from poise.model.kernels import Kernels, compile_kernels
from poise.model.scales import scale_kernels
from poise.model.system import ReducedSystem, check_conservation, reduce
from poise.study.spec import Study


@dataclass(frozen=True)
class CompiledModel:
    """A study's model with fixed values substituted, ready for batches.

    `varying` names the columns of the parameter arrays the kernels take.
    """

    system: ReducedSystem
    kernels: Kernels
    varying: tuple[str, ...]
    fixed_values: dict[str, float]
    domain_low: np.ndarray
    domain_high: np.ndarray

    @property
    def states(self) -> tuple[str, ...]:
        return self.system.states

    @property
    def dimension(self) -> int:
        return self.kernels.n

    @cached_property
    def nonlinear(self) -> bool:
        """Whether some equation is nonlinear in the states (its Jacobian depends on them)."""
        states = set(self.system.free_symbols)
        return any(expr.free_symbols & states for expr in self.system.jacobian)

    @cached_property
    def surfaces(self):
        """The state-dependent switching conditions of piecewise rates, compiled."""
        from poise.model.switching import compile_surfaces
        return compile_surfaces(self.system)


def compile_model(study: Study, values: Mapping[str, float] | None = None,
                  varying: Sequence[str] | None = None) -> CompiledModel:
    """Compile `study` with `varying` parameters left free (default: the uncertain
    ones) and every other parameter at `values` (default: fixed and nominal values)."""
    varying = tuple(study.uncertain) if varying is None else tuple(varying)
    values = dict(study.nominal_values() if values is None else values)
    fixed_values = {k: float(v) for k, v in values.items() if k not in varying}
    system = reduce(study, fixed_values, varying)
    _check_real(study, system)
    kernels = dataclasses.replace(compile_kernels(system), **scale_kernels(system, study.initial))
    low = np.array([study.domain[s][0] for s in study.states])
    high = np.array([study.domain[s][1] for s in study.states])
    return CompiledModel(system=system, kernels=kernels, varying=varying,
                         fixed_values=fixed_values, domain_low=low, domain_high=high)


def _check_real(study: Study, system: ReducedSystem) -> None:
    """With fixed values substituted, an equation may turn complex or undefined (log of a
    negative number, division by a zero constant): refuse it rather than compute nonsense."""
    import sympy

    from poise.errors import InputError
    bad = (sympy.zoo, sympy.nan, sympy.oo, -sympy.oo)
    for state, expr in zip(system.free, system.rhs):
        if expr.has(*bad) or expr.has(sympy.I):
            fixed = ", ".join(sorted(str(s) for s in study.ode[state].free_symbols
                                     if str(s) in study.parameters and str(s) not in system.parameters))
            raise InputError(f"with the fixed parameter values ({fixed}) this equation is complex or undefined "
                             "(e.g. the log of a negative number or a division by zero); change those values",
                             file=str(study.path), table="model.ode", key=state)


__all__ = ["CompiledModel", "Kernels", "ReducedSystem", "check_conservation", "compile_model"]
