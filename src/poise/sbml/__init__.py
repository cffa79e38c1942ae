"""Read models written in SBML (Levels 2 and 3) into poise's plain data.

`read_sbml` returns an `SbmlModel` whose ODEs, conservation laws and outputs are
text in study-file syntax, ready for the study loader's safe expression parser.

How SBML maps to poise (the SBML standard's semantics):

- A species is a concentration unless it has only substance units (then an
  amount). Kinetic laws are in substance per time, so for a concentration
  d[S]/dt = sum(stoichiometry × rate) / compartment size (minus the dilution
  term [S]·(dV/dt)/V when the compartment's size changes in time).
- Species changed by reactions or rate rules are states, and so are compartments
  and parameters with rate rules. Boundary or constant species, and species that
  nothing changes, are held fixed: they become parameters with their initial value.
- Global ids keep their names. A kinetic law's local parameter ``p`` of reaction
  ``R`` becomes ``R_p``. Ids poise cannot use as they stand (reserved words such as
  ``exp``, ``min``, ``stable``, Python keywords, leading or double underscores) are
  renamed: the reserved word gets a trailing ``_`` (``exp`` -> ``exp_``),
  underscores are tidied (``_k__1`` -> ``k_1``), and clashes get ``_2``, ``_3``...
  `SbmlModel.outputs` is keyed by the original ids.
- Function definitions, assignment rules and reaction ids used in math are
  inlined; initial assignments are evaluated at time 0.
- Conservation laws come from the left null space of the stoichiometric matrix of
  the species states; each total is a parameter named ``<first species>_total``
  whose value follows from the initial state.
- Refused, with a message naming the element: piecewise, logical and relational
  math, floor/ceiling/factorial/quotient/rem, inverse trigonometric functions,
  delays, rateOf, time-dependent rates, algebraic rules, fast reactions,
  conversion factors, variable stoichiometry. Events and constraints are ignored
  with a warning.
"""

from poise.sbml.model import SbmlModel
from poise.sbml.reader import read_sbml

__all__ = ["SbmlModel", "read_sbml"]
