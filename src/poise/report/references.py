"""The works the Methods text cites, as BibTeX (``references.bib``) and as a reading list.

Bibliographic details of Sobol' (2001), Saltelli (2002), Saltelli et al. (2008, 2010),
Hornberger & Spear (1981) and Herman & Usher (2017) are as SALib 1.6.0 gives them in
its docstrings and README; the others are recalled from memory (authors, titles,
journals, volumes, pages and DOIs of standard references of their fields).
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Reference", "REFERENCES", "cite_label", "bibtex", "reading_list"]


@dataclass(frozen=True)
class Reference:
    """One cited work. ``authors`` are "Last, First" strings in BibTeX spelling
    (accents as TeX commands); ``short`` is the author part of an in-text citation."""

    key: str
    kind: str  # "article" or "book"
    authors: tuple[str, ...]
    short: str
    year: int
    title: str
    venue: str  # journal, or publisher for a book
    volume: str = ""
    number: str = ""
    pages: str = ""
    doi: str = ""


REFERENCES: dict[str, Reference] = {r.key: r for r in [
    Reference("wilson1927", "article", ("Wilson, Edwin B.",), "Wilson", 1927,
              "Probable inference, the law of succession, and statistical inference",
              "Journal of the American Statistical Association", "22", "158", "209--212",
              "10.1080/01621459.1927.10502953"),
    Reference("sobol1993", "article", ("Sobol', Ilya M.",), "Sobol'", 1993,
              "Sensitivity estimates for nonlinear mathematical models",
              "Mathematical Modeling and Computational Experiment", "1", "4", "407--414"),
    Reference("sobol2001", "article", ("Sobol', Ilya M.",), "Sobol'", 2001,
              "Global sensitivity indices for nonlinear mathematical models and their Monte "
              "Carlo estimates", "Mathematics and Computers in Simulation", "55", "1--3",
              "271--280", "10.1016/S0378-4754(00)00270-6"),
    Reference("saltelli2002", "article", ("Saltelli, Andrea",), "Saltelli", 2002,
              "Making best use of model evaluations to compute sensitivity indices",
              "Computer Physics Communications", "145", "2", "280--297",
              "10.1016/S0010-4655(02)00280-1"),
    Reference("saltelli2008", "book",
              ("Saltelli, Andrea", "Ratto, Marco", "Andres, Terry", "Campolongo, Francesca",
               "Cariboni, Jessica", "Gatelli, Debora", "Saisana, Michaela",
               "Tarantola, Stefano"), "Saltelli et al.", 2008,
              "Global Sensitivity Analysis: The Primer", "Wiley", doi="10.1002/9780470725184"),
    Reference("saltelli2010", "article",
              ("Saltelli, Andrea", "Annoni, Paola", "Azzini, Ivano", "Campolongo, Francesca",
               "Ratto, Marco", "Tarantola, Stefano"), "Saltelli et al.", 2010,
              "Variance based sensitivity analysis of model output. Design and estimator for "
              "the total sensitivity index", "Computer Physics Communications", "181", "2",
              "259--270", "10.1016/j.cpc.2009.09.018"),
    Reference("herman2017", "article", ("Herman, Jon", "Usher, Will"), "Herman & Usher", 2017,
              "SALib: An open-source Python library for sensitivity analysis",
              "Journal of Open Source Software", "2", "9", "97", "10.21105/joss.00097"),
    Reference("hornberger1981", "article", ("Hornberger, George M.", "Spear, Robert C."),
              "Hornberger & Spear", 1981,
              "An approach to the preliminary analysis of environmental systems",
              "Journal of Environmental Management", "12", "1", "7--18"),
    Reference("sommese2005", "book", ("Sommese, Andrew J.", "Wampler, Charles W."),
              "Sommese & Wampler", 2005,
              "The Numerical Solution of Systems of Polynomials Arising in Engineering and "
              "Science", "World Scientific", doi="10.1142/5763"),
    Reference("morgan1989", "article", ("Morgan, Alexander P.", "Sommese, Andrew J."),
              "Morgan & Sommese", 1989, "Coefficient-parameter polynomial continuation",
              "Applied Mathematics and Computation", "29", "2", "123--160",
              "10.1016/0096-3003(89)90099-4"),
    Reference("farrell2015", "article",
              ("Farrell, Patrick E.", "Birkisson, {\\'A}sgeir", "Funke, Simon W."),
              "Farrell, Birkisson & Funke", 2015,
              "Deflation techniques for finding distinct solutions of nonlinear partial "
              "differential equations", "SIAM Journal on Scientific Computing", "37", "4",
              "A2026--A2045", "10.1137/140984798"),
    Reference("harris2020", "article", ("Harris, Charles R.", "others"), "Harris et al.", 2020,
              "Array programming with NumPy", "Nature", "585", "7825", "357--362",
              "10.1038/s41586-020-2649-2"),
    Reference("virtanen2020", "article", ("Virtanen, Pauli", "others"), "Virtanen et al.", 2020,
              "SciPy 1.0: fundamental algorithms for scientific computing in Python",
              "Nature Methods", "17", "3", "261--272", "10.1038/s41592-019-0686-2"),
    Reference("meurer2017", "article", ("Meurer, Aaron", "others"), "Meurer et al.", 2017,
              "SymPy: symbolic computing in Python", "PeerJ Computer Science", "3", "",
              "e103", "10.7717/peerj-cs.103"),
    Reference("bornstein2008", "article", ("Bornstein, Benjamin J.", "Keating, Sarah M.",
                                           "Jouraku, Akiya", "Hucka, Michael"),
              "Bornstein et al.", 2008, "LibSBML: an API library for SBML", "Bioinformatics",
              "24", "6", "880--881", "10.1093/bioinformatics/btn051"),
]}


def cite_label(keys: tuple[str, ...]) -> str:
    """In-text citation, e.g. ``Sobol' 1993, 2001; Wilson 1927`` (without brackets)."""
    groups: dict[str, list[str]] = {}
    for key in keys:
        ref = REFERENCES[key]
        groups.setdefault(_plain(ref.short), []).append(str(ref.year))
    return "; ".join(f"{author} {', '.join(years)}" for author, years in groups.items())


def _plain(text: str) -> str:
    """BibTeX spelling to plain text (the few TeX accents used above)."""
    return text.replace("{\\'A}", "Á").replace("{", "").replace("}", "")


def _bib_field(name: str, value: str) -> str:
    return f"  {name} = {{{value}}},"


def bibtex(keys) -> str:
    """BibTeX entries of the given keys, in the order given."""
    out = []
    for key in keys:
        ref = REFERENCES[key]
        lines = [f"@{ref.kind}{{{ref.key},",
                 _bib_field("author", " and ".join(ref.authors)),
                 _bib_field("title", "{" + ref.title + "}"),  # keep the capitals as written
                 _bib_field("journal" if ref.kind == "article" else "publisher", ref.venue),
                 _bib_field("year", str(ref.year))]
        for name in ("volume", "number", "pages", "doi"):
            value = getattr(ref, name)
            if value:
                lines.append(_bib_field(name, value))
        lines[-1] = lines[-1].rstrip(",")
        out.append("\n".join(lines) + "\n}")
    return "% Written by poise: the works its Methods text cites.\n\n" + "\n\n".join(out) + "\n"


def _first_last(name: str) -> str:
    last, _, first = _plain(name).partition(", ")
    return f"{first} {last}" if first else last


def _authors_text(ref: Reference) -> str:
    names = [_first_last(a) for a in ref.authors]
    if names[-1] == "others":
        return names[0] + " et al."
    return names[0] if len(names) == 1 else ", ".join(names[:-1]) + " and " + names[-1]


def reading_list(keys) -> list[str]:
    """Plain-text reference entries of the given keys, sorted by author and year."""
    entries = []
    for key in sorted(keys, key=lambda k: (_plain(REFERENCES[k].authors[0]), REFERENCES[k].year)):
        ref = REFERENCES[key]
        text = f"{_authors_text(ref)} ({ref.year}). {ref.title}. {ref.venue}"
        if ref.volume:
            text += f" {ref.volume}"
            if ref.number:
                text += f"({ref.number.replace('--', '-')})"
        if ref.pages:
            text += f", {ref.pages.replace('--', '-')}"
        text += "."
        if ref.doi:
            text += f" doi:{ref.doi}"
        entries.append(text)
    return entries
