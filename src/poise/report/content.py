"""Build the report's tables (plain `Table` objects) from a loaded run: the study,
its parameters, failures, claim probabilities and steady states. The sensitivity
tables are in `sensitivity`."""

from __future__ import annotations

from .equations import derivative, equation, expression, symbol
from .load import RunData
from .methods import completeness_words, finder_words
from .readings import fmt_value
from .tables import Column, Table, as_float, as_interval

__all__ = [
    "CLASS_ORDER", "describe_distribution", "study_table", "parameters_table",
    "failures_table", "claims_table", "stable_count_table", "classes_table",
]

CLASS_ORDER = ["stable node", "stable focus", "unstable node", "unstable focus",
               "saddle", "saddle-focus", "center", "non-hyperbolic"]

_DESIGN_WORDS = {"sobol": "scrambled Sobol sequence (quasi-random)",
                 "lhs": "Latin hypercube", "random": "independent random draws"}


def describe_distribution(spec: dict) -> str:
    """Plain words for a parameter's distribution as given in the manifest."""
    if "dist" not in spec:
        return f"fixed at {fmt_value(spec.get('value'))}"
    kind = spec["dist"]
    v = {k: fmt_value(x) for k, x in spec.items() if k != "dist"}
    truncation = ""
    if "low" in spec or "high" in spec:
        truncation = f", cut to [{v.get('low', '-inf')}, {v.get('high', 'inf')}]"
    if kind == "uniform":
        return f"uniform on [{v.get('low')}, {v.get('high')}]"
    if kind == "loguniform":
        return f"log-uniform on [{v.get('low')}, {v.get('high')}]"
    if kind == "normal":
        return f"normal, mean {v.get('mean')}, sd {v.get('sd')}{truncation}"
    if kind == "lognormal":
        return f"log-normal, median {v.get('median')}, geometric sd {v.get('gsd')}{truncation}"
    if kind == "triangular":
        return f"triangular on [{v.get('low')}, {v.get('high')}], mode {v.get('mode')}"
    details = ", ".join(f"{k} {x}" for k, x in v.items() if k != "nominal")
    return f"{kind}, {details}" if details else str(kind)


def study_table(run: RunData) -> Table:
    """Model, design and bookkeeping of the run."""
    m, s = run.manifest, run.summary
    rows: list[list] = [["Title", run.title]]
    states = run.state_order
    rows.append(["States", ", ".join(states)])
    reduced = m.get("reduced_states", states)
    if list(reduced) != list(states):
        rows.append(["States left after conservation", ", ".join(reduced)])
    ode = m.get("ode", {})
    for state in states:
        if state in ode:
            rows.append([derivative(state), expression(ode[state])])
    for total, expr in m.get("conserved", {}).items():
        rows.append(["Conserved total", equation(total, expr)])
    params = m.get("parameters", {})
    fixed = [f"{k} = {fmt_value(params[k].get('value'))}" for k in run.parameter_order
             if isinstance(params.get(k), dict) and "dist" not in params[k]]
    if fixed:
        rows.append(["Fixed parameters", ", ".join(fixed)])
    rows.append(["Uncertain parameters", ", ".join(run.uncertain_parameters) or "none"])
    design = m.get("design")
    rows.append(["Design", _DESIGN_WORDS.get(design, str(design))])
    rows.append(["Base sample size", m.get("size")])
    rows.append(["Parameter sets in total", m.get("n_sets")])
    rows.append(["Seed", m.get("seed")])
    method = m.get("sensitivity", "none")
    if method == "sobol":
        resamples = m.get("resamples")
        words = "Sobol indices"
        if resamples:
            words += f", intervals from {resamples} bootstrap resamples"
        if m.get("second_order"):
            words += ", second order requested"
    else:
        words = "none"
    rows.append(["Sensitivity analysis", words])
    if m.get("solver"):
        rows.append(["Steady-state solver", finder_words(run)])
    check = completeness_words(run)
    if check:
        rows.append(["Missed steady states (check)", check])
    version = (s.get("tool") or m.get("tool") or {}).get("version", "unknown")
    rows.append(["poise version", version])
    if m.get("study_sha256"):
        rows.append(["Study file SHA-256", m["study_sha256"]])
    counts = s.get("samples", {})
    rows.append(["Sets analysed", counts.get("analysed")])
    rows.append(["Sets that failed (excluded)", counts.get("failed")])
    rows.append(["Independent sets behind the probabilities", counts.get("independent")])
    rows = [[item, value] for item, value in rows]
    return Table("study", "Model, design and run", [Column("Item"), Column("Value", wide=True)], rows)


def parameters_table(run: RunData) -> Table:
    """Each parameter: fixed or uncertain, its distribution and nominal value."""
    rows = []
    specs = run.manifest.get("parameters", {})
    for name in run.parameter_order:
        spec = specs[name]
        uncertain = "dist" in spec
        nominal = spec.get("nominal") if uncertain else spec.get("value")
        rows.append([symbol(name), "uncertain" if uncertain else "fixed",
                     describe_distribution(spec), as_float(nominal)])
    return Table("parameters", "Parameters",
                 [Column("Parameter"), Column("Kind"), Column("Distribution", wide=True),
                  Column("Nominal value", "exact")], rows,
                 note="Values as given in the study, at full precision; the nominal value of an "
                      "uncertain parameter is its 'nominal' entry, else its median.")


def failures_table(run: RunData) -> Table | None:
    """Why parameter sets failed, with counts; None when nothing failed."""
    samples = run.samples
    if samples.empty or "status" not in samples.columns:
        return None
    failed = samples.loc[samples["status"] != "ok"]
    if failed.empty:
        return None
    reasons = failed.get("reason")
    counts = (reasons.fillna("").replace("", "no reason recorded") if reasons is not None
              else failed["status"]).value_counts()
    ordered = sorted(counts.items(), key=lambda item: (-item[1], str(item[0])))
    return Table("failures", "Parameter sets that could not be analysed",
                 [Column("Reason", wide=True), Column("Sets", "int")],
                 [[reason, int(n)] for reason, n in ordered],
                 note="These sets are excluded from every probability and index.")


def claims_table(run: RunData) -> Table | None:
    """Claim probabilities with 95 % Wilson intervals; None without claims."""
    claims = run.summary.get("claims", {})
    if not claims:
        return None
    holds = {c.get("name"): c.get("holds") for c in run.manifest.get("claims", [])}
    rows = []
    for name in run.claim_names:
        entry = claims.get(name)
        if entry is None:
            continue
        rows.append([name, entry.get("holds", holds.get(name, "")), as_float(entry.get("probability")),
                     as_interval(entry.get("ci95")), entry.get("successes"), entry.get("n")])
    return Table("claims", "How probable each claim is",
                 [Column("Claim"), Column("Holds when", wide=True), Column("Probability", "prob"),
                  Column("95 % interval", "interval"), Column("Sets where it holds", "int"),
                  Column("Sets", "int")], rows,
                 note="Intervals are 95 % Wilson score intervals over the independent sets.")


def _count_key(key: str):
    try:
        return (0, int(key))
    except ValueError:
        return (1, key)


def stable_count_table(run: RunData) -> Table:
    """Distribution of the number of stable steady states per set."""
    dist = run.summary.get("stable_count", {})
    rows = [[str(k), as_float(dist[k].get("probability")), as_interval(dist[k].get("ci95"))]
            for k in sorted(dist, key=_count_key)]
    return Table("stable_count", "Number of stable steady states per parameter set",
                 [Column("Stable steady states"), Column("Probability", "prob"),
                  Column("95 % interval", "interval")], rows)


def classes_table(run: RunData) -> Table:
    """For each steady-state label: how often present, and its class when present."""
    labels = run.summary.get("equilibria", {})
    seen = {c for entry in labels.values() for c in entry.get("classes", {})}
    classes = [c for c in CLASS_ORDER if c in seen] + sorted(seen - set(CLASS_ORDER))
    columns = [Column("Steady state (zero states)"), Column("Present in share of sets", "prob")]
    columns += [Column(c, "prob") for c in classes]
    rows = []
    for label in sorted(labels):
        entry = labels[label]
        shares = entry.get("classes", {})
        rows.append([label, as_float(entry.get("present"))] + [as_float(shares.get(c, 0.0)) for c in classes])
    return Table("classes", "Kind of each steady state",
                 columns, rows,
                 note="Class shares are fractions of the sets where that steady state exists.")
