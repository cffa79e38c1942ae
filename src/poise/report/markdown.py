"""Render a report `Document` as Markdown (figures referenced as relative files)."""

from __future__ import annotations

from .document import Bullets, Document, FigureBlock, Heading, Paragraph, TableBlock
from .escape import escape_markdown
from .tables import to_markdown

__all__ = ["render_markdown"]


def _item(item) -> str:
    if isinstance(item, tuple):
        term, text = item
        return f"**{escape_markdown(term)}** {escape_markdown(text)}"
    return escape_markdown(item)


def render_markdown(doc: Document) -> str:
    """Markdown text of the whole report; every string is escaped."""
    parts: list[str] = []
    for block in doc.blocks:
        if isinstance(block, Heading):
            parts.append("#" * block.level + " " + escape_markdown(block.text))
        elif isinstance(block, Paragraph):
            text = escape_markdown(block.text)
            if block.kind == "note":
                text = "> **Note.** " + text
            elif block.kind == "lead":
                text = "*" + text + "*"
            parts.append(text)
        elif isinstance(block, Bullets):
            prefix = "> " if block.kind == "caution" else ""
            parts.append("\n".join(prefix + "- " + _item(i) for i in block.items))
        elif isinstance(block, TableBlock):
            table = block.table
            parts.append("**" + escape_markdown(table.caption) + "**")
            parts.append(to_markdown(table).rstrip("\n"))
            if table.note:
                parts.append("*" + escape_markdown(table.note) + "*")
        elif isinstance(block, FigureBlock):
            alt = escape_markdown(block.alt or block.caption)
            parts.append(f"![{alt}](figures/{block.stem}.png)")
            parts.append("*" + escape_markdown(block.caption) + "*")
    return "\n\n".join(parts) + "\n"
