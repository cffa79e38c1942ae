"""`poise report` on damaged or incomplete run directories (issue 14, items 3 and 8):
one clear message and exit status 2, nothing half-written; missing data files named
with the figures they keep from being rebuilt; every file written through
`poise.engine.storage.write_atomic`."""

from __future__ import annotations

import json

import pytest

import poise.engine.storage as storage
from poise.errors import InputError
from poise.report import write_report

from helpers import run_cli
from test_report import build_run


def _snapshot(root):
    # the run folder's lock file (taken by `poise report`) is not part of the run's content
    return {p: p.read_bytes() for p in sorted(root.rglob("*")) if p.is_file() and p.name != ".poise-lock"}


@pytest.fixture
def finished(tmp_path):
    root = build_run(tmp_path / "run")
    write_report(root)
    return root


def test_truncated_outcomes_give_one_message_and_leave_every_file_alone(finished):
    path = finished / "outcomes.parquet"
    path.write_bytes(path.read_bytes()[: path.stat().st_size // 2])
    before = _snapshot(finished)
    with pytest.raises(InputError, match="outcomes.parquet cannot be read, it may be truncated"):
        write_report(finished)
    assert _snapshot(finished) == before
    status, out, err = run_cli("report", str(finished))
    assert status == 2 and err.count("\n") == 1 and "Traceback" not in err
    assert "outcomes.parquet" in err
    assert _snapshot(finished) == before


@pytest.mark.parametrize("damage, message", [
    (lambda text: text[: len(text) // 2], "summary.json is not valid JSON"),
    (lambda text: json.dumps({**json.loads(text), "claims": []}), "'claims' should be a JSON object"),
    (lambda text: "[1, 2]", "does not hold a JSON object"),
])
@pytest.mark.slow
def test_broken_summary_is_an_input_error_and_nothing_is_written(finished, damage, message):
    path = finished / "summary.json"
    path.write_text(damage(path.read_text()))
    before = _snapshot(finished)
    with pytest.raises(InputError, match=message) as caught:
        write_report(finished)
    assert str(caught.value).startswith(str(path))             # names the file
    assert _snapshot(finished) == before


@pytest.mark.slow
def test_poise_report_command_with_broken_summary_exits_2(finished):
    path = finished / "summary.json"
    path.write_text(path.read_text()[:40])
    status, _, err = run_cli("report", str(finished))
    assert status == 2 and "summary.json" in err and err.count("\n") == 1


@pytest.mark.slow
def test_unfinished_run_is_refused(finished):
    manifest = json.loads((finished / "manifest.json").read_text())
    manifest["complete"] = False
    (finished / "manifest.json").write_text(json.dumps(manifest))
    with pytest.raises(InputError, match="not finished"):
        write_report(finished)


@pytest.mark.slow
def test_missing_data_file_is_named_and_earlier_figures_are_kept(finished):
    kept = {name: (finished / name).read_bytes() for name in
            ("figures/factor_map_claim01.png", "figures/probability_map_claim02.svg",
             "tables/regional.csv", "tables/probability_map_claim01.csv")}
    (finished / "samples.parquet").unlink()
    notes: list[str] = []
    written = write_report(finished, notes=notes)
    names = {p.relative_to(finished).as_posix() for p in written}
    for name, data in kept.items():
        assert name not in names and (finished / name).read_bytes() == data   # left in place
    joined = "\n".join(notes)
    for stem in ("factor_map_claim01", "factor_map_claim02", "probability_map_claim01",
                 "probability_map_claim02"):
        assert f"figures/{stem} not rebuilt (samples.parquet is missing); the earlier rendering is kept" in joined
    assert "tables/regional not rebuilt" in joined and "tables/failures not rebuilt" in joined
    assert "convergence" not in joined                           # needs outcomes only: rebuilt
    assert "figures/convergence.png" in names
    md = (finished / "report.md").read_text(encoding="utf-8")
    assert "Some data files of this run are missing" in md
    assert "](figures/factor_map_claim01.png)" in md and "Earlier rendering, not rebuilt" in md


@pytest.mark.slow
def test_missing_data_without_earlier_rendering_says_it_cannot_draw(tmp_path):
    root = build_run(tmp_path / "run")
    (root / "equilibria.parquet").unlink()
    notes: list[str] = []
    write_report(root, notes=notes)
    assert notes == ["figures/steady_states_trace_determinant cannot be drawn "
                     "(equilibria.parquet is missing)"]
    assert "This figure cannot be drawn: equilibria.parquet is missing." in \
        (root / "report.md").read_text(encoding="utf-8")


@pytest.mark.slow
def test_every_file_goes_through_write_atomic_and_no_planted_link_is_followed(finished, monkeypatch,
                                                                              tmp_path):
    outside = tmp_path / "outside.txt"
    outside.write_text("keep me")
    for name in ("report.md.tmp", "figures/claims.png.tmp", "tables/claims.csv.tmp"):
        (finished / name).symlink_to(outside)       # where the old writer put its temporaries
    seen = []
    original = storage.write_atomic

    def recording(path, data, *args, **kwargs):
        seen.append(path)
        return original(path, data, *args, **kwargs)

    monkeypatch.setattr(storage, "write_atomic", recording)
    written = write_report(finished)
    assert seen == written and len(written) > 40
    assert outside.read_text() == "keep me"
