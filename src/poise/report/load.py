"""Read a finished run directory into plain data (no computing beyond selection)."""

from __future__ import annotations

import json
import re
import tomllib
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path

import pandas as pd

from ..errors import InputError

__all__ = ["RunData", "load_run"]


@dataclass
class RunData:
    """Everything the report needs from a run directory.

    Attributes
    ----------
    run_dir : Path
    manifest, summary : dict
        The parsed ``manifest.json`` and ``summary.json``.
    samples, equilibria, outcomes : pandas.DataFrame
        The parquet tables; empty frames when a file is missing.
    missing : tuple of str
        Names of the parquet files that were not there (figures drawn from them
        cannot be rebuilt).
    """

    run_dir: Path
    manifest: dict
    summary: dict
    samples: pd.DataFrame = field(default_factory=pd.DataFrame)
    equilibria: pd.DataFrame = field(default_factory=pd.DataFrame)
    outcomes: pd.DataFrame = field(default_factory=pd.DataFrame)
    missing: tuple[str, ...] = ()

    # -- conveniences used across the report -----------------------------------
    @property
    def title(self) -> str:
        return str(self.manifest.get("title") or "Untitled study")

    @property
    def claim_names(self) -> list[str]:
        """Claims in study order (manifest), falling back to summary order."""
        names = [c["name"] for c in self.manifest.get("claims", []) if "name" in c]
        for name in self.summary.get("claims", {}):
            if name not in names:
                names.append(name)
        return names

    @cached_property
    def parameter_order(self) -> list[str]:
        """Every parameter in the model's own order.

        ``manifest.json`` is written with sorted keys, so its ``parameters`` table has
        lost the order of the study file. That order is taken from a
        ``parameter_order`` list in the manifest where there is one, else from the
        ``[parameters]`` table of the run's copy of the study file; parameters named
        in neither (e.g. imported from SBML) follow in order of first appearance in the
        equations, taken in state order, and then as listed in the manifest.
        """
        params = [name for name, spec in self.manifest.get("parameters", {}).items()
                  if isinstance(spec, dict)]
        listed = self.manifest.get("parameter_order")
        if not isinstance(listed, list):
            listed = _study_parameter_order(self.run_dir / "study.toml")
        order = [name for name in listed if name in params]
        ode = self.manifest.get("ode", {})
        texts = [str(ode.get(state, "")) for state in self.state_order]
        texts += [str(text) for text in self.manifest.get("conserved", {}).values()]
        for text in texts:
            for word in _WORD.findall(text):
                if word in params and word not in order:
                    order.append(word)
        return order + [name for name in params if name not in order]

    @property
    def state_order(self) -> list[str]:
        """States in the model's order, followed by any equation the list lacks."""
        states = [str(s) for s in self.manifest.get("states", [])]
        return states + [s for s in self.manifest.get("ode", {}) if s not in states]

    @property
    def uncertain_parameters(self) -> list[str]:
        """Parameters with a distribution, in the model's order."""
        params = self.manifest.get("parameters", {})
        return [name for name in self.parameter_order
                if isinstance(params.get(name), dict) and "dist" in params[name]]

    def missing_reason(self, *files: str) -> str | None:
        """"X is missing" (or "X and Y are missing") for those of `files` not in the run
        directory; None when all are there."""
        gone = [name for name in files if name in self.missing]
        if not gone:
            return None
        return " and ".join(gone) + (" is" if len(gone) == 1 else " are") + " missing"

    @property
    def reduced_dimension(self) -> int:
        reduced = self.manifest.get("reduced_states", self.manifest.get("states", []))
        return len(reduced)

    def independent_ok(self) -> pd.DataFrame:
        """Outcomes of the independent, successfully analysed sets in sample_id order:
        the draws behind every probability."""
        out = self.outcomes
        if out.empty:
            return out
        mask = (out["status"] == "ok") & out["independent"].astype(bool)
        return out.loc[mask].sort_values("sample_id", kind="stable").reset_index(drop=True)

    def parameters_of(self, sample_ids) -> pd.DataFrame:
        """Uncertain parameter values of the given sets, one row per id, in that order.

        Kept apart from the outcomes so that a claim and a parameter may share a name.
        """
        params = [p for p in self.uncertain_parameters if p in self.samples.columns]
        if self.samples.empty or not params:
            return pd.DataFrame(index=range(len(sample_ids)))
        table = self.samples.set_index("sample_id")[params]
        return table.reindex(list(sample_ids)).reset_index(drop=True)


_WORD = re.compile(r"[^\W\d]\w*")


def _study_parameter_order(path: Path) -> list[str]:
    """Keys of the ``[parameters]`` table of a study file (TOML is only parsed, never
    run); empty when the file is missing or unreadable."""
    try:
        with path.open("rb") as handle:
            table = tomllib.load(handle).get("parameters", {})
    except (OSError, tomllib.TOMLDecodeError, UnicodeDecodeError):
        return []
    return list(table) if isinstance(table, dict) else []


# Keys the report reads and the JSON type each must have; other keys are ignored, so
# later additions to either file do not break the report.
_MANIFEST_SHAPE = {"parameters": dict, "ode": dict, "conserved": dict, "states": list,
                   "claims": list, "versions": dict, "tool": dict}
_SUMMARY_SHAPE = {"claims": dict, "stable_count": dict, "equilibria": dict,
                  "sensitivity": dict, "samples": dict, "solver": dict, "tool": dict}


def _check_shape(path: Path, data: dict, shape: dict) -> None:
    for key, kind in shape.items():
        if key in data and data[key] is not None and not isinstance(data[key], kind):
            raise InputError(f"{path.name} is damaged: '{key}' should be a JSON "
                             f"{'object' if kind is dict else 'array'}; run the study again "
                             "to rebuild it", file=str(path))


def _read_json(path: Path) -> dict:
    try:
        with path.open(encoding="utf-8") as handle:
            data = json.load(handle)
    except FileNotFoundError:
        raise InputError(f"{path.name} is missing; is this a finished poise run directory?",
                         file=str(path)) from None
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        detail = f"{exc.msg}, line {exc.lineno}" if isinstance(exc, json.JSONDecodeError) else "not UTF-8"
        raise InputError(f"{path.name} is not valid JSON ({detail}); the run may have been cut "
                         "short. Run the study again to rebuild it", file=str(path)) from None
    except OSError as exc:
        raise InputError(f"{path.name} cannot be read ({exc.strerror})", file=str(path)) from None
    if not isinstance(data, dict):
        raise InputError(f"{path.name} does not hold a JSON object", file=str(path))
    return data


# The report draws steady states only on the trace-determinant or eigenvalue plane, so
# only these columns are read: memory then stays small for runs with millions of rows.
EQUILIBRIA_COLUMNS = ("sample_id", "label", "class", "stability", "trace", "determinant", "eig_re_0", "eig_im_0")


def _read_parquet(path: Path, columns=None) -> pd.DataFrame | None:
    """The table, or None when the file is missing; a damaged file is an InputError."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    if not path.exists():
        return None
    try:
        if columns is not None:
            present = set(pq.read_schema(path).names)
            columns = [c for c in columns if c in present]
        return pd.read_parquet(path, columns=columns)
    except (pa.ArrowException, OSError, ValueError) as exc:
        detail = " ".join(str(exc).split())[:160] or type(exc).__name__
        raise InputError(f"{path.name} cannot be read, it may be truncated or damaged ({detail}); "
                         "run the study again to rebuild it", file=str(path)) from None


def load_run(run_dir: str | Path) -> RunData:
    """Read ``manifest.json``, ``summary.json`` and the parquet tables of a run.

    Parameters
    ----------
    run_dir : str or Path
        A directory written by ``poise run``.

    Returns
    -------
    RunData

    Raises
    ------
    poise.errors.InputError
        If the directory or one of the two JSON files is missing or unreadable.
    """
    run_dir = Path(run_dir)
    if not run_dir.is_dir():
        raise InputError("no such run directory", file=str(run_dir))
    manifest = _read_json(run_dir / "manifest.json")
    summary = _read_json(run_dir / "summary.json")
    _check_shape(run_dir / "manifest.json", manifest, _MANIFEST_SHAPE)
    _check_shape(run_dir / "summary.json", summary, _SUMMARY_SHAPE)
    if manifest.get("complete") is False:
        raise InputError("the run in this directory is not finished; run the study again "
                         "(finished chunks are kept) before writing its report",
                         file=str(run_dir / "manifest.json"))
    tables = {name: _read_parquet(run_dir / f"{name}.parquet", columns)
              for name, columns in (("samples", None), ("equilibria", EQUILIBRIA_COLUMNS),
                                    ("outcomes", None))}
    outcomes = tables["outcomes"]
    if outcomes is not None and not {"sample_id", "status", "independent"} <= set(outcomes.columns):
        raise InputError("outcomes.parquet lacks the columns sample_id, status and independent; "
                         "run the study again to rebuild it", file=str(run_dir / "outcomes.parquet"))
    missing = tuple(f"{name}.parquet" for name, frame in tables.items() if frame is None)
    frames = {name: pd.DataFrame() if frame is None else frame for name, frame in tables.items()}
    return RunData(run_dir=run_dir, manifest=manifest, summary=summary, missing=missing, **frames)
