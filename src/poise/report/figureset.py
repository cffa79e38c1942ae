"""Draw every figure of a report in memory: PNG and SVG bytes with captions.

matplotlib is imported here, on first use, so that reading a run or printing its main
table never pays for it. A figure that needs a data file the run directory lacks is
not drawn; it is listed in `FigureSet.not_rebuilt` with the reason.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from .load import RunData
from .tables import Column, Table

__all__ = ["FigureSet", "draw_figures", "state_stem", "claim_stems"]


@dataclass
class FigureSet:
    """Figures drawn for one report.

    Attributes
    ----------
    images : stem -> {"png": bytes, "svg": bytes}, in drawing order.
    captions : stem -> caption, for every figure drawn.
    not_rebuilt : stem -> reason, for figures a missing data file prevents.
    claim_stems : claim -> {"sobol" | "factor_map" | "probability_map": stem}.
    tables : extra tables computed for the figures (probability maps as CSV).
    """

    images: dict = field(default_factory=dict)
    captions: dict = field(default_factory=dict)
    not_rebuilt: dict = field(default_factory=dict)
    claim_stems: dict = field(default_factory=dict)
    tables: list = field(default_factory=list)


def state_stem(run: RunData) -> str:
    """Stem of the steady-state figure suited to the model's dimension."""
    return ("steady_states_trace_determinant" if run.reduced_dimension == 2
            else "steady_states_rightmost_eigenvalue")


def claim_stems(number: int) -> dict[str, str]:
    """Figure stems of the claim in position ``number`` (from 1)."""
    return {kind: f"{kind}_claim{number:02d}" for kind in ("sobol", "factor_map", "probability_map")}


def _map_table(claim: str, number: int, grids) -> Table:
    columns = [Column("claim"), Column("x"), Column("x_low", "number"), Column("x_high", "number"),
               Column("y"), Column("y_low", "number"), Column("y_high", "number"),
               Column("sets", "int"), Column("holds", "int"), Column("share", "number")]
    rows = []
    for (a, b), x_edges, y_edges, sets, successes, share in grids:
        for i in range(sets.shape[0]):
            for j in range(sets.shape[1]):
                rows.append([claim, a, float(x_edges[i]), float(x_edges[i + 1]), b,
                             float(y_edges[j]), float(y_edges[j + 1]), int(sets[i, j]),
                             int(successes[i, j]), float(share[i, j])])
    return Table(f"probability_map_claim{number:02d}",
                 f"Share of sets where '{claim}' holds per bin of two parameters", columns, rows)


def draw_figures(run: RunData, regional: dict, convergence) -> FigureSet:
    """Every figure of the report, rendered to bytes (see `FigureSet`)."""
    from .figures import claims_figure, convergence_figure, stable_count_figure
    from .stateplots import rightmost_eigenvalue_figure, trace_determinant_figure
    from .style import figure_style, render_figure

    out = FigureSet()

    def keep(fig, stem: str, caption: str) -> None:
        if fig is not None:
            out.images[stem] = render_figure(fig)
            out.captions[stem] = caption

    def skip(stem: str, reason: str | None) -> bool:
        if reason:
            out.not_rebuilt[stem] = reason
        return bool(reason)

    with figure_style():
        keep(claims_figure(run.summary.get("claims", {}), run.claim_names), "claims",
             "Probability of each claim with its 95 % Wilson interval.")
        keep(stable_count_figure(run.summary.get("stable_count", {})), "stable_count",
             "Share of parameter sets with each number of stable steady states, with 95 % "
             "intervals.")
        stem = state_stem(run)
        if not skip(stem, run.missing_reason("equilibria.parquet")):
            if run.reduced_dimension == 2:
                keep(trace_determinant_figure(run.equilibria), stem,
                     "Every sampled steady state on the trace-determinant plane of its Jacobian, "
                     "by kind (a random subset where there are very many; the legend counts "
                     "all). Above the dashed parabola the eigenvalues are complex (spirals); "
                     "left of the vertical axis with positive determinant is stable.")
            else:
                keep(rightmost_eigenvalue_figure(run.equilibria), stem,
                     "Rightmost eigenvalue of every sampled steady state in the complex plane, "
                     "by kind (a random subset where there are very many; the legend counts "
                     "all). Left of the vertical axis the steady state is stable.")
        _claim_figures(run, regional, out, keep, skip)
        if not skip("convergence", run.missing_reason("outcomes.parquet")):
            keep(convergence_figure(convergence, run.claim_names), "convergence",
                 "Running estimate of each claim's probability and its 95 % Wilson interval as "
                 "independent parameter sets are added in the order they were drawn.")
    return out


def _claim_figures(run: RunData, regional: dict, out: FigureSet, keep, skip) -> None:
    """Per claim: Sobol indices, factor map and two-parameter probability map."""
    from .factormap import factor_map_figure, influential_parameters
    from .figures import sobol_figure
    from .probmap import map_pairs, probability_map_figure
    from .sensitivity import is_rough

    sensitivity = run.summary.get("sensitivity", {})
    params = [p for p in run.uncertain_parameters if p in run.samples.columns]
    independent = run.independent_ok()
    values = run.parameters_of(independent["sample_id"]) if not independent.empty else None
    specs = run.manifest.get("parameters", {})
    data_reason = run.missing_reason("samples.parquet", "outcomes.parquet")
    for number, claim in enumerate(run.claim_names, start=1):
        stems = claim_stems(number)
        out.claim_stems[claim] = stems
        entry = sensitivity.get(claim) or {}
        if entry.get("method") == "sobol":
            rough = {p: is_rough(entry, p) for p in (entry.get("ST") or entry.get("S1") or {})}
            keep(sobol_figure(claim, entry, rough), stems["sobol"],
                 f"Sobol indices for '{claim}': first order (solid) and total (hatched), with 95 % "
                 "bootstrap intervals.")
        if data_reason:
            skip(stems["factor_map"], data_reason)
            skip(stems["probability_map"], data_reason)
            continue
        if claim not in regional or values is None:
            continue
        chosen = influential_parameters(params, entry, regional[claim])
        keep(factor_map_figure(claim, values, independent[claim], chosen, regional[claim], specs),
             stems["factor_map"],
             f"Parameter sets where '{claim}' holds (blue dots) or fails (orange crosses) for its "
             "most influential parameters (at most 4,000 sets drawn, a random subset). Diagonal: "
             "the share of sets where the claim holds along each parameter (black line, 0 to 1, "
             "per bin, with its 95 % Wilson band in grey), over the histograms of the sets where "
             "it holds (solid) and fails (dashed), on the parameter's own scale (log bins for "
             "log-distributed parameters), with the KS distance.")
        pairs, rule = map_pairs(params, entry, regional[claim])
        fig, grids = probability_map_figure(claim, values, independent[claim], pairs, specs)
        keep(fig, stems["probability_map"],
             f"Share of sets where '{claim}' holds over bins of two parameters, the others "
             f"averaged out; pairs chosen by the {rule}. The number in each bin is its count "
             "of sets (written once above a panel whose bins all hold the same number); grey "
             "bins hold fewer than 5. Where the colour changes sharply lies the "
             "boundary of the claim.")
        if grids:
            out.tables.append(_map_table(claim, number, grids))
