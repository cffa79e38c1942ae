"""How many decades a model's values span: a note for `poise check`, never a change.

poise's answers do not depend on the units a model is written in, but values far
apart (rate constants from 1e-7 to 1e7, states in M next to states in molecules) bring
a model nearer the limits of double precision (about 1e±308, 16 digits) and make
tables hard to read. Beyond `DECADES` decades `poise check` says so and suggests units.
"""

from __future__ import annotations

import math

import numpy as np
import sympy

DECADES = 12


def spread_note(study, model=None) -> str | None:
    """A one-line suggestion when the model's values span more than DECADES decades:
    parameter values (fixed, and nominal for uncertain ones), the numbers written in
    the equations, and the states' typical sizes at the nominal point."""
    values: list[tuple[float, str]] = []
    for name, value in study.nominal_values().items():
        values.append((abs(float(value)), f"parameter {name}"))
    for state, expr in study.ode.items():
        for number in expr.atoms(sympy.Float):
            values.append((abs(float(number)), f"a number in the equation for {state}"))
    if model is not None and model.kernels.sizes is not None:
        nominal = study.nominal_values()
        P = np.array([[nominal[p] for p in model.varying]], dtype=float).reshape(1, -1)
        for state, size in zip(model.system.free, model.kernels.sizes(P)[0]):
            values.append((abs(float(size)), f"the typical size of state {state}"))
    values = [(v, what) for v, what in values if v > 0 and math.isfinite(v)]
    if not values:
        return None
    low, high = min(values), max(values)
    decades = math.log10(high[0] / low[0])
    if decades <= DECADES:
        return None
    return (f"the model's values span {decades:.0f} decades, from {low[0]:.3g} ({low[1]}) to "
            f"{high[0]:.3g} ({high[1]}); poise's answers do not depend on units, but units in which "
            "these values lie nearer 1 (e.g. nM instead of M, minutes instead of seconds) keep the "
            "model away from the limits of floating point and make its tables easier to read")
