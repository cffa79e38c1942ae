"""The result of reading an SBML file: plain data, expressions as study-file text."""

from __future__ import annotations

from dataclasses import dataclass, field


@dataclass(frozen=True)
class SbmlModel:
    """An SBML model as plain data; expressions are text in study-file syntax.

    Attributes
    ----------
    states : tuple of str
        Species that reactions or rate rules change, then compartments and
        parameters with rate rules, in document order.
    ode : dict
        state -> d(state)/dt, in terms of states, parameters and `let` names.
    let : dict
        Named sub-expressions, each after those it uses: reaction rates (named by
        the reaction), assignment rules (named by their target) and parameters or
        compartments set once by an initialAssignment of parameters alone.
    parameters : dict
        Every other name the ODEs, sub-expressions or conservation laws use -> its
        value: global parameters, local parameters (renamed
        ``<reaction>_<parameter>``), fixed species (boundary, constant, or changed
        by nothing; ``<species>_amount`` for the fixed amount of a species in a
        compartment whose size changes), compartment sizes and conservation totals.
    conserved : dict
        total name -> linear combination of states that the model conserves (with
        every parameter at its value).
    conserved_requires : dict
        total name -> the parameters that law holds only at their values; a study
        that makes one of them uncertain drops the law.
    initial : dict
        state -> initial value, in the state's own units.
    units : dict
        species state -> "concentration" or "amount" (states that are
        compartments or parameters have no entry).
    size : dict
        species state -> initial size of its compartment (1 for a zero-dimensional one).
    domain : dict
        state -> (low, high): species are >= 0, every other state may take any value.
    warnings : tuple of str
        What was ignored (events, constraints, reactions without kinetic law).
    outputs : dict
        SBML id of every compartment, species, parameter, reaction and species
        reference -> its value in terms of states and `parameters` (for comparing
        with simulations; a species' value is a concentration unless it has only
        substance units). Time-dependent values are left out.
    """

    states: tuple[str, ...]
    ode: dict[str, str]
    parameters: dict[str, float]
    conserved: dict[str, str]
    initial: dict[str, float]
    units: dict[str, str]
    size: dict[str, float]
    let: dict[str, str] = field(default_factory=dict)
    conserved_requires: dict[str, tuple[str, ...]] = field(default_factory=dict)
    domain: dict[str, tuple[float, float]] = field(default_factory=dict)
    warnings: tuple[str, ...] = ()
    outputs: dict[str, str] = field(default_factory=dict)
