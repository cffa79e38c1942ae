"""Equations, values and order in the report's tables (issue 18, items 2 and 3).

Outside references: sympy's own LaTeX and MathML printers applied to expressions built
here directly with sympy (not parsed from text); the CommonMark spec for Markdown; the
standard library's html.parser and, where installed, a headless Chromium for the HTML.
"""

from __future__ import annotations

import html
import html.parser
import json
import re
import shutil
import subprocess

import matplotlib.image
import numpy as np
import pandas as pd
import pytest
import sympy
from sympy.printing.mathml import mathml

from poise.report import write_report
from poise.report.equations import Math, expression
from poise.report.tables import Column, Table, to_csv

from test_report import build_run

A, G, K, c, s = sympy.symbols("A G K c s")
# The fixture's equations, built directly in sympy: d(state)/dt = -state + K*c/(s + state)
HAND_BUILT = {"A": -A + K * c / (s + A), "G": -G + K * c / (s + G)}


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    root = build_run(tmp_path_factory.mktemp("equations") / "run")
    # the model's own order: states G before A, parameters s, K, r, c as in the study file
    manifest = json.loads((root / "manifest.json").read_text())
    manifest["states"] = ["G", "A"]
    manifest["reduced_states"] = ["G", "A"]
    manifest["parameters"]["r"] = {"value": 57823.1}
    manifest["parameters"]["K"].update(low=0.001234567, nominal=5.0000001)
    (root / "manifest.json").write_text(json.dumps(manifest, indent=2, sort_keys=True))
    (root / "study.toml").write_text("[parameters]\ns = 1\nK = 2\nr = 3\nc = 4\n")
    write_report(root)
    return root


def _tex_rows(path) -> list[list[str]]:
    rows = []
    for line in path.read_text(encoding="utf-8").splitlines():
        if line.endswith(r"\\") and " & " in line:
            rows.append(line[:-2].strip().split(" & "))
    return rows


def _balanced(cell: str) -> bool:
    """Braces never close before they open and all close; \\left/\\right and $ pair up."""
    depth = 0
    for token in re.findall(r"\\[{}]|[{}]", cell):
        if token in ("{", "}"):
            depth += 1 if token == "{" else -1
            if depth < 0:
                return False
    return (depth == 0 and cell.count(r"\left") == cell.count(r"\right")
            and cell.replace(r"\$", "").count("$") % 2 == 0)


def test_equation_cells_of_the_tex_tables_are_sympys_latex_in_math_mode(run_dir):
    rows = {row[0]: row[1] for row in _tex_rows(run_dir / "tables" / "study.tex")}
    for state, expr in HAND_BUILT.items():
        derivative = sympy.Derivative(sympy.Symbol(state), sympy.Symbol("t"))
        label = "$" + sympy.latex(derivative) + "$"     # reference: sympy's LaTeX printer
        assert label in rows, label
        assert rows[label] == "$" + sympy.latex(expr) + "$"
        assert _balanced(label) and _balanced(rows[label])
    for table in (run_dir / "tables").glob("*.tex"):
        for row in _tex_rows(table):
            for cell in row:
                assert _balanced(cell), (table.name, cell)


def test_parameter_symbols_in_tex_are_sympys_latex(run_dir):
    rows = _tex_rows(run_dir / "tables" / "parameters.tex")[1:]
    # reference: sympy's printer for each name; order of the study file's [parameters]
    assert [row[0] for row in rows] == ["$" + sympy.latex(sympy.Symbol(n)) + "$"
                                        for n in ["s", "K", "r", "c"]]


def test_equations_and_parameters_keep_the_models_order(run_dir):
    study = pd.read_csv(run_dir / "tables" / "study.csv")
    items = list(study["Item"])
    assert items.index("dG/dt") < items.index("dA/dt")           # state order, not sorted
    assert list(pd.read_csv(run_dir / "tables" / "parameters.csv")["Parameter"]) == \
        ["s", "K", "r", "c"]
    sobol = pd.read_csv(run_dir / "tables" / "sobol.csv")
    assert list(sobol["Parameter"].iloc[:3]) == ["s", "K", "c"]    # uncertain ones, same order


def test_values_at_full_precision_in_every_format(run_dir):
    # 57823.1 must not become 5.782e+04, nor 0.001234567 become 0.001235
    for name in ("tables/parameters.csv", "tables/parameters.tex", "report.md", "report.html"):
        text = (run_dir / name).read_text(encoding="utf-8")
        assert "57823.1" in text and "5.782e+04" not in text, name
        assert "0.001234567" in text and "5.0000001" in text, name
    assert "r = 57823.1" in (run_dir / "tables" / "study.csv").read_text()


def test_csv_keeps_study_syntax_and_protects_only_formula_starts(run_dir):
    study = (run_dir / "tables" / "study.csv").read_text()
    assert "dA/dt,-A + K*c/(s + A)" in study                 # no apostrophe before "-"
    table = Table("t", "c", [Column("x")], [["=1+2"], ["+cmd"], ["@SUM(A1)"], ["-A + K"],
                                            ["2 - 1"]])
    # rule of thumb of the trade for spreadsheet formula injection (common practice, no
    # source): a cell starting with = + @ is run as a formula; "-" is left as written
    assert to_csv(table).splitlines()[1:] == ["'=1+2", "'+cmd", "'@SUM(A1)", "-A + K", "2 - 1"]


def test_markdown_shows_readable_equations_without_entities(run_dir):
    text = (run_dir / "report.md").read_text(encoding="utf-8")
    # source: CommonMark 0.31.2, 6.1: a code span shows its content verbatim
    assert "| `dA/dt` | `-A + K·c/(s + A)` |" in text
    study = text.split("**Model, design and run**")[1].split("**Parameters**")[0]
    assert "**" not in study and "·" in study             # no Python powers or products
    assert not re.search(r"&(#[0-9]+|#x[0-9a-fA-F]+|[A-Za-z][A-Za-z0-9]*);", text)


class _MathCollector(html.parser.HTMLParser):
    """Collects the LaTeX annotations of <math> elements and checks that every element
    is closed in order (void elements excepted)."""

    VOID = {"meta", "img", "br", "hr", "link", "input"}

    def __init__(self):
        super().__init__()
        self.stack, self.errors, self.annotations = [], [], []
        self._in_annotation = False

    def handle_starttag(self, tag, attrs):
        if tag not in self.VOID:
            self.stack.append(tag)
        if tag == "annotation" and ("encoding", "application/x-tex") in attrs:
            self._in_annotation = True
            self.annotations.append("")

    def handle_endtag(self, tag):
        if not self.stack or self.stack.pop() != tag:
            self.errors.append(tag)
        self._in_annotation = self._in_annotation and tag != "annotation"

    def handle_data(self, data):
        if self._in_annotation:
            self.annotations[-1] += data


def test_html_is_well_formed_and_carries_sympys_latex(run_dir):
    page = (run_dir / "report.html").read_text(encoding="utf-8")
    parser = _MathCollector()
    parser.feed(page)
    parser.close()
    assert not parser.errors and parser.stack == []
    for expr in HAND_BUILT.values():
        assert sympy.latex(expr) in parser.annotations   # reference: sympy's LaTeX printer
    # the MathML itself is sympy's presentation printer output, characters decoded
    presentation = mathml(HAND_BUILT["A"], printer="presentation")
    assert html.unescape(presentation) in html.unescape(page)


@pytest.mark.skipif(shutil.which("chromium") is None, reason="no chromium installed: the HTML is "
                    "checked with html.parser only (test_html_is_well_formed_...)")
def test_html_renders_in_a_headless_browser_without_network(run_dir, tmp_path):
    shot = tmp_path / "page.png"
    common = ["chromium", "--headless=new", "--no-sandbox", "--disable-gpu",
              "--host-resolver-rules=MAP * ~NOTFOUND", "--no-first-run",
              f"--user-data-dir={tmp_path / 'profile'}"]
    url = (run_dir / "report.html").as_uri()
    done = subprocess.run(common + [f"--screenshot={shot}", "--window-size=1000,1400", url],
                          capture_output=True, timeout=120)
    assert done.returncode == 0, done.stderr[-2000:]
    image = matplotlib.image.imread(shot)
    assert image.shape[0] > 500 and float(np.std(image[..., :3])) > 0.01   # not blank
    dom = subprocess.run(common + ["--dump-dom", url], capture_output=True, timeout=120, text=True)
    assert dom.returncode == 0
    # the browser built <math> elements from the page (MathML Core)
    assert dom.stdout.count("<math") >= 2 and "<h1>" in dom.stdout


def test_names_sympy_would_misread_are_printed_literally():
    x_y, z = sympy.symbols("x__y z")
    shown = expression("x__y*z")
    assert isinstance(shown, Math)
    # sympy prints the symbol x__y as x^{y}, which reads as a power; the report passes
    # symbol_names to sympy's printer instead (reference: the same printer call)
    assert sympy.latex(x_y) == "x^{y}"
    assert shown.latex == sympy.latex(x_y * z, symbol_names={x_y: r"\mathit{x\_\_y}"})
    assert shown.mathml == "" and shown.plain == "x__y·z"


def test_text_that_cannot_be_parsed_stays_text():
    assert expression("import os") == "import os"
