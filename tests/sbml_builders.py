"""Small SBML documents built with libsbml, for tests (one compartment `cell` of size 1)."""

from __future__ import annotations

from pathlib import Path

import libsbml


def new_document(version: int = 2):
    document = libsbml.SBMLDocument(3, version)
    model = document.createModel()
    cell = model.createCompartment()
    cell.setId("cell")
    cell.setSize(1.0)
    cell.setConstant(True)
    return document, model


def add_species(model, sid, value, **flags):
    species = model.createSpecies()
    species.setId(sid)
    species.setCompartment("cell")
    species.setInitialConcentration(value)
    species.setHasOnlySubstanceUnits(flags.get("amount", False))
    species.setBoundaryCondition(flags.get("boundary", False))
    species.setConstant(False)
    return species


def add_parameter(model, pid, value, constant=True):
    parameter = model.createParameter()
    parameter.setId(pid)
    parameter.setValue(value)
    parameter.setConstant(constant)
    return parameter


def add_reaction(model, rid, reactants, products, formula):
    reaction = model.createReaction()
    reaction.setId(rid)
    reaction.setReversible(False)
    for sid in reactants:
        ref = reaction.createReactant()
        ref.setSpecies(sid)
        ref.setStoichiometry(1)
        ref.setConstant(True)
    for sid in products:
        ref = reaction.createProduct()
        ref.setSpecies(sid)
        ref.setStoichiometry(1)
        ref.setConstant(True)
    reaction.createKineticLaw().setMath(libsbml.parseL3Formula(formula))
    return reaction


def check_ok(status: int) -> None:
    assert status == libsbml.LIBSBML_OPERATION_SUCCESS, libsbml.OperationReturnValue_toString(status)


def write_document(document, tmp_path, name="model.xml") -> Path:
    file = tmp_path / name
    assert libsbml.writeSBMLToFile(document, str(file))
    return file
