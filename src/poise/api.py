"""The Python API for notebooks and scripts; the CLI calls the same functions.

>>> import poise
>>> study = poise.load_study("configs/toggle_switch.toml")
>>> result = poise.run_study(study, "reports/toggle", size=256)   # doctest: +SKIP
>>> result.summary["claims"]["bistable"]["probability"]           # doctest: +SKIP
"""

from __future__ import annotations

import dataclasses
import json
import os
import platform
import shlex
import sys
import time
import warnings
from functools import cached_property
from pathlib import Path

import numpy as np
import pandas as pd

from poise import __version__
from poise.describe import parameter_sets
from poise.engine.assemble import assemble
from poise.engine.progress import Progress
from poise.engine.rundir import RunLock, claim_folder, remove_recorded, remove_stale
from poise.engine.runner import capped_jobs, execute
from poise.engine.storage import read_manifest, sha256, write_atomic, write_manifest
from poise.errors import InputError, PoiseWarning
from poise.study.loader import load_study
from poise.study.spec import Study

FINGERPRINT = ("study_sha256", "size", "seed", "chunk_size", "n_sets", "tool")


@dataclasses.dataclass
class RunResult:
    """A finished run: its summary and (read on first use) its tables.

    Attributes
    ----------
    directory : the run directory.
    summary : the content of summary.json.
    manifest : the content of manifest.json.
    samples, outcomes, equilibria : pandas DataFrames (read from the parquet files).
    """

    directory: Path
    summary: dict
    manifest: dict

    @cached_property
    def samples(self) -> pd.DataFrame:
        return pd.read_parquet(self.directory / "samples.parquet")

    @cached_property
    def outcomes(self) -> pd.DataFrame:
        return pd.read_parquet(self.directory / "outcomes.parquet")

    @cached_property
    def equilibria(self) -> pd.DataFrame:
        return pd.read_parquet(self.directory / "equilibria.parquet")

    @cached_property
    def trajectories(self) -> pd.DataFrame:
        """One row per simulated trajectory (studies with [long_run]; else empty)."""
        path = self.directory / "trajectories.parquet"
        return pd.read_parquet(path) if path.exists() else pd.DataFrame()

    def __repr__(self) -> str:
        samples = self.summary["samples"]
        lines = [f"<poise run '{self.manifest.get('title', '')}' in {self.directory}>",
                 f"  sets analysed {samples['analysed']}, failed {samples['failed']}, "
                 f"independent {samples['independent']}"]
        for name, claim in self.summary["claims"].items():
            lo, hi = claim["ci95"]
            p = claim["probability"]
            lines.append(f"  P({name}) = {'n/a' if p is None else format(p, '.3f')}  [{lo:.3f}, {hi:.3f}]")
        return "\n".join(lines)


def open_run(directory: str | Path) -> RunResult:
    """Open a finished run directory."""
    directory = Path(directory)
    manifest = read_manifest(directory)
    summary_path = directory / "summary.json"
    if manifest is None or not manifest.get("complete") or not summary_path.exists():
        raise InputError("not a finished poise run (no complete manifest.json and summary.json)", file=str(directory))
    try:
        summary = json.loads(summary_path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:   # damaged by hand or by a failing disk
        raise InputError(f"summary.json cannot be read ({exc}); run the study again with the same "
                         "command to rebuild it", file=str(directory)) from None
    if not isinstance(summary, dict):
        raise InputError("summary.json does not hold a poise summary; run the study again with the "
                         "same command to rebuild it", file=str(directory))
    return RunResult(directory, summary, manifest)


def run_study(study: Study, out: str | Path | None = None, *, size: int | None = None,
              seed: int | None = None, jobs: int | None = None, scheduler: str | None = None,
              resume: bool = False, overwrite: bool = False, progress: bool = False,
              chunk_size: int | None = None, report: bool = True) -> RunResult:
    """Run the whole study: sample, solve every set, summarise, write the report.

    Parameters
    ----------
    study : from `load_study`.
    out : run directory (default ``reports/<study file stem>``). poise writes only into
        a new or empty folder or one holding a run of its own, and holds a lock on it
        for the whole run.
    size, seed : override ``[sampling]`` size and seed.
    jobs : worker processes (0 = all cores; default ``[run] jobs``); more than twice
        the cores are capped, with a `PoiseWarning`.
    scheduler : address of a Dask scheduler; chunks then run on its workers.
    resume : continue an unfinished run in `out` (a plain rerun does that too when the
        study and settings match).
    overwrite : replace a run of a different study or settings in `out` (only the
        files that run recorded as its own are removed); without it, such a folder
        is refused.
    progress : print a progress line on stderr.
    chunk_size : parameter sets per chunk (default ``[run] chunk_size``).
    report : write report.md, report.html, tables and figures.

    Raises
    ------
    InputError
        For a folder poise may not write into, one another run is using, a run of
        another study there (see `overwrite`), or a size this machine cannot hold.
    """
    from poise.equilibria.choice import WorkEstimate, choose
    from poise.model import compile_model
    from poise.sampling import make_design, map_to_parameters

    study = dataclasses.replace(study, sampling=dataclasses.replace(
        study.sampling, size=size or study.sampling.size,
        seed=study.sampling.seed if seed is None else seed))
    directory = Path(out) if out else Path("reports") / study.path.stem
    chunk_size = chunk_size or study.run.chunk_size
    jobs, note = capped_jobs(study.run.jobs if jobs is None else jobs)
    if note and not scheduler:
        warnings.warn(note, PoiseWarning, stacklevel=2)
    started = time.time()

    names = tuple(study.uncertain)
    sobol = study.sensitivity.method == "sobol" and bool(names)
    _check_memory(study, sobol)
    claim_folder(directory)   # before the work: a folder poise may not write into is refused at once
    design = make_design(names, study.sampling.design, study.sampling.size, study.sampling.seed,
                         sobol_indices=sobol, second_order=study.sensitivity.second_order)
    params = map_to_parameters(design, study.uncertain)
    model = compile_model(study)
    if study.long_run is not None:
        from poise.longrun.pipeline import check_long_run
        check_long_run(study, model)

    with RunLock(directory):
        remove_stale(directory)
        manifest = _prepare_directory(directory, study, design.n_rows, chunk_size, resume, overwrite)
        if manifest.get("chunks") and manifest.get("solver"):
            # resuming: finish with the finder the saved chunks used (an "auto" choice
            # near its threshold could come out differently on another machine or
            # library version), and skip the choice's probe
            method, saved = manifest["solver"], manifest.get("solver_choice")
            estimate = WorkEstimate(**saved) if saved else None
        else:
            method, estimate = choose(study, model)
        manifest.update(solver=method, solver_choice=dataclasses.asdict(estimate) if estimate else None,
                        design=study.sampling.design)
        write_manifest(directory, manifest)
        bar = Progress(design.n_rows, enabled=progress)
        manifest = execute(directory, manifest, str(study.path), study.text, params, method,
                           jobs, scheduler, bar)

        samples = pd.DataFrame({"sample_id": np.arange(design.n_rows, dtype=np.int64),
                                "block": design.block.astype(str), "independent": design.independent})
        for j, name in enumerate(names):
            samples[name] = params[:, j]
        outcomes, tallies = assemble(directory, manifest, samples)
        summary = _summary(study, outcomes, tallies, design, sobol)
        summary["solver"] = _solver_summary(study, model, method, estimate, outcomes, params, progress)
        files = list(OUTPUTS)
        if study.long_run is not None:
            files += _long_run_outputs(directory, study, model, outcomes, params, summary)
        write_atomic(directory / "summary.json", (json.dumps(summary, indent=2) + "\n").encode())
        if study.long_run is not None:   # what was simulated, beside the study's own text
            manifest["long_run"] = {**summary["long_run"]["settings"], **summary["long_run"]["sets"]}
        manifest.update(complete=True, seconds=round(time.time() - started, 3), files=files)
        write_manifest(directory, manifest)
        if report:
            _write_report(directory, manifest)
    return RunResult(directory, summary, manifest)


# the files of a finished run besides the report (recorded in the manifest as its own)
OUTPUTS = ("study.toml", "samples.parquet", "outcomes.parquet", "equilibria.parquet", "summary.json")
# bytes held per parameter set while the design is drawn and mapped: the unit-cube
# points, their Saltelli cross rows and clipped copy, the parameter values and the
# samples table (about six float64 copies per uncertain parameter), plus block labels
# and per-set outcomes; measured with resource.getrusage on the reef study (350 bytes
# per set for 5 parameters at N = 2^18)
BYTES_PER_SET, BYTES_PER_SET_AND_PARAMETER = 110, 48
# SALib's bootstrap holds about this many bytes per base row, resample and parameter
# (README, Speed: about 1.6 GB at N = 2^16 with 500 resamples and 5 parameters)
BYTES_PER_RESAMPLE = 10


def _check_memory(study: Study, sobol: bool) -> None:
    """Refuse, before allocating anything, a design this machine cannot hold (which
    would end in a MemoryError or the system killing the run)."""
    try:
        have = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (AttributeError, ValueError, OSError):  # not reported here: no check
        return
    k, n = len(study.uncertain), study.sampling.size
    sets = parameter_sets(study)
    need = sets * (BYTES_PER_SET + BYTES_PER_SET_AND_PARAMETER * k)
    bootstrap = BYTES_PER_RESAMPLE * n * study.sensitivity.resamples * k if sobol else 0
    if need + bootstrap > have:
        hint = " or fewer [sensitivity] resamples" if bootstrap > need else ""
        raise InputError(
            f"size {n} gives {sets:,} parameter sets, which need about "
            f"{(need + bootstrap) / 2**30:,.0f} GB of memory; this machine has "
            f"{have / 2**30:,.0f} GB: choose a smaller size{hint}", file=str(study.path))


def _write_report(directory: Path, manifest: dict, notes: list[str] | None = None) -> list[Path]:
    """Write the report and record its files in the manifest as the run's own;
    `notes` collects what could not be rebuilt (missing data files)."""
    from poise.report import write_report
    written = write_report(directory, notes=notes)
    own = set(manifest.get("files") or ())
    for path in written:
        try:
            own.add(Path(path).resolve().relative_to(directory.resolve()).as_posix())
        except ValueError:   # outside the folder: not the run's to remove later
            pass
    manifest["files"] = sorted(own)
    write_manifest(directory, manifest)
    return written


def _summary(study: Study, outcomes: pd.DataFrame, tallies, design, sobol: bool) -> dict:
    from poise.analysis.summary import (claim_summary, equilibria_summary, sensitivity_summary,
                                        stable_count_summary)

    ok = outcomes["status"] == "ok"
    independent_ok = int((ok & outcomes["independent"]).sum())
    group = (len(design.names) * (2 if design.second_order else 1) + 2) if sobol else 1
    return {
        "tool": {"name": "poise", "version": __version__},
        "samples": {"analysed": int(ok.sum()), "failed": int((~ok).sum()), "independent": independent_ok},
        "claims": claim_summary(outcomes, study.claims),
        "stable_count": stable_count_summary(outcomes),
        "equilibria": equilibria_summary(tallies.presence, tallies.classes, independent_ok),
        "sensitivity": sensitivity_summary(outcomes, study.claims, design.names, group,
                                           study.sensitivity.second_order, study.sensitivity.resamples,
                                           study.sampling.seed, study.sensitivity.method),
    }


def _long_run_outputs(directory: Path, study: Study, model, outcomes: pd.DataFrame, params: np.ndarray,
                      summary: dict) -> list[str]:
    """summary.json's "long_run" entry and timecourses.parquet; the files it adds."""
    from poise.engine.storage import frame_bytes
    from poise.longrun.courses import time_courses
    from poise.longrun.summary import long_run_summary

    summary["long_run"] = long_run_summary(study, outcomes, directory)
    summary["long_run"]["time_courses"] = {"file": "timecourses.parquet",
                                           "method": "scipy.integrate.solve_ivp (Radau)"}
    courses = time_courses(directory, study, model, outcomes, params)
    write_atomic(directory / "timecourses.parquet", frame_bytes(courses))
    return ["trajectories.parquet", "timecourses.parquet"]


def _solver_summary(study: Study, model, method: str, estimate, outcomes: pd.DataFrame,
                    params: np.ndarray, progress: bool = False) -> dict:
    """Which finder ran, why (for "auto": the work estimate), and, for multistart
    Newton, how often it missed a steady state on a re-solved random subsample
    (homotopy is complete with probability one)."""
    from poise.analysis.completeness import completeness_check

    entry = {"method": method, "requested": study.solver.method}
    if estimate is not None:
        entry["choice"] = estimate.as_dict()
    if method == "newton":
        entry["completeness"] = completeness_check(study, model, outcomes, params, study.sampling.seed,
                                                   progress=progress)
    return entry


def _prepare_directory(directory: Path, study: Study, n_sets: int, chunk_size: int,
                       resume: bool, overwrite: bool) -> dict:
    """The run's manifest, fresh or continued; an earlier run of another study or
    settings in the (locked) folder is refused, or with `overwrite` replaced."""
    from poise.describe import describe_model
    from poise.model.system import reduce

    described = describe_model(study)
    fresh = {
        "tool": {"name": "poise", "version": __version__},
        "title": study.title, "study_file": "study.toml", "study_sha256": sha256(study.text.encode()),
        "states": list(study.states),
        "reduced_states": list(reduce(study, study.nominal_values(), tuple(study.uncertain)).free),
        "ode": described["ode"], "conserved": described["conserved"], "parameters": described["parameters"],
        "claims": [{"name": c.name, "holds": c.holds} for c in study.claims],
        "size": study.sampling.size, "seed": study.sampling.seed,
        "sensitivity": study.sensitivity.method, "second_order": study.sensitivity.second_order,
        "resamples": study.sensitivity.resamples, "n_sets": n_sets, "chunk_size": chunk_size,
        "chunks": {}, "complete": False, "versions": _versions(), "files": [],
    }
    existing = read_manifest(directory)
    if existing is None:
        if resume:
            raise InputError("there is no run to resume here (no manifest.json)", file=str(directory))
    else:
        differences = [key for key in FINGERPRINT if existing.get(key) != fresh.get(key)]
        if not differences:
            fresh["chunks"] = existing.get("chunks", {})
            fresh["files"] = existing.get("files", [])
            if fresh["chunks"] and existing.get("solver"):
                fresh["solver"] = existing["solver"]  # the finder the saved chunks used
                fresh["solver_choice"] = existing.get("solver_choice")
        elif resume or not overwrite:
            kind = "a finished" if existing.get("complete") else "an unfinished"
            action = ("resuming would mix results" if resume
                      else "run with --overwrite to replace it")
            raise InputError(
                f"this directory holds {kind} run of a different study or settings "
                f"(differs in: {', '.join(differences)}); {action}, or choose another --out",
                file=str(directory))
        else:
            remove_recorded(directory, existing)
    write_manifest(directory, fresh)   # first, so that the folder is known as a run
    write_atomic(directory / "study.toml", study.text.encode())
    return fresh


def _versions() -> dict:
    import importlib.metadata as metadata
    versions = {"python": platform.python_version()}
    for package in ("numpy", "scipy", "sympy", "SALib", "pandas", "pyarrow", "joblib", "matplotlib",
                    "numba", "python-libsbml"):
        try:
            versions[package] = metadata.version(package)
        except metadata.PackageNotFoundError:
            pass
    return versions


# --- CLI glue --------------------------------------------------------------------

def run_from_cli(args) -> int:
    from poise.report import main_table_text

    study = load_study(args.study)
    for warning in study.warnings:
        print(f"poise: warning: {warning}", file=sys.stderr)
    out = Path(args.out) if args.out else Path("reports") / study.path.stem
    try:
        result = run_study(study, out, size=args.size, seed=args.seed, jobs=args.jobs,
                           scheduler=args.scheduler, resume=args.resume, overwrite=args.overwrite,
                           progress=not args.quiet)
    except KeyboardInterrupt:
        print(f"\npoise: interrupted; finished chunks are saved. Continue with:\n"
              f"  {resume_command(args, out)}", file=sys.stderr)
        return 130
    print(main_table_text(result.directory))
    print(f"\nrun directory: {result.directory}  (report.html, summary.json, tables/, figures/)")
    if result.summary["samples"]["analysed"] == 0:
        print("poise: no parameter set could be analysed; samples.parquet gives each set's reason",
              file=sys.stderr)
        return 1
    return 0


def resume_command(args, out: Path) -> str:
    """The shell command that continues an interrupted `poise run`: every option that
    shapes the run, each quoted for a POSIX shell."""
    words = ["poise", "run", _not_an_option(str(args.study)), "--out", _not_an_option(str(out))]
    for option in ("size", "seed", "jobs", "scheduler"):
        value = getattr(args, option, None)
        if value is not None:
            words += [f"--{option}", str(value)]
    words.append("--resume")
    if getattr(args, "quiet", False):
        words.append("--quiet")
    return shlex.join(words)


def _not_an_option(path: str) -> str:
    """A relative path that starts with '-' reads as an option: write it as ./-name."""
    return f"./{path}" if path.startswith("-") else path


def report_from_cli(args) -> int:
    result = open_run(args.dir)
    with RunLock(result.directory):
        remove_stale(result.directory)
        notes: list[str] = []
        written = _write_report(result.directory, read_manifest(result.directory) or result.manifest, notes)
    for note in notes:
        print(f"poise: warning: {note}", file=sys.stderr)
    print(f"rebuilt {len(written)} files in {result.directory}")
    return 0
