"""Write model.xml: an immobilised enzyme in a continuously fed stirred reactor.

Scenario (our own): a 2-litre stirred tank holds an enzyme fixed on beads, so the
enzyme never leaves the tank. Fresh medium with substrate S at concentration S_feed
flows in at dilution rate D; the outflow carries S and the product P away. The
enzyme binds S (complex C) and turns it into P, but a second substrate molecule can
bind the complex and lock it (dead-end complex CSS): substrate inhibition. With
enough inhibition the tank can run either nearly empty of substrate (high conversion)
or flooded with it (the enzyme mostly locked) — two stable steady states for the
same feed.

The model is written in SBML Level 3 Version 2 with python-libsbml, using mass-action
kinetic laws in substance per time (concentration rate × reactor volume), one
function definition, an initial assignment (the enzyme loading) and an assignment
rule (the conversion, a reported quantity). Run: python make_model.py
"""

from __future__ import annotations

from pathlib import Path

import libsbml

VOLUME = 2.0                 # litre
PARAMETERS = {               # per hour, per (mmol/l) per hour, mmol/l
    "D": 0.05,               # dilution rate
    "k_bind": 40.0, "k_unbind": 2.0, "k_cat": 2.0,      # K_m = (k_unbind + k_cat)/k_bind = 0.1
    "k_lock": 5.0, "k_unlock": 5.0,                     # K_i = k_unlock/k_lock = 1
    "enzyme_load": 1.0,      # mmol of enzyme on the beads
}


def _check(status: int) -> None:
    if status != libsbml.LIBSBML_OPERATION_SUCCESS:
        raise RuntimeError(libsbml.OperationReturnValue_toString(status))


def build() -> libsbml.SBMLDocument:
    document = libsbml.SBMLDocument(3, 2)
    model = document.createModel()
    _check(model.setId("enzyme_reactor"))
    _check(model.setName("Immobilised enzyme with substrate inhibition in a fed tank"))

    reactor = model.createCompartment()
    _check(reactor.setId("reactor"))
    _check(reactor.setSize(VOLUME))
    _check(reactor.setConstant(True))
    _check(reactor.setSpatialDimensions(3))

    def species(sid, value, boundary=False):
        s = model.createSpecies()
        _check(s.setId(sid))
        _check(s.setCompartment("reactor"))
        _check(s.setInitialConcentration(value))
        _check(s.setHasOnlySubstanceUnits(False))
        _check(s.setBoundaryCondition(boundary))
        _check(s.setConstant(boundary))

    species("S", 0.0)
    species("P", 0.0)
    species("E", 0.0)        # set by the initial assignment below
    species("C", 0.0)
    species("CSS", 0.0)
    species("S_feed", 10.0, boundary=True)   # substrate in the fresh medium

    for pid, value in PARAMETERS.items():
        p = model.createParameter()
        _check(p.setId(pid))
        _check(p.setValue(value))
        _check(p.setConstant(True))
    conversion = model.createParameter()
    _check(conversion.setId("conversion"))
    _check(conversion.setValue(0.0))
    _check(conversion.setConstant(False))

    encounter = model.createFunctionDefinition()
    _check(encounter.setId("encounter"))
    _check(encounter.setMath(libsbml.parseL3Formula("lambda(k, a, b, k * a * b)")))

    load = model.createInitialAssignment()
    _check(load.setSymbol("E"))
    _check(load.setMath(libsbml.parseL3Formula("enzyme_load / reactor")))

    rule = model.createAssignmentRule()
    _check(rule.setVariable("conversion"))
    _check(rule.setMath(libsbml.parseL3Formula("1 - S / S_feed")))

    def reaction(rid, reactants, products, rate, modifiers=()):
        r = model.createReaction()
        _check(r.setId(rid))
        _check(r.setReversible(False))
        for sid in reactants:
            ref = r.createReactant()
            _check(ref.setSpecies(sid))
            _check(ref.setStoichiometry(1))
            _check(ref.setConstant(True))
        for sid in products:
            ref = r.createProduct()
            _check(ref.setSpecies(sid))
            _check(ref.setStoichiometry(1))
            _check(ref.setConstant(True))
        for sid in modifiers:
            _check(r.createModifier().setSpecies(sid))
        _check(r.createKineticLaw().setMath(libsbml.parseL3Formula(f"reactor * ({rate})")))

    reaction("feed", [], ["S"], "D * S_feed", modifiers=["S_feed"])
    reaction("washout_S", ["S"], [], "D * S")
    reaction("washout_P", ["P"], [], "D * P")
    reaction("binding", ["E", "S"], ["C"], "encounter(k_bind, E, S)")
    reaction("unbinding", ["C"], ["E", "S"], "k_unbind * C")
    reaction("catalysis", ["C"], ["E", "P"], "k_cat * C")
    reaction("locking", ["C", "S"], ["CSS"], "encounter(k_lock, C, S)")
    reaction("unlocking", ["CSS"], ["C", "S"], "k_unlock * CSS")
    return document


def main() -> None:
    document = build()
    document.checkConsistency()
    errors = [document.getError(i) for i in range(document.getNumErrors())
              if document.getError(i).getSeverity() >= libsbml.LIBSBML_SEV_ERROR]
    if errors:
        raise SystemExit("\n".join(e.getMessage() for e in errors))
    target = Path(__file__).with_name("model.xml")
    if not libsbml.writeSBMLToFile(document, str(target)):
        raise SystemExit(f"could not write {target}")
    print(f"wrote {target}")


if __name__ == "__main__":
    main()
