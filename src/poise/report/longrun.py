"""The report's section on long-run behaviour: tables, readings and the section itself.

Everything comes from summary.json's "long_run" entry (written by
`poise.longrun.summary`); the figures are in `longrunplots`. A run without a
``[long_run]`` table gets a short note saying how to ask for the simulation.
"""

from __future__ import annotations

from .document import Heading, Paragraph, TableBlock
from .load import RunData
from .tables import Column, Table, as_float, as_interval

__all__ = ["long_run_tables", "long_run_section", "SIMULATION_CAUTION", "LONG_RUN_STEMS",
           "methods_paragraph", "how_to_read_items"]

SIMULATION_CAUTION = (
    "Simulation covers the starts tried, not all.",
    "Where trajectories go was found by integrating the model from the initial state, from "
    "small displacements of each unstable steady state and (where asked) from a sample of a "
    "box of starting states. Other starting states can end elsewhere, and an orbit that "
    "attracts too slowly, or motion that never repeats, is reported as undetermined rather "
    "than guessed.")

LONG_RUN_STEMS = ("long_run_time_courses", "long_run_distributions")

_OUTCOME_WORDS = {"settles": "settles at a steady state", "cycles": "ends on a periodic orbit",
                  "unbounded": "grows without bound", "undetermined": "undetermined within the budget"}
_QUANTILES = ("0.05", "0.1", "0.25", "0.5", "0.75", "0.9", "0.95")


def _entry(run: RunData) -> dict | None:
    entry = run.summary.get("long_run")
    return entry if isinstance(entry, dict) else None


def _share_row(label: str, share: dict | None) -> list:
    share = share or {}
    return [label, as_float(share.get("probability")), as_interval(share.get("ci95")),
            share.get("successes"), share.get("n")]


_SHARE_COLUMNS = [Column("Outcome", wide=True), Column("Probability", "prob"),
                  Column("95 % interval", "interval"), Column("Sets where it holds", "int"), Column("Sets", "int")]


def outcomes_table(entry: dict) -> Table:
    """Sustained oscillation, and where the trajectory from the initial state goes."""
    rows = [_share_row("Some trajectory ends on a periodic orbit (sustained oscillation)", entry.get("cycles")),
            _share_row("Two or more distinct periodic orbits", entry.get("several_orbits"))]
    for name, share in (entry.get("initial_state") or {}).items():
        rows.append(_share_row(f"From the initial state: {_OUTCOME_WORDS.get(name, name)}", share))
    return Table("long_run", "Where trajectories go", _SHARE_COLUMNS, rows,
                 note="Over the independent sets simulated, with 95 % Wilson score intervals. A periodic "
                      "orbit counts once its returns repeat and a small kick off it decays.")


def no_stable_table(entry: dict) -> Table | None:
    """What the sets without a stable steady state do."""
    part = entry.get("no_stable_steady_state") or {}
    if not part.get("sets"):
        return None
    rows = [_share_row("Ends on a periodic orbit", part.get("cycles")),
            _share_row("Grows without bound", part.get("unbounded")),
            _share_row("Neither found (undetermined)", part.get("neither"))]
    return Table("long_run_no_stable", "Sets with no stable steady state: what their trajectories do",
                 _SHARE_COLUMNS, rows,
                 note="Share of the independent simulated sets that have no stable steady state.")


def spread_table(entry: dict, states: list[str]) -> Table | None:
    """Quantiles of the period and of each state's amplitude over the oscillating sets."""
    period = entry.get("period") or {}
    if not period.get("n"):
        return None
    columns = [Column("Quantity"), Column("Sets", "int"), Column("Smallest", "number")]
    columns += [Column(f"{float(q) * 100:g} %", "number") for q in _QUANTILES] + [Column("Largest", "number")]
    rows = []
    amplitude = entry.get("amplitude") or {}
    for label, spread in [("period", period)] + [(f"amplitude({s})", amplitude.get(s) or {}) for s in states]:
        quantiles = spread.get("quantiles") or {}
        rows.append([label, spread.get("n"), as_float(spread.get("min"))]
                    + [as_float(quantiles.get(q)) for q in _QUANTILES] + [as_float(spread.get("max"))])
    return Table("long_run_spread", "Period and amplitude over the sets that oscillate", columns, rows,
                 note="Amplitude is the largest minus the smallest value of the state on the orbit, in "
                      "the model's units; the period in its time unit. One orbit per set: the one "
                      "reached from the initial state where it oscillates, else the first found.")


def basins_table(entry: dict) -> Table | None:
    """Pooled basin shares of the box starts."""
    basins = entry.get("basins") or {}
    if not basins:
        return None
    rows = [[label, as_float(share.get("probability")), as_interval(share.get("ci95"))]
            for label, share in basins.items()]
    return Table("long_run_basins", "Where starts from the box end (basin shares)",
                 [Column("Ends at"), Column("Mean share of starts", "prob"), Column("95 % interval", "interval")],
                 rows, note="Each set's share of its box starts, averaged over the independent simulated "
                            "sets (Menck et al. 2013). The interval counts each set once, as a set's "
                            "starts share its parameters, so it errs on the wide side.")


def trajectories_table(entry: dict) -> Table:
    """Every trajectory by where it started and what it did, and the reasons for undetermined ones."""
    counts = entry.get("trajectories") or {}
    rows = [[start, _OUTCOME_WORDS.get(outcome, outcome), int(n)]
            for start, outcomes in (counts.get("by_start") or {}).items() for outcome, n in outcomes.items()]
    rows += [["undetermined, because", reason, int(n)] for reason, n in (counts.get("undetermined_reasons") or {}).items()]
    return Table("long_run_trajectories", "Every trajectory simulated",
                 [Column("Start"), Column("Outcome", wide=True), Column("Trajectories", "int")], rows,
                 note="Undetermined trajectories are counted with their reasons, never left out.")


def long_run_tables(run: RunData) -> dict[str, Table]:
    """The section's tables (none without a long-run entry)."""
    entry = _entry(run)
    if entry is None:
        return {}
    built = {"long_run": outcomes_table(entry), "long_run_no_stable": no_stable_table(entry),
             "long_run_spread": spread_table(entry, run.state_order), "long_run_basins": basins_table(entry),
             "long_run_trajectories": trajectories_table(entry)}
    return {name: table for name, table in built.items() if table is not None}


def _what_was_simulated(entry: dict) -> str:
    settings = entry.get("settings") or {}
    sets = entry.get("sets") or {}
    share = settings.get("share", 1.0)
    which = ("every analysed parameter set" if share >= 1 else
             f"a random {share:g} of the analysed parameter sets (whole Saltelli groups, chosen by "
             "sample id)")
    starts = []
    if settings.get("initial"):
        starts.append("the initial state")
    starts.append("small displacements of each unstable steady state along its unstable directions")
    if settings.get("box_starts"):
        starts.append(f"{settings['box_starts']} starts per set drawn uniformly from the box "
                      + ", ".join(f"{s} in [{lo:g}, {hi:g}]" for s, (lo, hi) in (settings.get("box") or {}).items()))
    return (f"poise integrated {which} ({sets.get('simulated', 'n/a')} sets, {sets.get('independent', 'n/a')} of "
            f"them independent draws behind the probabilities) from " + "; ".join(starts) + ". Each "
            f"trajectory ran until it was classified, or at most {settings.get('horizon', 'n/a'):g} times the "
            f"set's slowest time scale and {settings.get('max_steps', 'n/a'):,} steps.")


def _reading(entry: dict) -> list[str]:
    """Plain sentences on what the simulation found."""
    out = []
    cycles = entry.get("cycles") or {}
    if cycles.get("n"):
        lo, hi = cycles.get("ci95", [0, 1])
        out.append(f"Sustained oscillation was found in {cycles['successes']} of {cycles['n']} independent sets "
                   f"(probability {cycles['probability']:.3f}, 95 % interval {lo:.3f} to {hi:.3f}).")
    part = entry.get("no_stable_steady_state") or {}
    if part.get("sets"):
        found = [(part.get(key) or {}).get("successes", 0) for key in ("cycles", "unbounded", "neither")]
        out.append(f"Of the {part['sets']} sets with no stable steady state, {found[0]} end on a periodic "
                   f"orbit, {found[1]} grow without bound, and in {found[2]} the simulation could decide "
                   "neither within its budget.")
    undetermined = sum(((entry.get("trajectories") or {}).get("undetermined_reasons") or {}).values())
    if undetermined:
        out.append(f"{undetermined} trajectories ended undetermined; the reasons are listed below. They are "
                   "counted, not dropped: a set whose only trajectories are undetermined does not count "
                   "as oscillating.")
    return out


def long_run_section(doc, run: RunData, tables: dict, shown) -> None:
    """Add the section "Long-run behaviour" to the document."""
    doc.add(Heading(2, "Long-run behaviour", "long-run"))
    entry = _entry(run)
    if entry is None:
        doc.add(Paragraph("This run did not simulate trajectories. Add a [long_run] table to the study "
                          "file to find where trajectories go: periodic orbits with their period and "
                          "amplitude, the steady state reached from the initial state, and basin "
                          "shares.", kind="note"))
        return
    doc.add(Paragraph(_what_was_simulated(entry)), *[Paragraph(text) for text in _reading(entry)])
    doc.add(TableBlock(tables["long_run"]))
    if "long_run_no_stable" in tables:
        doc.add(TableBlock(tables["long_run_no_stable"]))
    if "long_run_spread" in tables:
        doc.add(TableBlock(tables["long_run_spread"]))
        doc.add(*shown.blocks("long_run_distributions", "No figure of the period distribution."))
        doc.add(*shown.blocks("long_run_time_courses", "No time courses to show."))
    else:
        doc.add(Paragraph("No simulated set ended on a periodic orbit.", kind="note"))
    if "long_run_basins" in tables:
        doc.add(TableBlock(tables["long_run_basins"]))
    doc.add(TableBlock(tables["long_run_trajectories"]))


def methods_paragraph(run: RunData, cite) -> list | None:
    """The Methods paragraph on the simulation (`cite` builds a citation piece)."""
    entry = _entry(run)
    if entry is None:
        return None
    text = ["Long-run behaviour was found by simulation. " + _what_was_simulated(entry)
            + " The integrator is the four-stage L-stable Rosenbrock method of order four with an "
              "embedded error estimate and the model's analytic Jacobian ", cite(("hairer1996",)),
            ", batched over parameter sets, with tolerances relative to each state's size. A "
            "trajectory settles when it is within 1e-4 of a stable steady state's size and the "
            "linearisation describes it there; it is on a periodic orbit when its returns to a "
            "section repeat to 1e-4 of each state's range over several cycles and a kick of 1 % "
            "off the orbit decays; it grows without bound beyond 1e8 times its reference size; "
            "anything else is undetermined, with the reason. Probabilities have 95 % Wilson "
            "score intervals ", cite(("wilson1927",))]
    if (entry.get("settings") or {}).get("box_starts"):
        text += ["; basin shares ", cite(("menck2013",)), " average each set's share of its box "
                 "starts, with a Wilson interval that counts each set once"]
    text.append(". The time courses shown were integrated again with scipy's Radau method at a "
                "relative tolerance of 1e-8.")
    return text


def how_to_read_items(run: RunData) -> list:
    """Reading notes for the section (shown only when the run simulated)."""
    if _entry(run) is None:
        return []
    return [("Periodic orbit:",
             "a closed path the system keeps going round: sustained oscillation, with a period "
             "(time per round) and an amplitude (largest minus smallest value of each state). "
             "Complex eigenvalues at a steady state ('complex_eigenvalues') are not the same: "
             "they mean damped or growing spirals near it, not an orbit."),
            ("Basin share:",
             "the share of starting states from the box that end at a given steady state or orbit.")]

