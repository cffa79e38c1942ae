"""The validated study as plain data.

`load_study` (in `poise.study.loader`) builds a `Study`; every later stage reads it
and nothing writes to it.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import sympy

from poise.sampling.distributions import Distribution
from poise.study.claims import Claim


@dataclass(frozen=True)
class SamplingSettings:
    size: int = 1024
    design: str = "sobol"
    seed: int = 1


@dataclass(frozen=True)
class SensitivitySettings:
    method: str = "sobol"
    second_order: bool = False
    resamples: int = 500


@dataclass(frozen=True)
class SolverSettings:
    method: str = "auto"
    starts: int = 0           # 0: chosen from the number of reduced states
    deflation_rounds: int = 2
    max_iterations: int = 60
    check_sets: int = -1      # completeness check: sets re-solved; -1 chosen by budget, 0 off


@dataclass(frozen=True)
class RunSettings:
    jobs: int = 0
    chunk_size: int = 2048


@dataclass(frozen=True)
class LongRunSettings:
    """The ``[long_run]`` table: simulate where trajectories go (README, Long-run behaviour).

    share : fraction of the parameter sets simulated (1: all); a subsample is chosen
        by a fixed rule from the sample ids (whole Saltelli groups), never by chunk.
    box : state -> (low, high): basin starts are drawn uniformly from this box; states
        not listed start at their initial value.
    box_starts : starts per set drawn from the box (0: no basin fractions).
    max_steps : most integration steps per trajectory (the budget).
    horizon : time horizon, in multiples of each set's slowest time scale.
    """

    share: float = 1.0
    box: dict[str, tuple[float, float]] = field(default_factory=dict)
    box_starts: int = 0
    max_steps: int = 20_000
    horizon: float = 100.0


@dataclass(frozen=True)
class Study:
    """A study file, validated.

    Expressions are sympy objects with `model.let` names already inlined;
    `ode_text` keeps what the user wrote, for reports.
    """

    path: Path
    text: str
    title: str
    states: tuple[str, ...]
    ode: dict[str, sympy.Expr]
    ode_text: dict[str, str]
    domain: dict[str, tuple[float, float]]
    conserved: dict[str, sympy.Expr]
    fixed: dict[str, float]
    uncertain: dict[str, Distribution]
    claims: tuple[Claim, ...] = ()
    sampling: SamplingSettings = SamplingSettings()
    sensitivity: SensitivitySettings = SensitivitySettings()
    solver: SolverSettings = SolverSettings()
    run: RunSettings = RunSettings()
    warnings: tuple[str, ...] = ()
    # Initial values (SBML, or [model.initial]); units and compartment sizes (SBML only).
    initial: dict[str, float] = field(default_factory=dict)
    units: dict[str, str] = field(default_factory=dict)
    size: dict[str, float] = field(default_factory=dict)
    long_run: LongRunSettings | None = None     # None: no simulation ([long_run] absent)

    @property
    def parameters(self) -> tuple[str, ...]:
        """Every parameter name: fixed first, then uncertain, each in file order."""
        return tuple(self.fixed) + tuple(self.uncertain)

    def nominal_values(self) -> dict[str, float]:
        """Every parameter at its fixed or nominal value."""
        values = dict(self.fixed)
        values.update({name: dist.nominal for name, dist in self.uncertain.items()})
        return values
