"""Put tables, figures and explanations in reading order."""

from __future__ import annotations

from .document import (CAUTIONS, HOW_TO_READ, Bullets, Document, FigureBlock, Heading,
                       Paragraph, TableBlock)
from .figureset import FigureSet, state_stem
from .load import RunData
from .methods import paragraph_text
from .references import reading_list
from .sensitivity import priority_summary
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


class _Figures:
    """Which figure to show for a stem: the one just drawn, an earlier rendering kept
    because its data file is missing, or a note."""

    def __init__(self, figures: FigureSet, earlier: dict[str, str]):
        self.figures, self.earlier = figures, earlier

    def has(self, stem: str) -> bool:
        return stem in self.figures.captions or stem in self.earlier

    def blocks(self, stem: str, missing: str) -> list:
        if stem in self.figures.captions:
            caption = self.figures.captions[stem]
            return [FigureBlock(stem, caption, alt=caption)]
        if stem in self.earlier:
            caption = (f"Earlier rendering, not rebuilt: {self.earlier[stem]}; it shows the run "
                       "as it was when that file was present.")
            return [FigureBlock(stem, caption, alt=caption)]
        if stem in self.figures.not_rebuilt:
            return [Paragraph(f"This figure cannot be drawn: {self.figures.not_rebuilt[stem]}.",
                              kind="note")]
        return [Paragraph(missing, kind="note")]


def assemble(run: RunData, tables: dict[str, Table], figures: FigureSet, earlier: dict[str, str],
             messages: list[str], methods: list[list], keys: list[str]) -> Document:
    """Build the report document.

    Parameters
    ----------
    tables : name -> Table (absent names are skipped)
    figures : the figures drawn, with captions and the stems a missing file prevented
    earlier : stem -> reason, for earlier renderings kept and shown instead
    messages : one line per figure or table not rebuilt
    methods, keys : the Methods paragraphs and the reference keys they cite
    """
    shown = _Figures(figures, earlier)
    doc = Document(run.title)
    version = (run.summary.get("tool") or {}).get("version", "")
    doc.add(Heading(1, run.title),
            Paragraph(f"Stability report written by poise {version} from the run directory "
                      "without recomputing anything.", kind="lead"))
    note = _failed_note(run, "failures" in tables)
    if note:
        doc.add(Paragraph(note, kind="note"))
    if messages:
        doc.add(Paragraph("Some data files of this run are missing, so parts of this report "
                          "could not be rebuilt: " + "; ".join(messages) + ".", kind="note"))

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
        doc.add(*shown.blocks("claims", "No claim probability could be drawn."))
    else:
        doc.add(Paragraph("This study states no claims. The sections below still show how many "
                          "stable steady states each parameter set has and what kind each "
                          "steady state is.", kind="note"))

    doc.add(Heading(2, "Number of stable steady states", "stable-count"),
            TableBlock(tables["stable_count"]))
    doc.add(*shown.blocks("stable_count", "No parameter set was analysed."))

    doc.add(Heading(2, "Kinds of steady states", "classes"))
    if tables["classes"].rows:
        doc.add(TableBlock(tables["classes"]))
    else:
        doc.add(Paragraph("No steady state was found in the domain for any analysed set.",
                          kind="note"))
    doc.add(*shown.blocks(state_stem(run), "No steady state to plot."))

    _sensitivity_section(doc, run, tables, shown)
    _regional_section(doc, run, tables, shown)

    doc.add(Heading(2, "Has the sample settled?", "convergence"))
    missing = ("No analysed independent sets, so there is no running estimate to show."
               if run.claim_names else "No claims, so there is no running estimate to show.")
    doc.add(*shown.blocks("convergence", missing))

    doc.add(Heading(2, "Methods", "methods"),
            *[Paragraph(paragraph_text(p)) for p in methods],
            Paragraph("The same text with citation keys is in methods.tex; the works it cites "
                      "are in references.bib, both next to this report.", kind="lead"),
            Heading(2, "References", "references"), Bullets(reading_list(keys)))
    return doc


def _sensitivity_section(doc: Document, run: RunData, tables, shown: _Figures) -> None:
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
    for claim, stems in shown.figures.claim_stems.items():
        if shown.has(stems["sobol"]):
            doc.add(*shown.blocks(stems["sobol"], ""))
    doc.add(Heading(2, "What to measure first", "priorities"), TableBlock(tables["priorities"]))
    doc.add(*[Paragraph(text) for text in priority_summary(run)])


def _regional_section(doc: Document, run: RunData, tables, shown: _Figures) -> None:
    stems_of = shown.figures.claim_stems
    if "regional" not in tables and not any(
            shown.has(s["factor_map"]) or s["factor_map"] in shown.figures.not_rebuilt
            for s in stems_of.values()):
        return
    doc.add(Heading(2, "Where in parameter space each claim holds", "regional"))
    if "regional" in tables:
        doc.add(TableBlock(tables["regional"]))
    for claim, stems in stems_of.items():
        constant = (f"No map for '{claim}': the claim holds in every analysed set or in none.")
        doc.add(*shown.blocks(stems["factor_map"], constant))
        if shown.has(stems["probability_map"]) or stems["probability_map"] in shown.figures.not_rebuilt:
            doc.add(*shown.blocks(stems["probability_map"], constant))
