"""Read a finished run directory into plain data (no computing beyond selection)."""

from __future__ import annotations

import json
from dataclasses import dataclass, field
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
    """

    run_dir: Path
    manifest: dict
    summary: dict
    samples: pd.DataFrame = field(default_factory=pd.DataFrame)
    equilibria: pd.DataFrame = field(default_factory=pd.DataFrame)
    outcomes: pd.DataFrame = field(default_factory=pd.DataFrame)

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

    @property
    def uncertain_parameters(self) -> list[str]:
        """Parameters with a distribution, in manifest order."""
        params = self.manifest.get("parameters", {})
        return [name for name, spec in params.items() if isinstance(spec, dict) and "dist" in spec]

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


def _read_json(path: Path) -> dict:
    try:
        with path.open(encoding="utf-8") as handle:
            return json.load(handle)
    except FileNotFoundError:
        raise InputError(f"{path.name} is missing; is this a finished poise run directory?",
                         file=str(path)) from None
    except json.JSONDecodeError as exc:
        raise InputError(f"{path.name} is not valid JSON ({exc.msg}, line {exc.lineno})",
                         file=str(path)) from None


# The report draws steady states only on the trace-determinant or eigenvalue plane, so
# only these columns are read: memory then stays small for runs with millions of rows.
EQUILIBRIA_COLUMNS = ("sample_id", "label", "class", "stability", "trace", "determinant", "eig_re_0", "eig_im_0")


def _read_parquet(path: Path, columns=None) -> pd.DataFrame:
    if not path.exists():
        return pd.DataFrame()
    if columns is not None:
        import pyarrow.parquet as pq
        present = set(pq.read_schema(path).names)
        columns = [c for c in columns if c in present]
    return pd.read_parquet(path, columns=columns)


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
    return RunData(
        run_dir=run_dir,
        manifest=_read_json(run_dir / "manifest.json"),
        summary=_read_json(run_dir / "summary.json"),
        samples=_read_parquet(run_dir / "samples.parquet"),
        equilibria=_read_parquet(run_dir / "equilibria.parquet", EQUILIBRIA_COLUMNS),
        outcomes=_read_parquet(run_dir / "outcomes.parquet"),
    )
