"""Write every report file of a finished run: tables, figures, the Methods text with its
references, report.md and report.html.

Everything is built in memory first and written only when all of it is ready, each
file atomically through `poise.engine.storage.write_atomic`: a run directory whose
data cannot be read gets no file at all, never a half-rebuilt report.
"""

from __future__ import annotations

import re
from pathlib import Path

from . import content, sensitivity
from .assemble import assemble
from .convergence import convergence_frame
from .figureset import FigureSet, draw_figures
from .load import RunData, load_run
from .methods import cited_keys, methods_latex, methods_paragraphs
from .references import bibtex
from .tables import Column, Table, to_csv, to_latex

__all__ = ["write_report", "build_report"]

# Tables drawn from a parquet file; without the file they are not rebuilt.
_TABLE_SOURCES = {"failures": ("samples.parquet",),
                  "regional": ("samples.parquet", "outcomes.parquet"),
                  "convergence": ("outcomes.parquet",)}
_MAP_TABLE = re.compile(r"probability_map_claim\d+")


def _build_tables(run: RunData, regional: dict) -> dict[str, Table]:
    built = {
        "study": content.study_table(run),
        "parameters": content.parameters_table(run),
        "failures": content.failures_table(run),
        "claims": content.claims_table(run),
        "stable_count": content.stable_count_table(run),
        "classes": content.classes_table(run),
        "sobol": sensitivity.sobol_table(run),
        "priorities": sensitivity.priority_table(run),
        "regional": sensitivity.regional_table(run, regional),
    }
    return {name: table for name, table in built.items() if table is not None}


def _convergence_table(frame) -> Table:
    columns = [Column("claim"), Column("n", "int"), Column("successes", "int"),
               Column("probability", "number"), Column("ci95_low", "number"),
               Column("ci95_high", "number")]
    rows = [[r.claim, int(r.n), int(r.successes), float(r.probability), float(r.ci95_low),
             float(r.ci95_high)] for r in frame.itertuples(index=False)]
    return Table("convergence", "Running estimate of each claim", columns, rows)


def _not_rebuilt(run: RunData, figures: FigureSet) -> tuple[list[str], set[str], dict[str, str]]:
    """Messages, the files to leave in place, and figures of an earlier rendering to show."""
    root, messages, keep, earlier = run.run_dir, [], set(), {}
    for stem, reason in figures.not_rebuilt.items():
        old = [f"figures/{stem}.{ext}" for ext in ("png", "svg") if (root / "figures" / f"{stem}.{ext}").is_file()]
        keep.update(old)
        if old:
            earlier[stem] = reason
            messages.append(f"figures/{stem} not rebuilt ({reason}); the earlier rendering is kept")
        else:
            messages.append(f"figures/{stem} cannot be drawn ({reason})")
    names = dict(_TABLE_SOURCES)
    if run.missing:
        names.update({p.stem: ("samples.parquet", "outcomes.parquet")
                      for p in (root / "tables").glob("probability_map_claim*.csv")})
    for name, sources in names.items():
        reason = run.missing_reason(*sources)
        old = [f"tables/{name}.{ext}" for ext in ("csv", "tex") if (root / "tables" / f"{name}.{ext}").is_file()]
        if reason and old:
            keep.update(old)
            messages.append(f"tables/{name} not rebuilt ({reason}); the earlier version is kept")
    return messages, keep, earlier


def build_report(run: RunData) -> tuple[dict[str, bytes], list[str], set[str]]:
    """Every report file of a loaded run, in memory.

    Returns
    -------
    (files, messages, keep) : relative path -> bytes in writing order; one line per
        figure or table that a missing data file keeps from being rebuilt; and the
        relative paths of earlier renderings to leave in place.
    """
    files: dict[str, bytes] = {}
    regional = sensitivity.regional_results(run)
    tables = _build_tables(run, regional)
    for table in tables.values():
        files[f"tables/{table.name}.csv"] = to_csv(table).encode()
        files[f"tables/{table.name}.tex"] = to_latex(table).encode()

    independent = run.independent_ok()
    claims = [c for c in run.claim_names if c in independent.columns]
    convergence = convergence_frame(independent, claims)
    if not convergence.empty:
        files["tables/convergence.csv"] = to_csv(_convergence_table(convergence)).encode()

    figures = draw_figures(run, regional, convergence)
    for table in figures.tables:
        files[f"tables/{table.name}.csv"] = to_csv(table).encode()
    for stem, images in figures.images.items():
        for ext, data in images.items():
            files[f"figures/{stem}.{ext}"] = data
    messages, keep, earlier = _not_rebuilt(run, figures)

    paragraphs = methods_paragraphs(run)
    keys = cited_keys(paragraphs)
    files["methods.tex"] = methods_latex(paragraphs).encode()
    files["references.bib"] = bibtex(keys).encode()

    from .html import render_html
    from .markdown import render_markdown
    pngs = {stem: images["png"] for stem, images in figures.images.items()}
    for stem in earlier:
        pngs[stem] = (run.run_dir / "figures" / f"{stem}.png").read_bytes()
    doc = assemble(run, tables, figures, earlier, messages, paragraphs, keys)
    files["report.md"] = render_markdown(doc).encode()
    files["report.html"] = render_html(doc, pngs).encode()
    return files, messages, keep


def write_report(run_dir: str | Path, notes: list[str] | None = None) -> list[Path]:
    """Write the report of a finished run without recomputing the study.

    Reads ``summary.json``, ``manifest.json`` and the parquet tables of ``run_dir``
    and writes ``report.md``, ``report.html``, ``methods.tex``, ``references.bib``,
    ``tables/*.csv``, ``tables/*.tex``, ``figures/*.png`` and ``figures/*.svg``. The
    same inputs give the same bytes.

    Parameters
    ----------
    run_dir : str or Path
        Directory written by ``poise run``.
    notes : list of str, optional
        Receives one line per figure or table that could not be rebuilt because a data
        file is missing (the earlier rendering, if any, is kept and the report says so).

    Returns
    -------
    list of Path
        Every file written, in writing order.

    Raises
    ------
    poise.errors.InputError
        If the directory is not a finished run or one of its files cannot be read
        (nothing is written then).
    """
    from ..engine.storage import write_atomic

    run = load_run(run_dir)
    files, messages, keep = build_report(run)
    written = []
    for name, data in files.items():
        path = run.run_dir / name
        write_atomic(path, data)
        written.append(path)
    _drop_stale(run.run_dir, set(files) | keep)
    if notes is not None:
        notes.extend(messages)
    return written


# files poise writes under figures/ and tables/ that depend on the claims; other files
# there are the user's and are left alone
_OWN_FIGURE = re.compile(r"(claims|stable_count|convergence|steady_states_[a-z_]+|"
                         r"(sobol|factor_map|probability_map)_claim\d+)\.(png|svg)")


def _drop_stale(root: Path, current: set[str]) -> None:
    """Remove figures (and probability-map tables) of an earlier rendering that this one
    did not produce, e.g. after the study's claims changed, so that nothing next to the
    report contradicts it."""
    for folder, pattern in (("figures", _OWN_FIGURE), ("tables", _MAP_TABLE)):
        directory = root / folder
        if not directory.is_dir():
            continue
        for path in directory.iterdir():
            name = path.name if folder == "figures" else path.stem
            if pattern.fullmatch(name) and path.suffix in (".png", ".svg", ".csv") \
                    and f"{folder}/{path.name}" not in current:
                path.unlink()
