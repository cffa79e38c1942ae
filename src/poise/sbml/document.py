"""Open an SBML file safely, before any symbolic work.

The file is read once, with a size limit, and scanned by a streaming XML parser
(the standard library's expat, no tree is built) that refuses document type
declarations and entities (entity-expansion attacks), elements nested beyond
`MAX_DEPTH` (libsbml's reader recurses along nesting and can crash on very deep
math) and more elements of each kind than a realistic model holds. Only then is
the text handed to libsbml. Each refusal is one message; a missing file and an
unreadable one get the same message, so the answer does not reveal which files
exist.
"""

from __future__ import annotations

from pathlib import Path
from xml.parsers import expat

import libsbml

from poise.sbml.mathml import SbmlProblem

MAX_FILE_BYTES = 50_000_000   # curated models are well under 5 MB
MAX_DEPTH = 150               # element nesting, MathML included
MAX_ELEMENTS = 2_000_000      # every element, annotations included
# per kind of element; realistic models have a few hundred at most
MAX_COUNTS = {"species": 5_000, "reaction": 10_000, "parameter": 50_000,
              "localParameter": 50_000, "compartment": 1_000, "functionDefinition": 1_000,
              "assignmentRule": 10_000, "rateRule": 10_000, "algebraicRule": 10_000,
              "initialAssignment": 10_000, "event": 10_000, "speciesReference": 100_000}

UNREADABLE = "cannot read the SBML file (it is missing, not a file, or not readable)"


def load_document(path: Path) -> libsbml.SBMLDocument:
    """Read, scan and parse an SBML file; raise `SbmlProblem` with one clear message."""
    data = _read(path)
    _scan(data)
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        raise SbmlProblem("not a readable SBML file: it is not UTF-8 text (the SBML standard "
                          "requires UTF-8)") from None
    document = libsbml.readSBMLFromString(text)
    for i in range(document.getNumErrors()):
        error = document.getError(i)
        if error.getSeverity() >= libsbml.LIBSBML_SEV_ERROR:
            raise SbmlProblem(f"not a readable SBML file (line {error.getLine()}: "
                              f"{error.getShortMessage() or error.getMessage().strip()})")
    if document.getModel() is None:
        raise SbmlProblem("the file holds no SBML model")
    return document


def _read(path: Path) -> bytes:
    try:
        with open(path, "rb") as handle:
            data = handle.read(MAX_FILE_BYTES + 1)
    except (OSError, ValueError):
        raise SbmlProblem(UNREADABLE) from None
    if len(data) > MAX_FILE_BYTES:
        raise SbmlProblem(f"the SBML file is larger than {MAX_FILE_BYTES // 1_000_000} MB; "
                          "poise does not read models that large")
    return data


def _scan(data: bytes) -> None:
    """Streaming pass: depth, element counts, no DTD or entities."""
    parser = expat.ParserCreate()
    depth = 0
    total = 0
    counts: dict[str, int] = {}

    def start(name, _attributes):
        nonlocal depth, total
        depth += 1
        total += 1
        if depth > MAX_DEPTH:
            raise SbmlProblem(f"the XML nests elements more than {MAX_DEPTH} levels deep "
                              "(math nested that deeply is not a realistic model)")
        if total > MAX_ELEMENTS:
            raise SbmlProblem(f"the file has more than {MAX_ELEMENTS:,} XML elements")
        local = name.rsplit(":", 1)[-1]
        if local in MAX_COUNTS:
            counts[local] = counts.get(local, 0) + 1
            if counts[local] > MAX_COUNTS[local]:
                raise SbmlProblem(f"the model has more than {MAX_COUNTS[local]:,} elements "
                                  f"'{local}'; poise does not read models that large")

    def end(_name):
        nonlocal depth
        depth -= 1

    def refuse_declaration(*_args):
        raise SbmlProblem("the file declares a document type or entities, which SBML does not "
                          "use; poise refuses them (they can expand into huge documents)")

    parser.StartElementHandler = start
    parser.EndElementHandler = end
    parser.StartDoctypeDeclHandler = refuse_declaration
    parser.EntityDeclHandler = refuse_declaration
    parser.ExternalEntityRefHandler = refuse_declaration
    try:
        parser.SetParamEntityParsing(expat.XML_PARAM_ENTITY_PARSING_NEVER)
        parser.Parse(data, True)
    except expat.ExpatError as exc:
        raise SbmlProblem(f"not a readable SBML file (line {exc.lineno}: "
                          f"{expat.ErrorString(exc.code)})") from None
    except RecursionError:
        raise SbmlProblem("not a readable SBML file: nested too deeply") from None
