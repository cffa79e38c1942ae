"""Render a report `Document` as one self-contained HTML file.

Figures are embedded as base64 PNG, styles are inline, and a Content-Security-Policy
forbids every network request, so the file opens the same offline.
"""

from __future__ import annotations

import base64

from .document import Bullets, Document, FigureBlock, Heading, Paragraph, TableBlock
from .escape import escape_html
from .tables import to_html

__all__ = ["render_html"]

_CSS = """
body { font-family: "DejaVu Sans", "Helvetica Neue", Arial, sans-serif; color: #1a1a1a;
       max-width: 62rem; margin: 2rem auto; padding: 0 1.5rem; line-height: 1.5; }
h1 { font-size: 1.7rem; margin-bottom: 0.2rem; overflow-wrap: anywhere; }
h2 { font-size: 1.3rem; margin-top: 2.4rem; border-bottom: 1px solid #ccc; padding-bottom: 0.2rem; }
p.lead { color: #555; margin-top: 0; }
p.note { background: #fff6e0; border-left: 4px solid #E69F00; padding: 0.5rem 0.8rem; }
ul.caution { background: #f3f3f3; border-left: 4px solid #000; padding: 0.6rem 1rem 0.6rem 2rem; }
nav ol { columns: 2; font-size: 0.95rem; }
nav a { color: #0072B2; }
table { border-collapse: collapse; margin: 1.2rem 0 0.4rem; font-size: 0.9rem; }
caption { text-align: left; font-weight: bold; padding-bottom: 0.4rem; }
th, td { padding: 0.25rem 0.7rem; vertical-align: top; overflow-wrap: break-word; }
td { max-width: 40rem; }
thead th { border-top: 2px solid #000; border-bottom: 1px solid #000; text-align: left; }
tbody tr:last-child td { border-bottom: 2px solid #000; }
tbody tr:nth-child(even) { background: #f7f7f7; }
.num { text-align: right; font-variant-numeric: tabular-nums; }
td.num { white-space: nowrap; }
p.tablenote { font-size: 0.85rem; color: #444; margin-top: 0; }
figure { margin: 1.5rem 0; }
figure img { max-width: 100%; height: auto; border: 1px solid #eee; }
figcaption { font-size: 0.9rem; color: #333; margin-top: 0.3rem; }
math { font-size: 1.15em; }
"""

_CSP = "default-src 'none'; img-src data:; style-src 'unsafe-inline'"


def _item(item) -> str:
    if isinstance(item, tuple):
        term, text = item
        return f"<strong>{escape_html(term)}</strong> {escape_html(text)}"
    return escape_html(item)


def _image(png: bytes) -> str:
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")


def _contents(doc: Document) -> str:
    entries = [f'<li><a href="#{escape_html(b.anchor)}">{escape_html(b.text)}</a></li>'
               for b in doc.blocks if isinstance(b, Heading) and b.level == 2 and b.anchor]
    if not entries:
        return ""
    return "<nav><strong>Contents</strong><ol>" + "".join(entries) + "</ol></nav>"


def render_html(doc: Document, pngs: dict[str, bytes]) -> str:
    """Complete HTML page with every figure embedded (``pngs``: stem -> PNG bytes)."""
    body: list[str] = []
    for block in doc.blocks:
        if isinstance(block, Heading):
            anchor = f' id="{escape_html(block.anchor)}"' if block.anchor else ""
            if block.level == 2 and "<!--contents-->" not in body:
                body.append("<!--contents-->")
            body.append(f"<h{block.level}{anchor}>{escape_html(block.text)}</h{block.level}>")
        elif isinstance(block, Paragraph):
            klass = f' class="{block.kind}"' if block.kind != "plain" else ""
            body.append(f"<p{klass}>{escape_html(block.text)}</p>")
        elif isinstance(block, Bullets):
            klass = f' class="{block.kind}"' if block.kind != "plain" else ""
            body.append(f"<ul{klass}>" + "".join(f"<li>{_item(i)}</li>" for i in block.items)
                        + "</ul>")
        elif isinstance(block, TableBlock):
            body.append(to_html(block.table).rstrip("\n"))
            if block.table.note:
                body.append(f'<p class="tablenote">{escape_html(block.table.note)}</p>')
        elif isinstance(block, FigureBlock):
            alt = escape_html(block.alt or block.caption)
            body.append(f'<figure id="figure-{escape_html(block.stem)}"><img src="{_image(pngs[block.stem])}" '
                        f'alt="{alt}"><figcaption>{escape_html(block.caption)}</figcaption></figure>')
    text = "\n".join(body).replace("<!--contents-->", _contents(doc), 1)
    return (
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
        f"<meta http-equiv=\"Content-Security-Policy\" content=\"{_CSP}\">\n"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
        f"<title>{escape_html(doc.title)}</title>\n<style>{_CSS}</style>\n</head>\n<body>\n"
        f"{text}\n</body>\n</html>\n"
    )
