"""Long-run simulation of curated oscillator models, read through poise's SBML import.

Reference: scipy.integrate.solve_ivp (LSODA, rtol 1e-10) from the model's own initial
state. Where that run oscillates, poise must find the periodic orbit from the same
start, and its period must agree within 1 %. The models (BioModels curated branch,
CC0, in the shared corpus) at their published parameter values:

- BIOMD0000000005: Tyson (1991) cell cycle, 6 species, one conserved total, rates six
  decades apart (stiff);
- BIOMD0000000006: Tyson (1991) cell cycle, two-variable reduction;
- BIOMD0000000016: Goldbeter (1995) circadian clock (PER), 5 species.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_ivp

import poise
from poise.equilibria.finder import find_steady_states
from poise.longrun import CYCLES, long_run
from poise.model import compile_model


def _biomodels() -> Path | None:
    here = Path(__file__).resolve()
    for candidate in (here.parents[2] / "shared", here.parents[1].parent / "shared", here.parents[1] / "shared"):
        folder = candidate / "data" / "biomodels"
        if folder.is_dir():
            return folder
    return None


FOLDER = _biomodels()


def reference_period(kernels, x0, horizon):
    """Period of the late oscillation of a tight solve_ivp run, or None if it does not
    oscillate (upward crossings of the middle of the most varying state's range over the
    last half, their intervals equal within 1e-4)."""
    P = np.zeros((1, 0))
    sol = solve_ivp(lambda t, x: kernels.rhs(x[None, :], P)[0], (0, horizon), x0, method="LSODA",
                    rtol=1e-10, atol=1e-13, jac=lambda t, x: kernels.jacobian(x[None, :], P)[0],
                    dense_output=True)
    assert sol.status == 0
    t = np.linspace(horizon / 2, horizon, 400_001)
    y = sol.sol(t)
    size = np.abs(y).max(axis=1)
    j = int(np.argmax(np.ptp(y, axis=1) / np.where(size > 0, size, 1.0)))
    if np.ptp(y[j]) <= 1e-6 * size[j]:
        return None
    level = 0.5 * (y[j].max() + y[j].min())
    up = np.flatnonzero((y[j][:-1] < level) & (y[j][1:] >= level))
    times = t[up] + (level - y[j][up]) / (y[j][up + 1] - y[j][up]) * (t[1] - t[0])
    periods = np.diff(times)
    if periods.size < 3 or np.ptp(periods[-3:]) > 1e-4 * periods[-1]:
        return None
    return periods[-1]


@pytest.mark.slow
@pytest.mark.skipif(FOLDER is None, reason="shared biomodels corpus not found")
@pytest.mark.parametrize("model_id, horizon", [("BIOMD0000000005", 500.0), ("BIOMD0000000006", 500.0),
                                               ("BIOMD0000000016", 400.0)])
def test_curated_oscillators_period_agrees_with_solve_ivp(tmp_path, model_id, horizon):
    study_file = tmp_path / "study.toml"
    study_file.write_text(f'title = "{model_id}"\n[model]\nsbml = "{FOLDER / (model_id + ".xml")}"\n',
                          encoding="utf-8")
    study = poise.load_study(study_file)
    model = compile_model(study)
    kernels = model.kernels
    params = np.zeros((1, 0))
    found = find_steady_states(kernels, params, model.domain_low, model.domain_high)
    x0 = np.array([study.initial[s] for s in study.states])[list(kernels.free_columns)]
    run = long_run(kernels, params, found.owner, found.free, initial=x0,
                   domain_low=model.domain_low, domain_high=model.domain_high)
    tr = run.trajectories
    expected = reference_period(kernels, x0, horizon)
    # all three oscillate at their published values (reference run above)
    assert expected is not None
    start = np.flatnonzero(tr.starts.kind == 0)
    assert tr.outcome[start[0]] == CYCLES
    # reference: solve_ivp (LSODA, rtol 1e-10); the issue asks for 1 %, we hold 1e-4
    assert tr.period[start[0]] == pytest.approx(expected, rel=1e-4)
    # every start that found an orbit found this one
    cycled = tr.outcome == CYCLES
    assert np.allclose(tr.period[cycled], expected, rtol=1e-4)
