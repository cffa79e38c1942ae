"""The Methods text for a paper's appendix, generated from what the run recorded.

Paragraphs are lists of text pieces and citations (`Cite`), so that the same text
renders with author-year citations in the report and with ``\\cite`` keys in
``methods.tex`` next to ``references.bib``.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass

from .escape import escape_latex
from .load import RunData
from .references import cite_label

__all__ = ["Cite", "methods_paragraphs", "cited_keys", "paragraph_text", "methods_latex",
           "finder_words", "completeness_words", "software_versions"]

# what a design kind means, in a sentence's words
_DESIGN = {"sobol": "a scrambled Sobol' sequence", "lhs": "a Latin hypercube",
           "random": "independent pseudo-random draws"}


@dataclass(frozen=True)
class Cite:
    """A parenthetical citation of one or more works (keys of `references.REFERENCES`)."""

    keys: tuple[str, ...]


def _count(n) -> str:
    return f"{int(n):,}" if isinstance(n, (int, float)) else "an unrecorded number of"


def _choice_words(run: RunData) -> str:
    """Why "auto" chose its finder, from the recorded work counts ('' if not recorded)."""
    choice = (run.summary.get("solver") or {}).get("choice") or {}
    parts = []
    for key, words in (("predicted_speed", "predicted homotopy speed {:g}x Newton's"),
                       ("newton_iterations_per_set", "{:g} Newton iterations"),
                       ("homotopy_evaluations_per_set", "{:g} homotopy evaluations per probe set")):
        if isinstance(choice.get(key), (int, float)):
            parts.append(words.format(choice[key]))
    return ", ".join(parts)


def finder_words(run: RunData) -> str:
    """The finder that ran and, for an automatic choice, why (plain words)."""
    method = str(run.manifest.get("solver") or (run.summary.get("solver") or {}).get("method")
                 or "unrecorded")
    if not (run.summary.get("solver") or {}).get("choice"):
        return method
    why = _choice_words(run)
    return f"{method} (chosen automatically: {why})" if why else f"{method} (chosen automatically)"


def completeness_words(run: RunData) -> str | None:
    """How often the run missed a steady state on the re-solved subsample, or None."""
    check = (run.summary.get("solver") or {}).get("completeness") or {}
    try:
        checked, missed = int(check["checked"]), int(check["missed"])
        lo, hi = (float(x) for x in check["ci95"])
    except (KeyError, TypeError, ValueError):
        return None
    note = str(check.get("note") or "")
    if not checked:
        return f"no completeness check: {note}" if note else None
    return (f"{missed} of {checked} re-solved sets had a steady state the run missed "
            f"({100 * missed / checked:.1f} %, 95 % Wilson interval {100 * lo:.1f} to "
            f"{100 * hi:.1f} %); reference: {check.get('reference', 'not recorded')}"
            + (f" ({note})" if note else ""))


def software_versions(run: RunData) -> list[tuple[str, str]]:
    """(package, version) for poise and the libraries whose numbers the methods rely on;
    a version the run did not record is given as 'not recorded'."""
    recorded = run.manifest.get("versions") or {}
    poise = (run.summary.get("tool") or run.manifest.get("tool") or {}).get("version")
    wanted = [("poise", poise), ("Python", recorded.get("python"))]
    for label, keys in (("numpy", ("numpy",)), ("scipy", ("scipy",)), ("SALib", ("SALib", "salib")),
                        ("sympy", ("sympy",)), ("libsbml", ("python-libsbml", "libsbml")),
                        ("numba", ("numba",))):
        wanted.append((label, next((recorded[k] for k in keys if recorded.get(k)), None)))
    return [(name, str(version) if version else "not recorded") for name, version in wanted]


def _uses_sbml(run: RunData) -> bool:
    try:
        with (run.run_dir / "study.toml").open("rb") as handle:
            model = tomllib.load(handle).get("model", {})
    except (OSError, tomllib.TOMLDecodeError, UnicodeDecodeError):
        return False
    return isinstance(model, dict) and "sbml" in model


def _design_paragraph(run: RunData) -> list:
    m, samples = run.manifest, run.summary.get("samples") or {}
    states, reduced = run.state_order, m.get("reduced_states") or run.state_order
    uncertain = run.uncertain_parameters
    fixed = len(run.parameter_order) - len(uncertain)
    text = [f"The model has {len(states)} state variable{'s' * (len(states) != 1)}"]
    if len(reduced) != len(states):
        totals = len(m.get("conserved") or {})
        text[0] += (f", {len(reduced)} of them free once the {totals} conserved "
                    f"total{'s are' if totals != 1 else ' is'} fixed")
    text[0] += (f", {len(uncertain)} uncertain and {fixed} fixed parameter{'s' * (fixed != 1)} "
                "(distributions in the parameters table). Parameter sets were drawn as "
                f"{_DESIGN.get(m.get('design'), str(m.get('design')))} in the unit cube "
                f"(seed {m.get('seed')}) and mapped through each parameter's inverse "
                "distribution function.")
    if m.get("sensitivity") == "sobol" and uncertain:
        k, n = len(uncertain), m.get("size")
        per = 2 * k + 2 if m.get("second_order") else k + 2
        text += [f" For Sobol indices the {_count(n)} base rows were expanded into the Saltelli "
                 f"cross design (N({'2' if m.get('second_order') else ''}k + 2) = "
                 f"{_count(n * per if isinstance(n, int) else None)} sets, k = {k}) ",
                 Cite(("saltelli2002", "saltelli2010")),
                 "; probabilities use only the independent draws of its A and B blocks."]
    else:
        text.append(f" Every one of the {_count(m.get('n_sets'))} sets is an independent draw.")
    failed = int(samples.get("failed") or 0)
    text.append(f" {_count(samples.get('analysed'))} sets were analysed, "
                f"{_count(samples.get('independent'))} of them independent draws"
                + (f"; {_count(failed)} could not be analysed and are excluded from every "
                   "probability and index (reasons in the failures table)." if failed else "."))
    return text


def _finder_paragraph(run: RunData) -> list:
    method = run.manifest.get("solver") or (run.summary.get("solver") or {}).get("method")
    text: list = []
    if method == "homotopy":
        text += ["Steady states were found by homotopy continuation, which finds every isolated "
                 "root of a polynomial system with probability one ", Cite(("sommese2005",)),
                 ": the model's equations, with denominators cleared, were solved once from a "
                 "total-degree start system, and each parameter set was reached by a parameter "
                 "homotopy from a nearby solved set ", Cite(("morgan1989",)),
                 ". Real roots were polished by Newton's method on the model's own equations."]
    elif method == "newton":
        text += ["Steady states were found by damped Newton iterations from a space-filling "
                 "grid of starts on every parameter set, followed by deflation ",
                 Cite(("farrell2015",)), ", which divides out the roots already found so that "
                 "further iterations converge to new ones."]
    else:
        text.append(f"Steady states were found with the '{method}' finder.")
    text.append(" Steady states were kept if they lie in the domain the study declares (by "
                "default every state non-negative).")
    if (run.summary.get("solver") or {}).get("choice"):
        why = _choice_words(run)
        text.append(" The finder was chosen automatically from counted work on a probe design"
                    + (f" ({why})." if why else "."))
    check = completeness_words(run)
    if check:
        reference = str(((run.summary.get("solver") or {}).get("completeness") or {})
                        .get("reference", ""))
        text += [" Because a multistart search can miss a steady state with a small basin, a "
                 "random subsample of analysed sets was solved again with a more thorough "
                 "reference: " + check]
        text += [" ", Cite(("sommese2005",)), "."] if "homotopy" in reference else ["."]
    elif method == "newton":
        text.append(" No completeness check was recorded for this run.")
    return text


# The zero tolerance mirrors the default of poise.stability.classify.classify (rtol);
# a test keeps the two equal.
_CLASSIFY = ("Each steady state was classified from the eigenvalues of the model's Jacobian "
             "there, on the conservation class where totals are conserved: stable when every "
             "eigenvalue has a negative real part, unstable when one has a positive real "
             "part. A real or imaginary part counts as zero when it lies within how far the "
             "eigenvalue can move if each Jacobian entry is off by 1e-9 of the size of its terms "
             "(first-order perturbation bound with the left and right eigenvectors, capped for "
             "nearly defective eigenvalues), a rule that does not depend on the units of time or "
             "of the states; a steady "
             "state with such an eigenvalue and none with a positive real part is reported as "
             "undetermined. Node, focus and saddle follow from the signs and imaginary parts. "
             "This linear classification is local: it describes small disturbances near each "
             "steady state only.")


def _statistics_paragraphs(run: RunData) -> list[list]:
    m = run.manifest
    out: list[list] = [["The probability of each claim is the share of independent, analysed "
                        "parameter sets in which it holds, with a 95 % Wilson score interval ",
                        Cite(("wilson1927",)), "."]]
    versions = dict(software_versions(run))
    if m.get("sensitivity") == "sobol":
        text: list = ["First-order (S1) and total (ST) Sobol indices ",
                      Cite(("sobol1993", "sobol2001")),
                      " of each claim's true/false outcome were estimated with the first-order and "
                      "total-effect estimators recommended by Saltelli and co-workers ",
                      Cite(("saltelli2010",))]
        if m.get("second_order"):
            text += [", second-order indices with the estimator of ", Cite(("saltelli2002",))]
        text += [f", as implemented in SALib {versions['SALib']} ", Cite(("herman2017",)),
                 f". Their 95 % intervals are 1.96 standard deviations of {_count(m.get('resamples'))} "
                 "bootstrap resamples either side of the estimate; an index whose interval is wider "
                 "than 0.1 is flagged as needing more samples, and a Saltelli group holding a "
                 "failed set is dropped whole. Parameters are ranked by ST for which to pin "
                 "down and by S1 for which alone settles most ", Cite(("saltelli2008",)), "."]
        out.append(text)
    out.append(["Regional sensitivity ", Cite(("hornberger1981",)),
                " compares, for each claim and parameter, the parameter's values in the "
                "independent sets where the claim holds with those where it fails, by the "
                "two-sample Kolmogorov-Smirnov distance and its p-value; maps of the share of "
                "sets where the claim holds over bins of two parameters, the others averaged "
                "over, show where the boundary lies."])
    return out


def _software_paragraph(run: RunData) -> list:
    versions = software_versions(run)
    listed = ", ".join(f"{name} {version}" for name, version in versions if version != "not recorded")
    unknown = [name for name, version in versions if version == "not recorded"]
    if unknown:
        listed += (f" ({' and '.join(unknown) if len(unknown) < 3 else ', '.join(unknown)} "
                   f"version{'s' * (len(unknown) > 1)} not recorded by this run)")
    text: list = [f"Computed with {listed}; numpy ", Cite(("harris2020",)), ", scipy ",
                  Cite(("virtanen2020",)), " and sympy ", Cite(("meurer2017",))]
    if _uses_sbml(run):
        text += [", the model read from SBML with libsbml ", Cite(("bornstein2008",))]
    text.append(". Every number holds only for this model and the parameter distributions "
                "given.")
    return text


def methods_paragraphs(run: RunData) -> list[list]:
    """The Methods text: paragraphs of strings and `Cite` pieces."""
    from .longrun import methods_paragraph
    simulation = methods_paragraph(run, lambda keys: Cite(keys))
    return [_design_paragraph(run), _finder_paragraph(run), [_CLASSIFY], *([simulation] if simulation else []),
            *_statistics_paragraphs(run), _software_paragraph(run)]


def cited_keys(paragraphs: list[list]) -> list[str]:
    """Reference keys in order of first citation."""
    keys: list[str] = []
    for paragraph in paragraphs:
        for piece in paragraph:
            if isinstance(piece, Cite):
                keys += [k for k in piece.keys if k not in keys]
    return keys


def paragraph_text(paragraph: list) -> str:
    """Plain text with author-year citations in brackets."""
    return "".join(f"({cite_label(p.keys)})" if isinstance(p, Cite) else p for p in paragraph)


def methods_latex(paragraphs: list[list]) -> str:
    """LaTeX paragraphs with ``\\cite`` keys from ``references.bib``."""
    body = []
    for paragraph in paragraphs:
        # Escape the paragraph as a whole (pieces carry their own spaces), with each
        # citation held by a NUL marker that escaping leaves alone.
        cites = [p for p in paragraph if isinstance(p, Cite)]
        text = escape_latex("".join("\0" if isinstance(p, Cite) else p.replace("\0", "")
                                    for p in paragraph))
        for cite in cites:
            text = text.replace("\0", "\\cite{" + ",".join(cite.keys) + "}", 1)
        body.append(text.replace("‖J‖", "$\\|J\\|$"))  # a norm, in plain LaTeX
    return ("% Written by poise: the Methods text of this run. Cite keys are in references.bib.\n"
            + "\n\n".join(body) + "\n")
