"""Equations and parameter symbols typeset for each output format.

The manifest stores equations in study-file syntax (``-decay*u + leak``). They are
read back with poise's whitelisting parser (never evaluated as Python) and printed
with sympy's printers: LaTeX for the ``.tex`` tables, presentation MathML (with the
LaTeX kept as an annotation) for the HTML, and readable one-line text
(``decay·u``, ``v^n``) for Markdown and the terminal. CSV keeps the study-file syntax,
which poise can read again.

sympy is imported on first use: a report without equations never pays for it.
"""

from __future__ import annotations

import html
import re
from dataclasses import dataclass

__all__ = ["Math", "expression", "equation", "derivative", "symbol", "readable"]


@dataclass(frozen=True)
class Math:
    """One typeset formula, in every form a table renderer needs.

    Attributes
    ----------
    text : study-file syntax (CSV).
    plain : readable one-line text (Markdown, terminal).
    latex : sympy's LaTeX printer output, without the ``$`` delimiters.
    mathml : presentation MathML for the inside of ``<math>``; empty when sympy's
        MathML printer would show a name differently from the LaTeX (then the HTML
        shows ``plain``).
    """

    text: str
    plain: str
    latex: str
    mathml: str

    def __str__(self) -> str:
        return self.plain


# Names that sympy's printers would split into sub- and superscripts in a way a
# reader could take for mathematics ("x__y" prints as x to the power y; "k_" as k
# with an empty subscript) are printed literally instead.
_MISLEADING_NAME = re.compile(r"__|^_|_$")


def readable(text: str) -> str:
    """Study-file syntax made readable: ``**`` becomes ``^`` and ``*`` becomes ``·``."""
    return text.replace("**", "^").replace("*", "·")


def _literal_names(expr) -> dict:
    """symbol -> literal LaTeX for names sympy would typeset misleadingly."""
    from .escape import escape_latex
    return {s: r"\mathit{" + escape_latex(s.name) + "}" for s in expr.free_symbols
            if _MISLEADING_NAME.search(s.name)}


_NAMED_ENTITY = re.compile(r"&(#[0-9]+|#x[0-9a-fA-F]+|[A-Za-z][A-Za-z0-9]*);")
_KEEP_ENTITY = {"amp", "lt", "gt", "quot", "apos"}


def _characters(markup: str) -> str:
    """Character references in sympy's MathML (``&InvisibleTimes;``, ``&#945;``) as the
    characters themselves, so the page needs no entity table; markup escapes stay."""
    def replace(match: re.Match) -> str:
        char = html.unescape(match.group(0))
        # markup characters stay escaped, however sympy wrote them
        return match.group(0) if match.group(1) in _KEEP_ENTITY or char in "<>&\"'" else char
    return _NAMED_ENTITY.sub(replace, markup)


def _typeset(expr, text: str, plain: str) -> Math:
    import sympy
    from sympy.printing.mathml import mathml

    literal = _literal_names(expr)
    latex = sympy.latex(expr, symbol_names=literal) if literal else sympy.latex(expr)
    markup = "" if literal else _characters(mathml(expr, printer="presentation"))
    return Math(text=text, plain=plain, latex=latex, mathml=markup)


def _parse(text: str):
    """A sympy expression from study-file syntax through poise's safe parser, or None."""
    import sympy

    from ..errors import ExpressionError
    from ..study.expressions import parse_expression, referenced_names
    try:
        names = {name: sympy.Symbol(name) for name in referenced_names(text)}
        return parse_expression(text, names)
    except (ExpressionError, TypeError, ValueError):
        return None


def expression(text: str) -> Math | str:
    """A right-hand side from the manifest, typeset; the text itself if it cannot be read."""
    expr = _parse(str(text))
    if expr is None:
        return str(text)
    return _typeset(expr, str(text), readable(str(text)))


def equation(name: str, text: str) -> Math | str:
    """``name = text`` (a conserved total), typeset as one equation."""
    import sympy
    expr = _parse(str(text))
    if expr is None or not str(name).isidentifier():
        return f"{name} = {text}"
    return _typeset(sympy.Eq(sympy.Symbol(name), expr, evaluate=False), f"{name} = {text}",
                    f"{name} = {readable(str(text))}")


def derivative(state: str) -> Math | str:
    """``d state / dt``, typeset as a derivative."""
    import sympy
    if not str(state).isidentifier():
        return f"d{state}/dt"
    expr = sympy.Derivative(sympy.Symbol(state), sympy.Symbol("t"))
    return _typeset(expr, f"d{state}/dt", f"d{state}/dt")


def symbol(name: str) -> Math | str:
    """A parameter or state name as the symbol the equations show."""
    import sympy
    if not str(name).isidentifier():
        return str(name)
    return _typeset(sympy.Symbol(name), str(name), str(name))
