"""A small table model and its four renderings: Markdown, HTML, CSV and LaTeX (booktabs).

Cells hold raw values (text, numbers, intervals, typeset formulas); each rendering
formats and escapes them itself, so CSV keeps full precision while the documents show
rounded numbers, and a formula becomes LaTeX math, MathML, readable text or
study-file syntax as the format needs.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass, field

from .equations import Math
from .escape import escape_html, escape_latex, escape_markdown, markdown_code, one_line

__all__ = ["Interval", "Column", "Table", "format_cell", "exact_number", "as_float", "as_interval",
           "to_markdown", "to_html", "to_csv", "to_latex"]

MISSING = "n/a"


@dataclass(frozen=True)
class Interval:
    """A closed interval [lo, hi], e.g. a 95 % confidence interval."""

    lo: float
    hi: float


@dataclass(frozen=True)
class Column:
    """One table column.

    kind : "text" | "int" | "prob" | "index" | "interval" | "number" | "exact" | "pvalue"
        Decides formatting and alignment (text left, everything else right).
        "exact" shows a value as given (shortest text that reads back to the same
        float), for inputs such as fixed and nominal parameter values.
    wide : bool
        Long free text (sentences, expressions): wraps in LaTeX.
    """

    header: str
    kind: str = "text"
    wide: bool = False

    @property
    def numeric(self) -> bool:
        return self.kind != "text"


@dataclass
class Table:
    """A titled table; ``name`` is also the file stem under ``tables/``."""

    name: str
    caption: str
    columns: list[Column]
    rows: list[list] = field(default_factory=list)
    note: str = ""


def as_float(value) -> float:
    """A JSON number as float; NaN for null."""
    return math.nan if value is None else float(value)


def as_interval(pair) -> Interval:
    """A JSON ``[lo, hi]`` pair as an Interval; NaN ends where null or malformed."""
    if not pair or len(pair) != 2:
        return Interval(math.nan, math.nan)
    return Interval(as_float(pair[0]), as_float(pair[1]))


def _is_missing(value) -> bool:
    return value is None or (isinstance(value, float) and math.isnan(value))


def exact_number(value) -> str:
    """A number at full precision: whole numbers without ``.0``, others as the
    shortest text that reads back to the same float (``57823.1``, ``2.2360679774997902``)."""
    number = float(value)
    if number.is_integer() and abs(number) < 1e16:
        return str(int(number))
    return repr(number)


def format_cell(value, kind: str) -> str:
    """Format one raw cell value for a document (rounded; 'n/a' when missing)."""
    if isinstance(value, Math):
        return value.plain
    if isinstance(value, Interval):
        if _is_missing(value.lo) or _is_missing(value.hi):
            return MISSING
        return f"[{value.lo:.3f}, {value.hi:.3f}]"
    if _is_missing(value):
        return MISSING
    if kind == "text" or isinstance(value, str):
        return one_line(value)
    if kind == "int":
        return str(int(value))
    if kind in ("prob", "index"):
        return f"{float(value):.3f}"
    if kind == "pvalue":
        return "< 0.001" if value < 0.001 else f"{float(value):.3f}"
    if kind == "exact":
        return exact_number(value)
    return format(float(value), ".4g")


# -- Markdown ---------------------------------------------------------------------

def _markdown_cell(value, kind: str) -> str:
    if isinstance(value, Math):  # readable text in a code span: nothing inside is markup
        return markdown_code(value.plain, in_table=True)
    return escape_markdown(format_cell(value, kind))


def to_markdown(table: Table) -> str:
    """Pipe table (GitHub / CommonMark extension) with every cell escaped."""
    header = "| " + " | ".join(escape_markdown(c.header) for c in table.columns) + " |"
    rule = "| " + " | ".join("---:" if c.numeric else ":---" for c in table.columns) + " |"
    lines = [header, rule]
    for row in table.rows:
        cells = (_markdown_cell(v, c.kind) for v, c in zip(row, table.columns))
        lines.append("| " + " | ".join(cells) + " |")
    return "\n".join(lines) + "\n"


# -- HTML -------------------------------------------------------------------------

def html_math(value: Math) -> str:
    """Inline MathML with the LaTeX source as annotation; readable text in ``<code>``
    where the formula has no MathML form."""
    if not value.mathml:
        return f"<code>{escape_html(value.plain)}</code>"
    return ('<math display="inline"><semantics><mrow>' + value.mathml + "</mrow>"
            '<annotation encoding="application/x-tex">' + escape_html(value.latex)
            + "</annotation></semantics></math>")


def _html_cell(value, kind: str) -> str:
    if isinstance(value, Math):
        return html_math(value)
    return escape_html(format_cell(value, kind))


def to_html(table: Table) -> str:
    """A ``<table>`` element with caption; numeric cells carry class ``num``."""
    out = [f'<table id="table-{escape_html(table.name)}">',
           f"<caption>{escape_html(table.caption)}</caption>", "<thead><tr>"]
    for col in table.columns:
        klass = ' class="num"' if col.numeric else ""
        out.append(f"<th{klass}>{escape_html(col.header)}</th>")
    out.append("</tr></thead>")
    out.append("<tbody>")
    for row in table.rows:
        cells = []
        for value, col in zip(row, table.columns):
            klass = ' class="num"' if col.numeric else ""
            cells.append(f"<td{klass}>{_html_cell(value, col.kind)}</td>")
        out.append("<tr>" + "".join(cells) + "</tr>")
    out.append("</tbody></table>")
    return "\n".join(out) + "\n"


# -- CSV --------------------------------------------------------------------------

# A text cell starting with one of these would be run as a formula by a spreadsheet
# program; such cells get a leading apostrophe. "-" is left alone, so equations and
# negative numbers written as text stay as they are ("-decay*u + leak"); a cell
# cannot start with a tab or line break (whitespace is folded first).
SPREADSHEET_TRIGGERS = ("=", "+", "@")


def _csv_text(value: str) -> str:
    return "'" + value if value.startswith(SPREADSHEET_TRIGGERS) else value


def _csv_number(value) -> str:
    if _is_missing(value):
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    return repr(float(value))


def to_csv(table: Table) -> str:
    """Full-precision CSV; an interval column becomes two columns (low, high)."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    header = []
    for col in table.columns:
        if col.kind == "interval":
            header += [f"{col.header} low", f"{col.header} high"]
        else:
            header.append(col.header)
    writer.writerow([_csv_text(one_line(h)) for h in header])
    for row in table.rows:
        cells = []
        for value, col in zip(row, table.columns):
            if col.kind == "interval":
                lo, hi = (value.lo, value.hi) if isinstance(value, Interval) else (None, None)
                cells += [_csv_number(lo), _csv_number(hi)]
            elif isinstance(value, Math):
                cells.append(_csv_text(one_line(value.text)))
            elif col.kind == "text" or isinstance(value, str):
                cells.append("" if _is_missing(value) else _csv_text(one_line(value)))
            else:
                cells.append(_csv_number(value))
        writer.writerow(cells)
    return buffer.getvalue()


# -- LaTeX ------------------------------------------------------------------------

def _latex_colspec(col: Column) -> str:
    if col.wide:
        return r"p{0.4\linewidth}"
    return "r" if col.numeric else "l"


def _latex_row(cells) -> str:
    cells = list(cells)
    # After \\ or a booktabs rule, a leading [ or * would be read as an optional
    # argument or the starred form; an empty group in front stops that.
    if cells and cells[0].startswith(("[", "*")):
        cells[0] = "{}" + cells[0]
    return " & ".join(cells) + r" \\"


def _latex_cell(value, kind: str) -> str:
    if isinstance(value, Math):  # sympy's LaTeX printer output in math mode
        return "$" + value.latex + "$"
    return escape_latex(format_cell(value, kind))


def to_latex(table: Table) -> str:
    """A booktabs ``table`` float ready for ``\\input``; needs ``\\usepackage{booktabs}``."""
    spec = "".join(_latex_colspec(c) for c in table.columns)
    lines = [
        "% Written by poise. Needs \\usepackage{booktabs} in the preamble.",
        r"\begin{table}[htbp]",
        r"\centering",
        r"\caption{" + escape_latex(table.caption) + "}",
        r"\label{tab:poise-" + table.name.replace("_", "-") + "}",
        r"\begin{tabular}{" + spec + "}",
        r"\toprule",
        _latex_row(escape_latex(c.header) for c in table.columns),
        r"\midrule",
    ]
    for row in table.rows:
        lines.append(_latex_row(_latex_cell(v, c.kind) for v, c in zip(row, table.columns)))
    lines += [r"\bottomrule", r"\end{tabular}"]
    if table.note:
        lines.append(r"\par\smallskip{\footnotesize " + escape_latex(table.note) + "}")
    lines.append(r"\end{table}")
    return "\n".join(lines) + "\n"
