"""Tests of poise.report on run directories built by hand (following the run-directory
contract). The numbers in them are invented with numpy: these tests check rendering,
escaping, determinism and the statistics the report computes itself, not a model."""

from __future__ import annotations

import html.parser
import json
import re
from pathlib import Path

import matplotlib.image
import numpy as np
import pandas as pd
import pytest
from scipy.stats import binomtest, ks_2samp

from poise.report import ks_regional, main_table_text, write_report

NASTY_TITLE = "<script>alert(1)</script> & 100% \\LaTeX_x"
NASTY_CLAIM = "|*_<>&%$#{}~^\\"
PLAIN_CLAIM = "grazers persist"
PARAMS = {
    "K": {"dist": "uniform", "low": 2.0, "high": 10.0, "nominal": 6.0},
    "c": {"dist": "loguniform", "low": 0.2, "high": 5.0, "nominal": 1.0},
    "s": {"dist": "normal", "mean": 1.0, "sd": 0.2, "low": 0.0, "nominal": 1.0},
}
N_BASE = 135          # blocks A and B: 270 independent sets
FAILED_INDEPENDENT = [3, 50, 140, 141, 200, 250, 269]   # leaves 263 independent ok sets
FAILED_OTHER = [300, 301]
PERSIST_SUCCESSES = 81  # 81 of 263: Newcombe (1998) worked example, see test below


def _wilson(k: int, n: int) -> list[float]:
    # reference library: scipy.stats.binomtest(...).proportion_ci(method="wilson")
    ci = binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
    return [float(ci.low), float(ci.high)]


def _classify(re_parts: np.ndarray, im_parts: np.ndarray) -> tuple[str, str]:
    complex_ = bool(np.any(np.abs(im_parts) > 0))
    if np.all(re_parts < 0):
        return ("stable focus" if complex_ else "stable node"), "stable"
    if np.all(re_parts > 0):
        return ("unstable focus" if complex_ else "unstable node"), "unstable"
    return ("saddle-focus" if complex_ else "saddle"), "unstable"


def _eigenvalues(rng, d: int) -> tuple[np.ndarray, np.ndarray]:
    """Invented eigenvalues sorted by descending real part (real, or with one complex pair)."""
    if d == 2:
        tr, det = rng.normal(-0.5, 1.5), rng.normal(0.5, 1.0)
        disc = tr * tr - 4 * det
        if disc >= 0:
            re_ = np.array([tr / 2 + np.sqrt(disc) / 2, tr / 2 - np.sqrt(disc) / 2])
            im_ = np.zeros(2)
        else:
            re_ = np.array([tr / 2, tr / 2])
            im_ = np.array([np.sqrt(-disc) / 2, -np.sqrt(-disc) / 2])
        return re_, im_
    re_ = np.sort(rng.normal(-0.6, 1.0, d))[::-1]
    im_ = np.zeros(d)
    if rng.random() < 0.4:
        re_[1] = re_[0]
        im_[0], im_[1] = 0.7, -0.7
    return re_, im_


def build_run(root: Path, *, title: str = "Grazers and algae", with_claims: bool = True,
              sensitivity: str = "sobol", dimension: int = 2) -> Path:
    """Write a run directory by hand, following the run-directory contract."""
    rng = np.random.default_rng(11)
    root.mkdir(parents=True, exist_ok=True)
    names = list(PARAMS)
    if sensitivity == "sobol":
        blocks = ["A"] * N_BASE + ["B"] * N_BASE + [f"AB:{p}" for p in names for _ in range(N_BASE)]
    else:
        blocks = ["draw"] * (2 * N_BASE)
    n = len(blocks)
    ids = np.arange(n)
    independent = np.array([b in ("A", "B", "draw") for b in blocks])
    status = np.full(n, "ok", dtype=object)
    reason = np.full(n, "", dtype=object)
    failed = [i for i in FAILED_INDEPENDENT + FAILED_OTHER if i < n]
    status[failed] = "failed"
    reason[failed] = ["overflow while evaluating the model"] * 4 + \
        ["Newton did not converge from any start"] * (len(failed) - 4)
    samples = pd.DataFrame({"sample_id": ids, "block": blocks, "independent": independent})
    samples["K"] = rng.uniform(2, 10, n)
    samples["c"] = np.exp(rng.uniform(np.log(0.2), np.log(5), n))
    samples["s"] = np.clip(rng.normal(1, 0.2, n), 0.05, None)
    samples["status"] = status
    samples["reason"] = reason
    ok = status == "ok"

    states = ["A", "G"] if dimension == 2 else ["E", "S", "C", "P"]
    reduced = states if dimension == 2 else ["S", "C", "P"]
    labels = [", ".join(f"{s}{'>0' if j < k else '=0'}" for j, s in enumerate(states))
              for k in range(3)]
    rows = []
    n_steady = np.zeros(n, dtype=int)
    n_stable = np.zeros(n, dtype=int)
    for i in ids[ok]:                      # test data only: a loop is fine here
        count = rng.choice(4, p=[0.05, 0.25, 0.4, 0.3])   # some sets have no steady state
        n_steady[i] = count
        for index in range(count):
            re_, im_ = _eigenvalues(rng, len(reduced))
            klass, stability = _classify(re_, im_)
            n_stable[i] += stability == "stable"
            row = {"sample_id": int(i), "index": index}
            row.update({s: (samples.at[i, "K"] if j < index else 0.0) for j, s in enumerate(states)})
            row.update({"label": labels[index], "class": klass, "stability": stability,
                        "margin": -re_[0], "complex_eigenvalues": bool(np.any(im_ != 0))})
            for j in range(len(reduced)):
                row[f"eig_re_{j}"], row[f"eig_im_{j}"] = re_[j], im_[j]
            if len(reduced) == 2:
                tr, det = re_.sum(), re_[0] * re_[1] + im_[0] ** 2
                row.update({"trace": tr, "determinant": det, "discriminant": tr * tr - 4 * det})
            else:
                row.update({"trace": np.nan, "determinant": np.nan, "discriminant": np.nan})
            rows.append(row)
    equilibria = pd.DataFrame(rows)

    outcomes = samples[["sample_id", "block", "independent", "status"]].copy()
    outcomes["n_steady"] = pd.array(np.where(ok, n_steady, 0), dtype="Int64")
    outcomes["n_stable"] = pd.array(np.where(ok, n_stable, 0), dtype="Int64")
    outcomes.loc[~ok, ["n_steady", "n_stable"]] = pd.NA
    claims = {}
    if with_claims:
        use = ok & independent
        threshold = np.sort(samples["K"].to_numpy()[use])[-PERSIST_SUCCESSES]
        claims[PLAIN_CLAIM] = ("any(stable and G > 1e-9)", samples["K"].to_numpy() >= threshold)
        claims[NASTY_CLAIM] = ("count(stable) >= 2", samples["c"].to_numpy() > 1.0)
        for name, (_, values) in claims.items():
            outcomes[name] = pd.array(np.where(ok, values, False), dtype="boolean")
            outcomes.loc[~ok, name] = pd.NA

    samples.to_parquet(root / "samples.parquet", index=False)
    equilibria.to_parquet(root / "equilibria.parquet", index=False)
    outcomes.to_parquet(root / "outcomes.parquet", index=False)

    use = ok & independent
    n_use = int(use.sum())
    summary = {
        "tool": {"name": "poise", "version": "0.1.0"},
        "samples": {"analysed": int(ok.sum()), "failed": int((~ok).sum()), "independent": n_use},
        "claims": {},
        "stable_count": {},
        "equilibria": {},
        "sensitivity": {},
    }
    for name, (holds, values) in claims.items():
        k = int(values[use].sum())
        summary["claims"][name] = {"holds": holds, "probability": k / n_use,
                                   "ci95": _wilson(k, n_use), "successes": k, "n": n_use}
    for count in sorted(set(n_stable[use])):
        k = int((n_stable[use] == count).sum())
        summary["stable_count"][str(count)] = {"probability": k / n_use, "ci95": _wilson(k, n_use)}
    use_ids = set(ids[use])
    eq_use = equilibria[equilibria["sample_id"].isin(use_ids)]
    for label, part in eq_use.groupby("label"):
        shares = part["class"].value_counts(normalize=True)
        summary["equilibria"][label] = {"present": part["sample_id"].nunique() / n_use,
                                        "classes": {k: float(v) for k, v in shares.items()}}
    if sensitivity == "sobol":
        invented = {  # invented indices: (S1, S1 interval, ST, ST interval)
            PLAIN_CLAIM: {"K": (0.62, (0.58, 0.66), 0.70, (0.66, 0.74)),
                          "c": (0.05, (0.02, 0.08), 0.12, (0.09, 0.15)),
                          "s": (0.001, (-0.002, 0.004), 0.004, (0.001, 0.007))},
            NASTY_CLAIM: {"K": (0.02, (-0.01, 0.05), 0.05, (0.03, 0.07)),
                          "c": (0.55, (0.40, 0.70), 0.80, (0.65, 0.95)),
                          "s": (0.10, (0.05, 0.15), 0.30, (0.25, 0.35))},
        }
        for name in claims:
            idx = invented[name]
            entry = {"method": "sobol",
                     "S1": {p: v[0] for p, v in idx.items()}, "S1_ci95": {p: list(v[1]) for p, v in idx.items()},
                     "ST": {p: v[2] for p, v in idx.items()}, "ST_ci95": {p: list(v[3]) for p, v in idx.items()}}
            if name == NASTY_CLAIM:
                entry["flags"] = {"c": "more samples needed"}
            summary["sensitivity"][name] = entry
    else:
        for name in claims:
            summary["sensitivity"][name] = {"method": "none", "reason": "sensitivity analysis not requested"}
    (root / "summary.json").write_text(json.dumps(summary, indent=2), encoding="utf-8")

    manifest = {
        "tool": {"name": "poise", "version": "0.1.0"},
        "title": title, "study_file": "study.toml", "study_sha256": "0" * 64,
        "states": states, "reduced_states": reduced,
        "ode": {s: f"-{s} + K*c/(s + {s})" for s in states},
        "conserved": {} if dimension == 2 else {"E_total": "E + C"},
        "parameters": {"r": {"value": 1.0}, **PARAMS},
        "claims": [{"name": k, "holds": v[0]} for k, v in claims.items()],
        "design": "sobol" if sensitivity == "sobol" else "random", "size": N_BASE, "seed": 1,
        "sensitivity": sensitivity, "second_order": False, "resamples": 200,
        "solver": "newton", "n_sets": n, "chunk_size": 512, "chunks": {}, "complete": True,
        "versions": {"python": "3.11"},
    }
    (root / "manifest.json").write_text(json.dumps(manifest, indent=2), encoding="utf-8")
    (root / "study.toml").write_text("# invented\n", encoding="utf-8")
    return root


@pytest.fixture(scope="module")
def nasty_run(tmp_path_factory) -> tuple[Path, list[Path]]:
    root = build_run(tmp_path_factory.mktemp("nasty") / "run", title=NASTY_TITLE)
    return root, write_report(root)


# -- files --------------------------------------------------------------------------

def _latex_balanced(text: str) -> bool:
    stack = []
    for kind, env in re.findall(r"\\(begin|end)\{([^}]*)\}", text):
        if kind == "begin":
            stack.append(env)
        elif not stack or stack.pop() != env:
            return False
    return not stack


def test_every_file_written_and_readable(nasty_run):
    root, written = nasty_run
    names = {p.relative_to(root).as_posix() for p in written}
    for expected in ["report.md", "report.html", "tables/claims.csv", "tables/claims.tex",
                     "tables/study.csv", "tables/sobol.tex", "tables/priorities.csv",
                     "tables/regional.csv", "tables/classes.tex", "tables/stable_count.csv",
                     "tables/failures.csv", "tables/convergence.csv",
                     "figures/claims.png", "figures/claims.svg", "figures/convergence.png",
                     "figures/steady_states_trace_determinant.png", "figures/sobol_claim01.png",
                     "figures/sobol_claim02.svg", "figures/factor_map_claim01.png",
                     "figures/factor_map_claim02.png", "figures/stable_count.png",
                     "figures/probability_map_claim01.png", "figures/probability_map_claim02.svg",
                     "tables/probability_map_claim01.csv", "tables/parameters.tex",
                     "methods.tex", "references.bib"]:
        assert expected in names
    for path in written:
        assert path.is_file() and path.stat().st_size > 0, path
        if path.suffix == ".png":
            image = matplotlib.image.imread(path)
            assert image.ndim == 3 and image.shape[0] > 100 and image.shape[1] > 100
        if path.suffix == ".tex" and path.parent.name == "tables":
            text = path.read_text(encoding="utf-8")
            assert _latex_balanced(text), path
            assert "\\toprule" in text and "\\bottomrule" in text


def test_html_is_self_contained(nasty_run):
    root, _ = nasty_run
    page = (root / "report.html").read_text(encoding="utf-8")
    links = re.findall(r"""(?:src|href)\s*=\s*["']([^"']*)["']""", page, flags=re.I)
    assert links, "expected embedded figures and internal links"
    for link in links:
        assert link.startswith("data:image/png;base64,") or link.startswith("#"), link[:40]
    assert "http://" not in page and "https://" not in page
    assert page.count("<img ") >= 6


# -- escaping -----------------------------------------------------------------------

class _TextCollector(html.parser.HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags: list[str] = []
        self.h1 = ""
        self.cells: list[str] = []
        self._in_h1 = False
        self._in_td = False

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self._in_h1 = tag == "h1"
        if tag == "td":
            self._in_td = True
            self.cells.append("")

    def handle_endtag(self, tag):
        self._in_h1 = self._in_h1 and tag != "h1"
        self._in_td = self._in_td and tag != "td"

    def handle_data(self, data):
        if self._in_h1:
            self.h1 += data
        if self._in_td:
            self.cells[-1] += data


def test_user_text_escaped_in_html(nasty_run):
    root, _ = nasty_run
    page = (root / "report.html").read_text(encoding="utf-8")
    assert "<script" not in page.lower()
    parser = _TextCollector()
    parser.feed(page)
    assert "script" not in parser.tags
    assert parser.h1 == NASTY_TITLE          # the browser shows exactly what was written
    assert NASTY_CLAIM in parser.cells


def test_user_text_escaped_in_markdown(nasty_run):
    root, _ = nasty_run
    text = (root / "report.md").read_text(encoding="utf-8")
    # source: CommonMark spec 0.31.2, 2.4 (a backslash before ASCII punctuation shows it
    # literally), 2.5 (entity references start with "&" and a letter or "#"), 6.6 (raw
    # HTML starts with "<" and a tag name): no unescaped tag, and no HTML entity at all
    assert not re.search(r"(?<!\\)<[A-Za-z/!?]", text)
    assert not re.search(r"&(#[0-9]+|#x[0-9a-fA-F]+|[A-Za-z][A-Za-z0-9]*);", text)
    assert "\\<script>alert(1)\\</script> & 100% \\\\LaTeX_x" in text
    # The claim's row in the claims table keeps its cell count: every | in the name is escaped.
    table = text.split("**How probable each claim is**")[1].split("\n\n")[1].splitlines()
    header_cells = len(re.findall(r"(?<!\\)\|", table[0]))
    nasty_rows = [row for row in table[2:] if "\\|\\*\\_" in row]
    assert len(nasty_rows) == 1
    assert len(re.findall(r"(?<!\\)\|", nasty_rows[0])) == header_cells


def test_user_text_escaped_in_latex(nasty_run):
    root, _ = nasty_run
    study = (root / "tables" / "study.tex").read_text(encoding="utf-8")
    assert (r"\textless{}script\textgreater{}alert(1)\textless{}/script\textgreater{} \& 100\% "
            r"\textbackslash{}LaTeX\_x") in study
    claims = (root / "tables" / "claims.tex").read_text(encoding="utf-8")
    assert (r"\textbar{}*\_\textless{}\textgreater{}\&\%\$\#\{\}\textasciitilde{}"
            r"\textasciicircum{}\textbackslash{}") in claims
    for path in (root / "tables").glob("*.tex"):
        body = path.read_text(encoding="utf-8").split("\n", 1)[1]   # first line is a comment
        # formulas are in math mode ($...$, from sympy's printer); everything else is text
        text_parts = re.sub(r"\$[^$]*\$", "", body.replace(r"\$", ""))
        assert not re.search(r"(?<!\\)[%#_]", text_parts), path
        assert "~" not in text_parts and "^" not in text_parts, path


# -- determinism --------------------------------------------------------------------

def test_rewriting_gives_identical_bytes(nasty_run):
    root, written = nasty_run
    before = {p: p.read_bytes() for p in written}
    again = write_report(root)
    assert again == written
    for path in again:
        assert path.read_bytes() == before[path], path


@pytest.mark.slow
def test_rewriting_drops_figures_that_no_longer_apply_and_keeps_foreign_files(nasty_run):
    # design requirement: nothing in figures/ contradicts the report next to it
    root, written = nasty_run
    stale = root / "figures" / "sobol_claim99.png"
    foreign = root / "figures" / "my_notes.png"
    stale.write_bytes(b"old")
    foreign.write_bytes(b"mine")
    write_report(root)
    assert not stale.exists() and foreign.read_bytes() == b"mine"
    assert all(p.exists() for p in written)


# -- statistics the report computes itself -------------------------------------------

def test_ks_regional_matches_scipy():
    rng = np.random.default_rng(5)
    samples = pd.DataFrame({"a": rng.normal(size=400), "b": rng.uniform(size=400)})
    outcome = pd.Series(samples["a"] + 0.3 * rng.normal(size=400) > 0.2)
    outcome = outcome.astype("boolean")
    outcome.iloc[:10] = pd.NA                     # failed sets are left out
    result = ks_regional(samples, outcome, ["a", "b"])
    keep = outcome.notna().to_numpy()
    holds = outcome.fillna(False).to_numpy(dtype=bool)
    for name in ("a", "b"):
        # reference library: scipy.stats.ks_2samp on the two groups directly
        ref = ks_2samp(samples[name][keep & holds], samples[name][keep & ~holds])
        assert result[name]["ks"] == pytest.approx(ref.statistic, abs=1e-12)
        assert result[name]["p_value"] == pytest.approx(ref.pvalue, rel=1e-9)
        assert result[name]["n_true"] + result[name]["n_false"] == 390
    assert result["a"]["ks"] > 0.5 > result["b"]["ks"]


def test_ks_regional_one_sided_outcome_gives_nan():
    samples = pd.DataFrame({"a": np.arange(10.0)})
    result = ks_regional(samples, pd.Series([True] * 10), ["a"])
    assert np.isnan(result["a"]["ks"]) and result["a"]["n_false"] == 0


def test_convergence_end_point_matches_summary_and_published_interval(nasty_run):
    root, _ = nasty_run
    frame = pd.read_csv(root / "tables" / "convergence.csv")
    last = frame[frame["claim"] == PLAIN_CLAIM].iloc[-1]
    assert (last["n"], last["successes"]) == (263, PERSIST_SUCCESSES)
    summary = json.loads((root / "summary.json").read_text())
    assert [last["ci95_low"], last["ci95_high"]] == pytest.approx(
        summary["claims"][PLAIN_CLAIM]["ci95"], abs=1e-9)
    # source: Newcombe (1998), Statistics in Medicine 17:857-872, Table II, 81/263,
    # Wilson score interval 0.2553 to 0.3662 (from memory)
    assert last["ci95_low"] == pytest.approx(0.2553, abs=6e-5)
    assert last["ci95_high"] == pytest.approx(0.3662, abs=6e-5)
    # Running estimate follows the independent sets in sample_id order.
    assert frame.groupby("claim")["n"].apply(lambda s: s.is_monotonic_increasing).all()
    nasty = frame[frame["claim"] == NASTY_CLAIM].iloc[-1]
    assert nasty["successes"] == summary["claims"][NASTY_CLAIM]["successes"]


# -- content ------------------------------------------------------------------------

def test_report_content(nasty_run):
    root, _ = nasty_run
    md = (root / "report.md").read_text(encoding="utf-8")
    page = (root / "report.html").read_text(encoding="utf-8")
    for text in (md, page):
        assert "Stability is local." in text
        assert "Results are conditional." in text
        assert "licensed professionals" in text
        assert "How to read this report" in text
        assert "9 of 675 parameter sets" in text      # failed sets are visible
        assert "reasons are listed under Study" in text
    priorities = pd.read_csv(root / "tables" / "priorities.csv")
    persist = priorities[priorities["Claim"] == PLAIN_CLAIM]
    assert list(persist["Parameter"]) == ["K", "c", "s"]   # ranked by ST
    assert list(persist["Rank alone (S1)"]) == [1, 2, 3]
    assert "nominal value (1)" in persist.iloc[2]["Reading"]   # ST 0.004 < 0.01
    sobol = pd.read_csv(root / "tables" / "sobol.csv")
    flagged = sobol[sobol["Note"] == "more samples needed"]
    assert set(zip(flagged["Claim"], flagged["Parameter"])) == {(NASTY_CLAIM, "c")}
    regional = pd.read_csv(root / "tables" / "regional.csv")
    top = regional[regional["Claim"] == PLAIN_CLAIM].iloc[0]
    assert top["Parameter"] == "K" and top["KS distance"] > 0.8   # claim was built from K


def test_main_table_text(nasty_run):
    root, _ = nasty_run
    text = main_table_text(root)
    summary = json.loads((root / "summary.json").read_text())
    entry = summary["claims"][PLAIN_CLAIM]
    line = next(row for row in text.splitlines() if row.startswith(PLAIN_CLAIM))
    assert f"{entry['probability']:.3f}" in line
    assert f"[{entry['ci95'][0]:.3f}, {entry['ci95'][1]:.3f}]" in line
    for count in summary["stable_count"]:
        assert re.search(rf"^{count}\s", text, flags=re.M)
    assert "failed and excluded: 9" in text


def test_no_claims_no_sensitivity_larger_model(tmp_path):
    root = build_run(tmp_path / "run", with_claims=False, sensitivity="none", dimension=3)
    written = write_report(root)
    names = {p.relative_to(root).as_posix() for p in written}
    assert "figures/steady_states_rightmost_eigenvalue.png" in names
    assert "tables/stable_count.csv" in names and "tables/classes.csv" in names
    assert not any(n.startswith(("tables/claims", "tables/sobol", "figures/sobol")) for n in names)
    md = (root / "report.md").read_text(encoding="utf-8")
    assert "This study states no claims" in md
    assert "not requested" in md
    for path in written:
        assert path.stat().st_size > 0
    assert "No claims in this study." in main_table_text(root)


# -- renderers on their own -----------------------------------------------------------

def test_latex_row_cannot_start_an_optional_argument():
    from poise.report.tables import Column, Interval, Table, to_latex
    table = Table("t", "c", [Column("Name"), Column("CI", "interval")],
                  [["[draft] claim", Interval(0.1, 0.2)], ["*starred", Interval(0.3, 0.4)]])
    lines = to_latex(table).splitlines()
    # source: LaTeX2e kernel and booktabs manual: \\ and \midrule take an optional [..]
    # argument and \\* is a variant; a row must not start with [ or *.
    for before, line in zip(lines, lines[1:]):
        if before.endswith("\\\\") or before == "\\midrule":
            assert not line.startswith(("[", "*")), line
    assert "{}[draft] claim & [0.100, 0.200] \\\\" in lines
    assert _latex_balanced("\n".join(lines))


@pytest.mark.parametrize("text, rendered", [
    ("- not a list", "\\- not a list"),
    ("1. not a list", "1\\. not a list"),
    ("---", "\\---"),
    ("> not a quote", "\\> not a quote"),
    ("-A + K", "-A + K"),           # no list: the marker must be followed by a space
    ("0.308", "0.308"),
    ("[a](javascript:x)", "[a\\](javascript:x)"),
    ("[0.059, 0.081]", "[0.059, 0.081]"),   # no link without "](", "][" or "]:"
    ("a|b", "a\\|b"),
    ("u > v & x < 2", "u > v & x < 2"),     # cannot start markup: stays readable
    ("<b>&amp;", "\\<b>\\&amp;"),
    ("top_u _x_", "top_u \\_x\\_"),     # "_" between letters never makes emphasis
])
def test_markdown_escape_blocks_structure(text, rendered):
    # source: CommonMark spec 0.31.2, sections 2.4 (backslash escapes), 2.5 (entity
    # references), 4.1 (thematic breaks), 5.1 (block quotes), 5.2 (list items need a space
    # after the marker), 6.2 (emphasis: flanking rules), 6.3 (links), 6.6 (raw HTML)
    from poise.report.escape import escape_markdown
    assert escape_markdown(text) == rendered


def test_claim_without_indices_and_without_variation(tmp_path):
    root = build_run(tmp_path / "run", sensitivity="none")
    # Make the plain claim hold in every analysed set, as the engine would record it.
    outcomes = pd.read_parquet(root / "outcomes.parquet")
    ok = outcomes["status"] == "ok"
    outcomes.loc[ok, PLAIN_CLAIM] = True
    outcomes.to_parquet(root / "outcomes.parquet", index=False)
    summary = json.loads((root / "summary.json").read_text())
    n = summary["claims"][PLAIN_CLAIM]["n"]
    summary["claims"][PLAIN_CLAIM].update(probability=1.0, successes=n, ci95=_wilson(n, n))
    (root / "summary.json").write_text(json.dumps(summary), encoding="utf-8")

    names = {p.relative_to(root).as_posix() for p in write_report(root)}
    assert not any("sobol" in name or "priorities" in name for name in names)
    assert "figures/factor_map_claim01.png" not in names      # never fails: nothing to map
    assert "figures/factor_map_claim02.png" in names          # ranked by KS distance instead
    md = (root / "report.md").read_text(encoding="utf-8")
    assert "Sobol indices were not requested" in md
    assert "No map for 'grazers persist'" in md
    regional = pd.read_csv(root / "tables" / "regional.csv")
    assert regional[regional["Claim"] == PLAIN_CLAIM]["KS distance"].isna().all()


def test_run_where_every_set_failed(tmp_path):
    root = build_run(tmp_path / "run")
    for name in ("equilibria.parquet", "outcomes.parquet", "samples.parquet"):
        (root / name).unlink()
    summary = json.loads((root / "summary.json").read_text())
    summary["samples"] = {"analysed": 0, "failed": 675, "independent": 0}
    for entry in summary["claims"].values():
        entry.update(probability=None, ci95=[None, None], successes=0, n=0)
    summary.update(stable_count={}, equilibria={})
    summary["sensitivity"] = {k: {"method": "none", "reason": "no analysed sets"}
                              for k in summary["claims"]}
    (root / "summary.json").write_text(json.dumps(summary), encoding="utf-8")
    written = write_report(root)
    assert all(p.stat().st_size > 0 for p in written)
    md = (root / "report.md").read_text(encoding="utf-8")
    assert "675 of 675 parameter sets (100.0 %) could not be analysed" in md
    assert "No Sobol indices for 'grazers persist': no analysed sets." in md
    assert "n/a" in (root / "tables" / "claims.tex").read_text(encoding="utf-8")
    assert "No parameter set was analysed." in main_table_text(root)


def test_missing_run_directory_is_an_input_error(tmp_path):
    from poise.errors import InputError
    with pytest.raises(InputError, match="manifest.json is missing"):
        write_report(tmp_path)
