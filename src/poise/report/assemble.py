"""Put tables, figures and explanations in reading order."""

from __future__ import annotations

from .document import (CAUTIONS, HOW_TO_READ, Bullets, Document, FigureBlock, Heading,
                       Paragraph, TableBlock)
from .load import RunData
from .tables import Table

__all__ = ["assemble"]


def _failed_note(run: RunData, reasons_listed: bool) -> str | None:
    counts = run.summary.get("samples", {})
    failed = int(counts.get("failed") or 0)
    if not failed:
        return None
    total = failed + int(counts.get("analysed") or 0)
    share = f" ({100 * failed / total:.1f} %)" if total else ""
    text = (f"{failed} of {total} parameter sets{share} could not be analysed. They are "
            "excluded from every probability and index.")
    return text + (" The reasons are listed under Study." if reasons_listed else "")


def _figure_or_note(figures: dict[str, str], stem: str, missing: str) -> list:
    if stem in figures:
        return [FigureBlock(stem, figures[stem], alt=figures[stem])]
    return [Paragraph(missing, kind="note")]


def assemble(run: RunData, tables: dict[str, Table], figures: dict[str, str],
             claim_stems: dict[str, dict[str, str]], state_stem: str) -> Document:
    """Build the report document.

    Parameters
    ----------
    tables : name -> Table (absent names are skipped)
    figures : stem -> caption, for every figure actually written
    claim_stems : claim -> {"sobol": stem, "factor_map": stem}
    state_stem : stem of the steady-state figure chosen for this model's dimension
    """
    doc = Document(run.title)
    version = (run.summary.get("tool") or {}).get("version", "")
    doc.add(Heading(1, run.title),
            Paragraph(f"Stability report written by poise {version} from the run directory "
                      "without recomputing anything.", kind="lead"))
    note = _failed_note(run, "failures" in tables)
    if note:
        doc.add(Paragraph(note, kind="note"))

    doc.add(Heading(2, "Before you use these results", "cautions"),
            Bullets(CAUTIONS, kind="caution"),
            Heading(2, "How to read this report", "how-to-read"),
            Bullets(HOW_TO_READ))

    doc.add(Heading(2, "Study", "study"), TableBlock(tables["study"]))
    if "parameters" in tables:
        doc.add(TableBlock(tables["parameters"]))
    if "failures" in tables:
        doc.add(TableBlock(tables["failures"]))

    doc.add(Heading(2, "Claims", "claims"))
    if "claims" in tables:
        doc.add(TableBlock(tables["claims"]))
        doc.add(*_figure_or_note(figures, "claims", "No claim probability could be drawn."))
    else:
        doc.add(Paragraph("This study states no claims. The sections below still show how many "
                          "stable steady states each parameter set has and what kind each "
                          "steady state is.", kind="note"))

    doc.add(Heading(2, "Number of stable steady states", "stable-count"),
            TableBlock(tables["stable_count"]))
    doc.add(*_figure_or_note(figures, "stable_count", "No parameter set was analysed."))

    doc.add(Heading(2, "Kinds of steady states", "classes"))
    if tables["classes"].rows:
        doc.add(TableBlock(tables["classes"]))
    else:
        doc.add(Paragraph("No steady state was found in the domain for any analysed set.",
                          kind="note"))
    doc.add(*_figure_or_note(figures, state_stem, "No steady state to plot."))

    _sensitivity_section(doc, run, tables, figures, claim_stems)
    _regional_section(doc, run, tables, figures, claim_stems)

    doc.add(Heading(2, "Has the sample settled?", "convergence"))
    missing = ("No analysed independent sets, so there is no running estimate to show."
               if run.claim_names else "No claims, so there is no running estimate to show.")
    doc.add(*_figure_or_note(figures, "convergence", missing))
    return doc


def _sensitivity_section(doc: Document, run: RunData, tables, figures, claim_stems) -> None:
    doc.add(Heading(2, "Which parameters decide each claim", "sensitivity"))
    if run.manifest.get("sensitivity", "none") != "sobol":
        doc.add(Paragraph("Sobol indices were not requested for this study (sensitivity method "
                          "'none'). The regional analysis further down still shows which "
                          "parameters separate the sets where each claim holds.", kind="note"))
        return
    sens = run.summary.get("sensitivity", {})
    for claim in run.claim_names:
        entry = sens.get(claim, {})
        if entry.get("method") != "sobol":
            reason = entry.get("reason") or "no indices were computed"
            doc.add(Paragraph(f"No Sobol indices for '{claim}': {reason}.", kind="note"))
    if "sobol" not in tables:
        if not run.claim_names:
            doc.add(Paragraph("Sobol indices need at least one claim.", kind="note"))
        return
    doc.add(TableBlock(tables["sobol"]))
    for claim, stems in claim_stems.items():
        if stems.get("sobol") in figures:
            doc.add(FigureBlock(stems["sobol"], figures[stems["sobol"]]))
    doc.add(Heading(2, "What to measure first", "priorities"), TableBlock(tables["priorities"]))


def _regional_section(doc: Document, run: RunData, tables, figures, claim_stems) -> None:
    if "regional" not in tables:
        return
    doc.add(Heading(2, "Where in parameter space each claim holds", "regional"),
            TableBlock(tables["regional"]))
    for claim, stems in claim_stems.items():
        stem = stems.get("factor_map")
        if stem in figures:
            doc.add(FigureBlock(stem, figures[stem]))
        else:
            doc.add(Paragraph(f"No map for '{claim}': the claim holds in every analysed set or "
                              "in none.", kind="note"))
