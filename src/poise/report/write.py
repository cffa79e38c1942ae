"""Write every report file of a finished run: tables, figures, report.md, report.html."""

from __future__ import annotations

import os
import re
from pathlib import Path

from . import content
from .assemble import assemble
from .convergence import convergence_frame
from .factormap import factor_map_figure, influential_parameters
from .figures import claims_figure, convergence_figure, sobol_figure, stable_count_figure
from .html import render_html
from .load import RunData, load_run
from .markdown import render_markdown
from .stateplots import rightmost_eigenvalue_figure, trace_determinant_figure
from .style import figure_style, save_figure
from .tables import Column, Table, to_csv, to_latex

__all__ = ["write_report"]


def _write_text(path: Path, text: str) -> Path:
    """Write atomically (temporary file, then rename) with Unix line endings."""
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_bytes(text.encode("utf-8"))
    os.replace(tmp, path)
    return path


def _build_tables(run: RunData, regional: dict) -> dict[str, Table]:
    built = {
        "study": content.study_table(run),
        "parameters": content.parameters_table(run),
        "failures": content.failures_table(run),
        "claims": content.claims_table(run),
        "stable_count": content.stable_count_table(run),
        "classes": content.classes_table(run),
        "sobol": content.sobol_table(run),
        "priorities": content.priority_table(run),
        "regional": content.regional_table(run, regional),
    }
    return {name: table for name, table in built.items() if table is not None}


def _convergence_table(frame) -> Table:
    columns = [Column("claim"), Column("n", "int"), Column("successes", "int"),
               Column("probability", "number"), Column("ci95_low", "number"),
               Column("ci95_high", "number")]
    rows = [[r.claim, int(r.n), int(r.successes), float(r.probability), float(r.ci95_low),
             float(r.ci95_high)] for r in frame.itertuples(index=False)]
    return Table("convergence", "Running estimate of each claim", columns, rows)


def write_report(run_dir: str | Path) -> list[Path]:
    """Write the report of a finished run without recomputing the study.

    Reads ``summary.json``, ``manifest.json`` and the parquet tables of ``run_dir``
    and writes ``report.md``, ``report.html``, ``tables/*.csv``, ``tables/*.tex``,
    ``figures/*.png`` and ``figures/*.svg``. The same inputs give the same bytes.

    Parameters
    ----------
    run_dir : str or Path
        Directory written by ``poise run``.

    Returns
    -------
    list of Path
        Every file written, in writing order.

    Raises
    ------
    poise.errors.InputError
        If the directory is not a readable run directory.
    """
    run = load_run(run_dir)
    root = run.run_dir
    written: list[Path] = []

    regional = content.regional_results(run)
    tables = _build_tables(run, regional)
    for table in tables.values():
        written.append(_write_text(root / "tables" / f"{table.name}.csv", to_csv(table)))
        written.append(_write_text(root / "tables" / f"{table.name}.tex", to_latex(table)))

    independent = run.independent_ok()
    claims = [c for c in run.claim_names if c in independent.columns]
    convergence = convergence_frame(independent, claims)
    if not convergence.empty:
        written.append(_write_text(root / "tables" / "convergence.csv",
                                   to_csv(_convergence_table(convergence))))

    figures_dir = root / "figures"
    captions: dict[str, str] = {}
    claim_stems: dict[str, dict[str, str]] = {}
    state_stem = "steady_states_trace_determinant" if run.reduced_dimension == 2 \
        else "steady_states_rightmost_eigenvalue"

    def keep(fig, stem: str, caption: str) -> None:
        if fig is not None:
            written.extend(save_figure(fig, figures_dir, stem))
            captions[stem] = caption

    with figure_style():
        keep(claims_figure(run.summary.get("claims", {}), run.claim_names), "claims",
             "Probability of each claim with its 95 % Wilson interval.")
        keep(stable_count_figure(run.summary.get("stable_count", {})), "stable_count",
             "Share of parameter sets with each number of stable steady states, with 95 % intervals.")
        if run.reduced_dimension == 2:
            keep(trace_determinant_figure(run.equilibria), state_stem,
                 "Every sampled steady state on the trace-determinant plane of its Jacobian, "
                 "by kind. Above the dashed parabola the eigenvalues are complex (spirals); "
                 "left of the vertical axis with positive determinant is stable.")
        else:
            keep(rightmost_eigenvalue_figure(run.equilibria), state_stem,
                 "Rightmost eigenvalue of every sampled steady state in the complex plane, by "
                 "kind. Left of the vertical axis the steady state is stable.")
        sensitivity = run.summary.get("sensitivity", {})
        params = [p for p in run.uncertain_parameters if p in run.samples.columns]
        values = run.parameters_of(independent["sample_id"]) if not independent.empty else None
        for number, claim in enumerate(run.claim_names, start=1):
            stems = claim_stems.setdefault(claim, {})
            entry = sensitivity.get(claim, {})
            if entry.get("method") == "sobol":
                stem = f"sobol_claim{number:02d}"
                stems["sobol"] = stem
                rough = {p: content.is_rough(entry, p) for p in entry.get("ST", {}) or entry.get("S1", {})}
                keep(sobol_figure(claim, entry, rough), stem,
                     f"Sobol indices for '{claim}': first order (solid) and total (hatched), "
                     "with 95 % bootstrap intervals.")
            if claim in regional and values is not None:
                stem = f"factor_map_claim{number:02d}"
                stems["factor_map"] = stem
                chosen = influential_parameters(params, entry, regional[claim])
                keep(factor_map_figure(claim, values, independent[claim], chosen, regional[claim],
                                       run.manifest.get("parameters", {})), stem,
                     f"Parameter sets where '{claim}' holds (blue dots) or fails (orange "
                     "crosses), for its most influential parameters; the diagonal compares the "
                     "two distributions (solid: holds, dashed: fails) with their KS distance.")
        keep(convergence_figure(convergence, run.claim_names), "convergence",
             "Running estimate of each claim's probability and its 95 % Wilson interval as "
             "independent parameter sets are added in the order they were drawn.")

    doc = assemble(run, tables, captions, claim_stems, state_stem)
    written.append(_write_text(root / "report.md", render_markdown(doc)))
    written.append(_write_text(root / "report.html", render_html(doc, figures_dir)))
    _drop_stale(figures_dir, written)
    return written


# figure files poise writes; others in figures/ are the user's and are left alone
_OWN_FIGURE = re.compile(r"(claims|stable_count|convergence|steady_states_[a-z_]+|"
                         r"(sobol|factor_map)_claim\d+)\.(png|svg)")


def _drop_stale(figures_dir: Path, written: list[Path]) -> None:
    """Remove figures of an earlier rendering that this one did not produce (a figure
    that no longer applies, e.g. after the study's claims changed), so that nothing in
    figures/ contradicts the report next to it."""
    if not figures_dir.is_dir():
        return
    fresh = {p.resolve() for p in written}
    for path in figures_dir.iterdir():
        if _OWN_FIGURE.fullmatch(path.name) and path.resolve() not in fresh:
            path.unlink()
