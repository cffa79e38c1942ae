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
        state -> d(state)/dt.
    parameters : dict
        Every other name the ODEs or conservation laws use -> its value: global
        parameters, local parameters (renamed ``<reaction>_<parameter>``), fixed
        species (boundary, constant, or changed by nothing), compartment sizes and
        conservation totals.
    conserved : dict
        total name -> linear combination of states that the reactions conserve.
    initial : dict
        state -> initial value, in the state's own units.
    units : dict
        species state -> "concentration" or "amount" (states that are
        compartments or parameters have no entry).
    size : dict
        species state -> initial size of its compartment.
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
    warnings: tuple[str, ...] = ()
    outputs: dict[str, str] = field(default_factory=dict)
