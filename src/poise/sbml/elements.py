"""The elements of an SBML model by id, and the structures poise refuses outright.

Refused, with a message naming the element: algebraic rules, fast reactions,
conversion factors, variable stoichiometry, a rate rule on a species that reactions
also change (the standard allows it only for boundary species), references to
undefined ids. Events and constraints are listed as warnings: steady states do not
depend on them.
"""

from __future__ import annotations

import libsbml

from poise.sbml.mathml import SbmlProblem


class Elements:
    """Compartments, species, parameters, reactions, rules and initial assignments by id."""

    def __init__(self, model: libsbml.Model):
        self.model = model
        self.level = model.getLevel()
        self.warnings: list[str] = []
        self.compartments = {c.getId(): c for c in model.getListOfCompartments()}
        self.species = {s.getId(): s for s in model.getListOfSpecies()}
        self.parameters = {p.getId(): p for p in model.getListOfParameters()}
        self.reactions = {r.getId(): r for r in model.getListOfReactions()}
        self.references = {}
        for reaction in self.reactions.values():
            for ref in participants(reaction):
                if ref.isSetId() and ref.getId():
                    self.references[ref.getId()] = ref
        self.functions = {}
        for fd in model.getListOfFunctionDefinitions():
            if fd.getBody() is None:
                raise SbmlProblem(f"functionDefinition '{fd.getId()}' has no body")
            arguments = tuple(fd.getArgument(i).getName() for i in range(fd.getNumArguments()))
            self.functions[fd.getId()] = (arguments, fd.getBody())
        self.assigned, self.rated = {}, {}
        for k, rule in enumerate(model.getListOfRules()):
            self._rule(k, rule)
        self.initial_math = {ia.getSymbol(): ia.getMath() for ia in model.getListOfInitialAssignments()}
        for event in model.getListOfEvents():
            label = event.getId() or event.getMetaId()
            named = f"event '{label}'" if label else "an event without id"
            self.warnings.append(f"{named} ignored: steady states do not depend on events")
        if model.getNumConstraints():
            self.warnings.append(f"{model.getNumConstraints()} constraint(s) ignored")
        self._refuse_unsupported()

    def _rule(self, k: int, rule) -> None:
        if rule.isAlgebraic():
            label = rule.getIdAttribute() or rule.getMetaId() or f"number {k + 1}"
            formula = libsbml.formulaToL3String(rule.getMath()) if rule.isSetMath() else ""
            raise SbmlProblem(f"algebraicRule {label!r} (0 = {formula}) is not supported: "
                              "give the model as ODEs")
        target = rule.getVariable()
        if target in self.references:
            raise SbmlProblem(f"variable stoichiometry is not supported: a rule changes "
                              f"speciesReference '{target}'")
        if target not in self.compartments and target not in self.species \
                and target not in self.parameters:
            raise SbmlProblem(f"a rule sets '{target}', which the model does not define")
        if target in self.assigned or target in self.rated:
            raise SbmlProblem(f"two rules set '{target}'")
        (self.assigned if rule.isAssignment() else self.rated)[target] = rule.getMath()

    def _refuse_unsupported(self) -> None:
        if self.level >= 3 and self.model.isSetConversionFactor():
            raise SbmlProblem(f"the model's conversionFactor '{self.model.getConversionFactor()}' "
                              "is not supported")
        for sid, species in self.species.items():
            if self.level >= 3 and species.isSetConversionFactor():
                raise SbmlProblem(f"the conversionFactor of species '{sid}' is not supported")
            if species.getCompartment() not in self.compartments:
                raise SbmlProblem(f"species '{sid}' lies in the undefined compartment "
                                  f"'{species.getCompartment()}'")
        for rid, reaction in self.reactions.items():
            if reaction.isSetFast() and reaction.getFast():
                raise SbmlProblem(f"reaction '{rid}' is fast (fast=\"true\"), which is not supported")
            for ref in participants(reaction):
                if ref.getSpecies() not in self.species:
                    raise SbmlProblem(f"reaction '{rid}' uses the undefined species '{ref.getSpecies()}'")
                if self.level == 2 and ref.isSetStoichiometryMath():
                    raise SbmlProblem(f"variable stoichiometry is not supported: the stoichiometryMath "
                                      f"of species '{ref.getSpecies()}' in reaction '{rid}'")
        reacting = {ref.getSpecies() for r in self.reactions.values() for ref in participants(r)}
        for sid in self.rated:
            if sid in self.species and not self.species[sid].getBoundaryCondition() and sid in reacting:
                raise SbmlProblem(f"species '{sid}' has a rateRule and takes part in reactions; "
                                  "SBML allows this only for boundary species")

    def local_parameters(self, reaction) -> list:
        law = reaction.getKineticLaw()
        if law is None:
            return []
        if self.level >= 3:
            return list(law.getListOfLocalParameters())
        return list(law.getListOfParameters())

    def zero_dimensional(self, cid: str) -> bool:
        """A compartment of spatial dimension 0: a point without size; its species are amounts."""
        compartment = self.compartments[cid]
        if self.level < 3 or compartment.isSetSpatialDimensions():
            return compartment.getSpatialDimensionsAsDouble() == 0
        return False

    def in_amounts(self, sid: str) -> bool:
        """Whether the species' symbol stands for its amount (else its concentration)."""
        species = self.species[sid]
        return species.getHasOnlySubstanceUnits() or self.zero_dimensional(species.getCompartment())


def participants(reaction) -> list:
    return [*reaction.getListOfReactants(), *reaction.getListOfProducts()]
