"""The Methods text and references.bib (issue 18, item 1).

Outside references: the sources the issue names (Wilson 1927; Sobol' 1993, 2001;
Saltelli et al. 2010; Hornberger & Spear 1981; Sommese & Wampler 2005; Morgan &
Sommese 1989; Farrell, Birkisson & Funke 2015), whose bibliographic details for
Sobol' 2001 and Saltelli et al. 2010 are checked against SALib's own docstring.
"""

from __future__ import annotations

import inspect
import json
import re

import pytest
import SALib.analyze.sobol

from poise.report import write_report
from poise.report.load import load_run
from poise.report.methods import cited_keys, methods_paragraphs, paragraph_text
from poise.report.references import REFERENCES
from poise.stability.classify import classify

from test_report import build_run


def _entries(bib: str) -> dict[str, str]:
    """BibTeX entries by key; every entry's braces must balance."""
    entries = {}
    for match in re.finditer(r"@(\w+)\{([^,]+),", bib):
        depth, start = 1, match.end()
        for i in range(start, len(bib)):
            depth += {"{": 1, "}": -1}.get(bib[i], 0)
            if depth == 0:
                entries[match.group(2)] = bib[start:i]
                break
        else:
            raise AssertionError(f"unbalanced entry {match.group(2)}")
    return entries


def _edit(root, name, change):
    data = json.loads((root / name).read_text())
    change(data)
    (root / name).write_text(json.dumps(data))


@pytest.fixture(scope="module")
def newton_run(tmp_path_factory):
    root = build_run(tmp_path_factory.mktemp("methods") / "run")

    def add_solver(summary):
        summary["solver"] = {"method": "newton", "requested": "auto",
                             "choice": {"predicted_speed": 0.469,
                                        "newton_iterations_per_set": 105.4,
                                        "homotopy_evaluations_per_set": 75.0},
                             "completeness": {"checked": 200, "missed": 3, "fraction": 0.015,
                                              "ci95": [0.0051, 0.0432],
                                              "reference": "homotopy continuation"}}
    _edit(root, "summary.json", add_solver)
    _edit(root, "manifest.json", lambda m: m["versions"].update(
        numpy="2.4.6", scipy="1.17.1", SALib="1.6.0", sympy="1.14.0"))
    write_report(root)
    return root


def test_methods_names_its_sources_and_every_one_is_in_references_bib(newton_run):
    md = (newton_run / "report.md").read_text(encoding="utf-8")
    methods = md.split("## Methods")[1].split("## References")[0]
    # the sources issue 18 asks for, as author-year citations
    for cite in ("Wilson 1927", "Sobol' 1993, 2001", "Saltelli et al. 2010", "Hornberger & Spear 1981",
                 "Farrell, Birkisson & Funke 2015", "Sommese & Wampler 2005"):
        assert cite in methods, cite
    tex = (newton_run / "methods.tex").read_text(encoding="utf-8")
    cited = {key for group in re.findall(r"\\cite\{([^}]*)\}", tex) for key in group.split(",")}
    entries = _entries((newton_run / "references.bib").read_text(encoding="utf-8"))
    assert cited == set(entries)                      # nothing cited is missing, nothing extra
    assert {"wilson1927", "sobol1993", "sobol2001", "saltelli2010", "hornberger1981",
            "farrell2015"} <= cited
    for key, body in entries.items():
        assert "title = {" in body and "year = {" in body, key


def test_methods_reports_the_run_design_finder_and_completeness(newton_run):
    text = " ".join(paragraph_text(p) for p in methods_paragraphs(load_run(newton_run)))
    # from the fixture's manifest and summary: N = 135, k = 3 -> N(k + 2) = 675 sets, seed 1
    assert "135 base rows" in text and "N(k + 2) = 675 sets, k = 3" in text and "seed 1" in text
    assert "damped Newton" in text and "deflation" in text
    assert "3 of 200 re-solved sets had a steady state the run missed (1.5 %, 95 % Wilson " \
           "interval 0.5 to 4.3 %)" in text
    assert "predicted homotopy speed 0.469x" in text
    assert "300 bootstrap" not in text and "200 bootstrap resamples" in text
    assert "Wilson score interval (Wilson 1927)" in text
    assert "9 could not be analysed" in text


def test_methods_lists_the_recorded_software_versions(newton_run):
    text = (newton_run / "report.md").read_text(encoding="utf-8").split("## Methods")[1]
    for item in ("poise 0.1.0", "numpy 2.4.6", "scipy 1.17.1", "SALib 1.6.0", "sympy 1.14.0",
                 "Python 3.11"):
        assert item in text, item
    # libsbml is not recorded by this manifest: said so, not guessed from this machine
    assert "libsbml and numba versions not recorded by this run" in text


def test_homotopy_runs_cite_the_finders_papers(tmp_path):
    root = build_run(tmp_path / "run")
    _edit(root, "manifest.json", lambda m: m.update(solver="homotopy"))
    _edit(root, "summary.json", lambda s: s.update(solver={"method": "homotopy", "requested": "homotopy"}))
    run = load_run(root)
    paragraphs = methods_paragraphs(run)
    text = " ".join(paragraph_text(p) for p in paragraphs)
    assert "(Sommese & Wampler 2005)" in text and "(Morgan & Sommese 1989)" in text
    assert "farrell2015" not in cited_keys(paragraphs)
    # homotopy is complete with probability one: no subsample is re-solved for it
    assert "re-solved" not in text and "No completeness check" not in text


def test_sobol_citations_match_salibs_docstring():
    # reference: SALib 1.6.0's docstring of SALib.analyze.sobol.analyze, which lists the
    # estimators' papers with their DOIs
    doc = inspect.getdoc(SALib.analyze.sobol.analyze)
    for key in ("sobol2001", "saltelli2010", "saltelli2002"):
        assert REFERENCES[key].doi in doc, key
        assert REFERENCES[key].volume in doc and str(REFERENCES[key].year) in doc


def test_classification_rule_in_methods_matches_the_classifier():
    # the Methods text states the zero tolerance; it must be the classifier's default
    rtol = inspect.signature(classify).parameters["rtol"].default
    assert rtol == 1e-9
    from poise.report.methods import _CLASSIFY
    assert "off by 1e-9 of the size of its terms" in _CLASSIFY


def test_report_keeps_its_cautions_next_to_the_methods(newton_run):
    md = (newton_run / "report.md").read_text(encoding="utf-8")
    assert "Stability is local." in md and "licensed professionals" in md
    assert "holds only for this model and the parameter distributions given" in \
        md.split("## Methods")[1]
