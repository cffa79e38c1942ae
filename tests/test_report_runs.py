"""Reports for real runs of every bundled study: every table and figure is written,
PNGs decode, LaTeX balances, and `poise report DIR` rebuilds without recomputing."""

from __future__ import annotations

import re
from pathlib import Path

import matplotlib.image
import pytest

from poise.api import run_study
from poise.study.loader import load_study

from helpers import run_cli

# every test here shares one run of every bundled study (about half a minute)
pytestmark = pytest.mark.slow

ROOT = Path(__file__).resolve().parents[1]
CONFIGS = sorted(ROOT.glob("configs/**/*.toml"))


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    folder = tmp_path_factory.mktemp("runs")
    done = {}
    for config in CONFIGS:
        study = load_study(config)
        name = config.parent.name if config.stem == "study" else config.stem
        done[name] = run_study(study, folder / name, size=24, jobs=1).directory
    return done


def test_every_config_renders_every_table_and_figure(runs):
    for name, directory in runs.items():
        for file in ("report.md", "report.html", "summary.json", "tables/claims.csv",
                     "tables/claims.tex", "tables/stable_count.csv", "tables/classes.csv",
                     "tables/sobol.csv", "tables/priorities.csv", "figures/claims.png",
                     "figures/claims.svg", "figures/convergence.png", "figures/stable_count.png"):
            assert (directory / file).stat().st_size > 0, (name, file)
        states = "trace_determinant" if name in ("reef_grazing", "toggle_switch") else "rightmost_eigenvalue"
        assert (directory / f"figures/steady_states_{states}.png").exists(), name
        for png in (directory / "figures").glob("*.png"):
            image = matplotlib.image.imread(png)
            assert image.ndim == 3 and image.shape[0] > 100, png
        for tex in (directory / "tables").glob("*.tex"):
            text = tex.read_text()
            begins = re.findall(r"\\begin\{(\w+)\}", text)
            ends = re.findall(r"\\end\{(\w+)\}", text)
            assert sorted(begins) == sorted(ends), tex
        html = (directory / "report.html").read_text()
        assert "linear stability is local" in html.lower() or "local" in html.lower()
        assert "licensed professionals" in html


def test_report_command_rebuilds_the_same_files_without_recomputing(runs):
    directory = runs["toggle_switch"]
    tracked = sorted(p for p in directory.rglob("*") if p.is_file() and p.suffix in {".md", ".csv", ".tex", ".html"})
    before = {p: p.read_bytes() for p in tracked}
    parts = {p: p.stat().st_mtime_ns for p in (directory / "parts").iterdir()}
    data = {p: p.stat().st_mtime_ns for p in directory.glob("*.parquet")}
    for p in tracked:
        p.unlink()
    status, out, err = run_cli("report", str(directory))
    assert status == 0, err
    for p, content in before.items():
        assert p.read_bytes() == content, p
    assert parts == {p: p.stat().st_mtime_ns for p in (directory / "parts").iterdir()}
    assert data == {p: p.stat().st_mtime_ns for p in directory.glob("*.parquet")}


def test_toggle_switch_tables_typeset_its_equations_with_sympy(runs):
    import sympy

    directory = runs["toggle_switch"]
    u, v, n, leak, decay, top_u, top_v, Ku, Kv = sympy.symbols("u v n leak decay top_u top_v Ku Kv")
    # configs/toggle_switch.toml written out by hand: make_u - decay*u with
    # hill(v, Kv, n) = v**n/(Kv**n + v**n); reference: sympy's LaTeX printer
    expected = {u: leak + top_u * (1 - v**n / (Kv**n + v**n)) - decay * u,
                v: leak + top_v * (1 - u**n / (Ku**n + u**n)) - decay * v}
    lines = (directory / "tables" / "study.tex").read_text().splitlines()
    for state, expr in expected.items():
        label = "$" + sympy.latex(sympy.Derivative(state, sympy.Symbol("t"))) + "$"
        assert f"{label} & ${sympy.latex(expr)}$ \\\\" in lines
    # parameters in the study file's order, values as written there
    import pandas as pd
    table = pd.read_csv(directory / "tables" / "parameters.csv")
    assert list(table["Parameter"]) == ["n", "leak", "decay", "top_u", "top_v", "Ku", "Kv"]
    assert "fixed at 0.05" in set(table["Distribution"])
    for name in ("methods.tex", "references.bib", "figures/probability_map_claim01.png"):
        assert (directory / name).stat().st_size > 0, name
