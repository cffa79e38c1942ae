"""Escaping of user text (titles, names, expressions) for each output format.

Every piece of text that reaches a report goes through one of these functions,
including our own sentences: that way nothing a study file says can become markup.
"""

from __future__ import annotations

import html
import re

__all__ = ["escape_html", "escape_markdown", "escape_latex", "escape_mathtext", "one_line"]

_WHITESPACE = re.compile(r"\s+")


def one_line(text: object) -> str:
    """Collapse all whitespace (newlines, tabs) to single spaces."""
    return _WHITESPACE.sub(" ", str(text)).strip()


def escape_html(text: object) -> str:
    """Escape text for HTML element content and quoted attribute values."""
    return html.escape(str(text), quote=True)


# Characters with a meaning somewhere in CommonMark or its common extensions
# (tables, strikethrough, math). <, > and & become entities so that no renderer,
# whether or not it passes raw HTML through, can see a tag or an entity.
_MARKDOWN_ENTITIES = {"&": "&amp;", "<": "&lt;", ">": "&gt;"}
_MARKDOWN_BACKSLASHED = set("\\`*_{}[]#|~$^")
# A line that starts like a list item ("- ", "+ ", "1. ", "2) ") or a rule ("---")
# would become one.
_MARKDOWN_LIST_START = re.compile(r"^([-+](?=[\s-]|$)|\d+[.)](?=\s|$))")


def escape_markdown(text: object) -> str:
    """Escape text for Markdown paragraphs, headings and table cells.

    Line breaks are folded to spaces, so one call yields one line: a table cell
    cannot be split and a heading cannot be ended early.
    """
    out = []
    for char in one_line(text):
        if char in _MARKDOWN_ENTITIES:
            out.append(_MARKDOWN_ENTITIES[char])
        elif char in _MARKDOWN_BACKSLASHED:
            out.append("\\" + char)
        else:
            out.append(char)
    escaped = "".join(out)
    return _MARKDOWN_LIST_START.sub(lambda m: m.group(1)[:-1] + "\\" + m.group(1)[-1], escaped)


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
