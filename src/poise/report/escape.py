"""Escaping of user text (titles, names, expressions) for each output format.

Every piece of text that reaches a report goes through one of these functions,
including our own sentences: that way nothing a study file says can become markup.
"""

from __future__ import annotations

import html
import re

__all__ = ["escape_html", "escape_markdown", "markdown_code", "escape_latex", "escape_mathtext",
           "one_line"]

_WHITESPACE = re.compile(r"\s+")


def one_line(text: object) -> str:
    """Collapse all whitespace (newlines, tabs) to single spaces."""
    return _WHITESPACE.sub(" ", str(text)).strip()


def escape_html(text: object) -> str:
    """Escape text for HTML element content and quoted attribute values."""
    return html.escape(str(text), quote=True)


# Markdown escaping follows CommonMark 0.31.2 (with the GitHub table extension): a
# backslash before any ASCII punctuation character shows that character literally
# (section 2.4). Characters with a meaning anywhere get a backslash; <, & and > only
# where they could start markup, so "u > v" and "x < 2 & y" stay readable and no
# HTML entity appears in the text.
_MARKDOWN_BACKSLASHED = set("\\`*{}#|~$^")
# "<" followed by a letter, "/", "!" or "?" could open a tag, comment, declaration or
# autolink (sections 6.5, 6.6); "&" followed by a letter or "#" could start an entity or
# character reference (section 2.5); "]" followed by "(", "[" or ":" could close a link
# or image, or start a link reference definition (sections 4.7, 6.3, 6.4). A bracket
# elsewhere, as in an interval "[0.059, 0.081]", is plain text: no link can form without
# an unescaped "]" in one of those places, and poise writes no reference definitions.
_MARKDOWN_MARKUP_START = re.compile(r"<(?=[A-Za-z/!?])|&(?=[A-Za-z#])|\](?=[(\[:])")
# A line that starts like a list item ("- ", "+ ", "1. ", "2) "), a rule ("---") or a
# block quote (">") would become one.
_MARKDOWN_LIST_START = re.compile(r"^([-+](?=[\s-]|$)|\d+[.)](?=\s|$)|>)")


def _underscore(text: str, index: int) -> str:
    # Between two letters or digits "_" can neither open nor close emphasis
    # (CommonMark 6.2, left- and right-flanking rules), so top_u stays as written.
    before = text[index - 1] if index > 0 else " "
    after = text[index + 1] if index + 1 < len(text) else " "
    return "_" if before.isalnum() and after.isalnum() else "\\_"


def escape_markdown(text: object) -> str:
    """Escape text for Markdown paragraphs, headings and table cells.

    Line breaks are folded to spaces, so one call yields one line: a table cell
    cannot be split and a heading cannot be ended early. Only backslash escapes are
    used, never HTML entities, so the Markdown source stays readable.
    """
    flat = one_line(text)
    out = []
    for index, char in enumerate(flat):
        if char == "_":
            out.append(_underscore(flat, index))
        elif char in _MARKDOWN_BACKSLASHED:
            out.append("\\" + char)
        else:
            out.append(char)
    escaped = _MARKDOWN_MARKUP_START.sub(lambda m: "\\" + m.group(0), "".join(out))
    return _MARKDOWN_LIST_START.sub(lambda m: m.group(1)[:-1] + "\\" + m.group(1)[-1], escaped)


def markdown_code(text: object, in_table: bool = False) -> str:
    """Text as a CommonMark code span: shown verbatim, nothing inside is markup.

    The fence is one backtick longer than the longest run of backticks in the text
    (CommonMark 6.1). In a table cell a "|" still ends the cell, even inside a code
    span, and is escaped (GitHub table extension, section 4.10).
    """
    flat = one_line(text)
    runs = [len(run) for run in re.findall(r"`+", flat)]
    fence = "`" * (max(runs, default=0) + 1)
    padded = f" {flat} " if flat.startswith("`") or flat.endswith("`") else flat
    if in_table:
        padded = padded.replace("|", "\\|")
    return fence + padded + fence


_LATEX = {
    "\\": r"\textbackslash{}",
    "&": r"\&",
    "%": r"\%",
    "$": r"\$",
    "#": r"\#",
    "_": r"\_",
    "{": r"\{",
    "}": r"\}",
    "~": r"\textasciitilde{}",
    "^": r"\textasciicircum{}",
    # In the default OT1 font encoding <, > and | print as other glyphs.
    "<": r"\textless{}",
    ">": r"\textgreater{}",
    "|": r"\textbar{}",
}


def escape_latex(text: object) -> str:
    """Escape text for LaTeX (text mode) in a single pass, so no escape is escaped twice."""
    return "".join(_LATEX.get(char, char) for char in one_line(text))


def escape_mathtext(text: object) -> str:
    """Escape text for matplotlib labels: a bare ``$`` would start math mode."""
    return one_line(text).replace("$", r"\$")
