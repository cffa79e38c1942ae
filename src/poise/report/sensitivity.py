"""Tables on which parameters decide each claim: Sobol indices, what to measure first,
and regional sensitivity (KS distances)."""

from __future__ import annotations

import math

from .equations import symbol
from .load import RunData
from .readings import KS_RULES, PRIORITY_RULES, Index, priority_reading, regional_reading
from .regional import ks_regional
from .tables import Column, Interval, Table, as_float, as_interval

__all__ = ["ROUGH_WIDTH", "sobol_claims", "is_rough", "index_of", "sobol_table",
           "ranked_by_total", "priority_table", "priority_summary", "regional_results",
           "regional_table"]

ROUGH_WIDTH = 0.1  # interval width beyond which an index needs more samples (docs/methods.md, Statistics)

PRIORITY_NOTE = (
    "Rank to pin down: by the total index ST, the share of the variance in whether the claim "
    "holds that would remain, on average, if every other parameter were known exactly; a "
    "parameter with a large ST has to be measured before the claim is settled, whatever else "
    "is known, and one with ST near zero can be fixed (Saltelli et al. 2008, factor fixing). "
    "Rank alone: by the first-order index S1, the share that knowing this parameter alone "
    "would remove on average (factor prioritisation). For true/false claims most of the "
    "variance often lies in interactions, with every S1 near zero: then S1 ranks by noise "
    "and ST is the rule to follow. " + PRIORITY_RULES)


def sobol_claims(run: RunData) -> list[tuple[str, dict]]:
    """(claim, entry) for the claims that have Sobol indices, in claim order."""
    sens = run.summary.get("sensitivity", {})
    return [(name, sens[name]) for name in run.claim_names
            if isinstance(sens.get(name), dict) and sens[name].get("method") == "sobol"]


def is_rough(entry: dict, param: str) -> bool:
    """An index of ``param`` is flagged, or either interval is wider than 0.1."""
    if param in (entry.get("flags") or {}):
        return True
    for key in ("S1_ci95", "ST_ci95"):
        span = as_interval((entry.get(key) or {}).get(param))
        if not math.isnan(span.hi - span.lo) and span.hi - span.lo > ROUGH_WIDTH:
            return True
    return False


def index_of(entry: dict, kind: str, param: str) -> Index:
    """The S1 or ST index of one parameter with its interval."""
    span = as_interval((entry.get(f"{kind}_ci95") or {}).get(param))
    return Index(as_float((entry.get(kind) or {}).get(param)), span.lo, span.hi)


def _params_of(run: RunData, entry: dict) -> list[str]:
    """Parameters with indices, in the model's parameter order."""
    present = list(entry.get("ST") or entry.get("S1") or {})
    order = [p for p in run.parameter_order if p in present]
    return order + [p for p in present if p not in order]


def _low_nan(value: float) -> float:
    return -math.inf if math.isnan(value) else value


def sobol_table(run: RunData) -> Table | None:
    """First-order and total Sobol indices with intervals, per claim and parameter."""
    entries = sobol_claims(run)
    if not entries:
        return None
    rows = []
    for claim, entry in entries:
        for param in _params_of(run, entry):
            s1, st = index_of(entry, "S1", param), index_of(entry, "ST", param)
            rows.append([claim, symbol(param), s1.value, Interval(s1.lo, s1.hi), st.value,
                         Interval(st.lo, st.hi),
                         "more samples needed" if is_rough(entry, param) else ""])
    return Table("sobol", "Sobol sensitivity indices",
                 [Column("Claim"), Column("Parameter"), Column("S1", "index"),
                  Column("S1 95 % interval", "interval"), Column("ST", "index"),
                  Column("ST 95 % interval", "interval"), Column("Note")], rows)


def ranked_by_total(run: RunData, entry: dict) -> list[str]:
    """Parameters by ST, largest first (ties: larger S1 first, then model order)."""
    params = _params_of(run, entry)
    position = {p: i for i, p in enumerate(params)}
    return sorted(params, key=lambda p: (-_low_nan(index_of(entry, "ST", p).value),
                                         -_low_nan(index_of(entry, "S1", p).value), position[p]))


def _ranks_by_first_order(params: list[str], entry: dict) -> dict[str, int]:
    ordered = sorted(params, key=lambda p: (-_low_nan(index_of(entry, "S1", p).value),
                                            params.index(p)))
    return {p: rank for rank, p in enumerate(ordered, start=1)}


def _overlapping_ranks(ranked: list[str], entry: dict) -> dict[str, tuple[int, ...]]:
    """For each parameter, the ST ranks of the others whose ST interval overlaps its own."""
    spans = {p: index_of(entry, "ST", p) for p in ranked}
    result = {}
    for p in ranked:
        a = spans[p]
        result[p] = tuple(rank for rank, q in enumerate(ranked, start=1)
                          if q != p and a.has_interval and spans[q].has_interval
                          and a.lo <= spans[q].hi and spans[q].lo <= a.hi)
    return result


def priority_table(run: RunData) -> Table | None:
    """Per claim, parameters ranked by ST (which to pin down), with their S1 rank
    (which alone settles most) and a reading."""
    entries = sobol_claims(run)
    if not entries:
        return None
    specs = run.manifest.get("parameters", {})
    rows = []
    for claim, entry in entries:
        ranked = ranked_by_total(run, entry)
        alone = _ranks_by_first_order(ranked, entry)
        overlaps = _overlapping_ranks(ranked, entry)
        for rank, param in enumerate(ranked, start=1):
            s1, st = index_of(entry, "S1", param), index_of(entry, "ST", param)
            nominal = (specs.get(param) or {}).get("nominal")
            reading = priority_reading(s1, st, nominal=nominal, rough=is_rough(entry, param),
                                       overlaps=overlaps[param])
            rows.append([claim, rank, symbol(param), st.value, s1.value, alone[param], reading])
    return Table("priorities", "What to measure first: parameters ranked by how much of each "
                 "claim's uncertainty they carry",
                 [Column("Claim"), Column("Rank to pin down (ST)", "int"), Column("Parameter"),
                  Column("ST", "index"), Column("S1", "index"), Column("Rank alone (S1)", "int"),
                  Column("Reading", wide=True)], rows, note=PRIORITY_NOTE)


def priority_summary(run: RunData) -> list[str]:
    """One short paragraph per claim on what the two rankings say together."""
    sentences = []
    for claim, entry in sobol_claims(run):
        ranked = [p for p in ranked_by_total(run, entry) if index_of(entry, "ST", p).known]
        if not ranked:
            continue
        overlaps = _overlapping_ranks(ranked, entry)[ranked[0]]
        leaders = [ranked[0]] + [ranked[r - 1] for r in overlaps]
        totals = [index_of(entry, "ST", p).value for p in leaders]
        if len(leaders) == 1:
            text = f"'{claim}': pin down {leaders[0]} first (ST {totals[0]:.2f})"
        else:
            text = (f"'{claim}': pin down {', '.join(leaders[:-1])} or {leaders[-1]} first (ST "
                    f"{min(totals):.2f} to {max(totals):.2f}; their intervals overlap, so this "
                    "sample does not order them)")
        firsts = [index_of(entry, "S1", p) for p in ranked]
        with_interval = [s for s in firsts if s.has_interval]
        if with_interval and all(s.zero_inside() or s.below_zero() for s in with_interval):
            text += ("; every S1 is indistinguishable from zero, so no single parameter settles "
                     "this claim alone: it depends on combinations of parameters (see the "
                     "two-parameter maps below).")
        else:
            best = max(ranked, key=lambda p: _low_nan(index_of(entry, "S1", p).value))
            text += (f"; alone, {best} would settle the most "
                     f"(S1 {index_of(entry, 'S1', best).value:.2f}).")
        first_order = sum(max(s.value, 0.0) for s in firsts if s.known)
        if first_order < 0.5:
            text += (f" The first-order indices add up to {first_order:.2f}: most of the "
                     "variance comes from parameters acting together.")
        sentences.append(text)
    return sentences


def regional_results(run: RunData) -> dict[str, dict[str, dict]]:
    """KS regional sensitivity of every claim over the independent analysed sets."""
    chosen = run.independent_ok()
    params = [p for p in run.uncertain_parameters if p in run.samples.columns]
    if chosen.empty or not params:
        return {}
    values = run.parameters_of(chosen["sample_id"])
    return {claim: ks_regional(values, chosen[claim], params)
            for claim in run.claim_names if claim in chosen.columns}


def regional_table(run: RunData, results: dict[str, dict[str, dict]]) -> Table | None:
    """KS distance per claim and parameter, strongest first, with a reading."""
    if not results:
        return None
    rows = []
    for claim, per_param in results.items():
        ordered = sorted(per_param.items(), key=lambda item: (-_low_nan(item[1]["ks"]),
                                                              run.parameter_order.index(item[0])
                                                              if item[0] in run.parameter_order
                                                              else 0))
        for param, r in ordered:
            rows.append([claim, symbol(param), r["ks"], r["p_value"], r["n_true"], r["n_false"],
                         regional_reading(r["ks"], r["p_value"], r["median_true"],
                                          r["median_false"])])
    return Table("regional", "Where in each parameter's range the claim holds",
                 [Column("Claim"), Column("Parameter"), Column("KS distance", "prob"),
                  Column("p-value", "pvalue"), Column("Sets where it holds", "int"),
                  Column("Sets where it fails", "int"), Column("Reading", wide=True)], rows,
                 note="KS distance: largest gap between the parameter's cumulative distributions "
                      "in sets where the claim holds and where it fails (0 = same, 1 = separate), "
                      "with the two-sample Kolmogorov-Smirnov test's p-value. " + KS_RULES)
