"""The main result as plain text for a terminal."""

from __future__ import annotations

from pathlib import Path

from .content import claims_table, stable_count_table
from .escape import one_line
from .load import RunData, load_run
from .tables import Table, format_cell

__all__ = ["main_table_text", "plain_table"]

_MAX_TEXT_WIDTH = 48


def _clip(text: str) -> str:
    text = one_line(text)
    # Terminal control characters in a study file must not reach the screen.
    text = "".join(ch if ch.isprintable() else "?" for ch in text)
    return text if len(text) <= _MAX_TEXT_WIDTH else text[: _MAX_TEXT_WIDTH - 1] + "…"


def plain_table(table: Table, skip: tuple[str, ...] = ()) -> str:
    """Columns aligned with spaces; text left, numbers right."""
    keep = [i for i, c in enumerate(table.columns) if c.header not in skip]
    header = [_clip(table.columns[i].header) for i in keep]
    body = [[_clip(format_cell(row[i], table.columns[i].kind)) for i in keep] for row in table.rows]
    widths = [max(len(r[j]) for r in [header, *body]) for j in range(len(keep))]

    def line(cells):
        out = []
        for j, cell in enumerate(cells):
            numeric = table.columns[keep[j]].numeric
            out.append(cell.rjust(widths[j]) if numeric else cell.ljust(widths[j]))
        return "  ".join(out).rstrip()

    rule = "  ".join("-" * w for w in widths)
    return "\n".join([line(header), rule, *(line(r) for r in body)])


def main_table_text(run_dir: str | Path | RunData) -> str:
    """Claim probabilities with 95 % intervals and the stable-count distribution,
    as aligned plain text for stdout.

    Parameters
    ----------
    run_dir : str, Path or RunData
        A finished run directory (or one already loaded).
    """
    run = run_dir if isinstance(run_dir, RunData) else load_run(run_dir)
    parts = []
    claims = claims_table(run)
    if claims is not None and claims.rows:
        parts.append(plain_table(claims, skip=("Holds when",)))
    else:
        parts.append("No claims in this study.")
    stable = stable_count_table(run)
    parts.append(plain_table(stable) if stable.rows else "No parameter set was analysed.")
    counts = run.summary.get("samples", {})
    failed = int(counts.get("failed") or 0)
    line = (f"Parameter sets analysed: {counts.get('analysed', 'n/a')}, "
            f"independent sets behind the probabilities: {counts.get('independent', 'n/a')}")
    if failed:
        line += f", failed and excluded: {failed}"
    parts.append(line + ". Intervals: 95 % Wilson score.")
    return "\n\n".join(parts) + "\n"
