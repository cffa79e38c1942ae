"""Steady states on a switching surface of a piecewise rate are flagged, not classified.

Outside reference (analytic, one state): for x' = piecewise(k (x - K), x < K, -k (x - K))
the only steady state is x = K, where the right-hand side has slope +k on the left and
-k on the right: the point attracts from above and repels from below, so neither
"stable" nor "unstable" read from one Jacobian is true. For
x' = piecewise(k (x - K), x < K, k (2K - x)) the only steady state is x = 2K, inside
the smooth right piece, with slope -k: a stable node.
"""

from __future__ import annotations

import numpy as np

from poise import load_study, run_study
from poise.model import compile_model
from poise.model.switching import on_switching_surface
from helpers import write_study

STUDY = """
title = "kinked rate"
[model]
states = ["x"]
[model.ode]
x = "{rate}"
[parameters]
k = {{ dist = "uniform", low = 0.5, high = 2.0 }}
K = {{ dist = "uniform", low = 1.0, high = 3.0 }}
[sampling]
size = 16
seed = 1
[sensitivity]
method = "none"
"""
KINK = "piecewise(k * (x - K), x < K, -k * (x - K))"
STEP = "piecewise(k * (x - K), x < K, k * (2 * K - x))"


def test_a_steady_state_on_the_surface_is_flagged_with_its_reason(tmp_path):
    study = load_study(write_study(tmp_path, STUDY.format(rate=KINK)))
    result = run_study(study, tmp_path / "run", jobs=1, report=False)
    samples = result.samples
    assert (samples["status"] != "ok").all()      # analytic: x = K in every set, a kink
    assert samples["reason"].str.contains("switching surface").all()


def test_a_steady_state_off_the_surface_is_classified(tmp_path):
    study = load_study(write_study(tmp_path, STUDY.format(rate=STEP)))
    result = run_study(study, tmp_path / "run", jobs=1, report=False)
    assert (result.samples["status"] == "ok").all()
    s = result.samples.set_index("sample_id")
    e = result.equilibria.set_index("sample_id")
    # analytic: x = 2K, eigenvalue -k
    np.testing.assert_allclose(e["x"], 2 * s.loc[e.index, "K"], rtol=1e-9)
    np.testing.assert_allclose(e["eig_re_0"], -s.loc[e.index, "k"], rtol=1e-9)
    assert (e["stability"] == "stable").all()


def test_the_surface_test_does_not_depend_on_units(tmp_path):
    # common practice, no source: the same point in other units is on the surface or not alike
    study = load_study(write_study(tmp_path, STUDY.format(rate=KINK)))
    model = compile_model(study)
    params = np.array([[1.0, 2.0]])[:, [model.varying.index("k"), model.varying.index("K")]]
    for scale in (1e-9, 1.0, 1e9):
        scaled = params.copy()
        scaled[0, model.varying.index("K")] *= scale
        on = on_switching_surface(model.surfaces, np.array([[2.0 * scale]]), scaled)
        near = on_switching_surface(model.surfaces, np.array([[2.0 * scale * (1 + 1e-4)]]), scaled)
        assert on.tolist() == [True] and near.tolist() == [False]
