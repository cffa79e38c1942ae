"""Metamorphic test on curated real models: the same model in other units gives the same
answer in every set (common practice, no source: a physical result does not depend on
its units). Each model from ../shared/data/biomodels/ (curated SBML, CC0) is read as
published, four of its rate constants vary ±20 %, and the study is rewritten as text
with time in 10^k and each state in 10^m (k, m drawn from -8..8); both run end to end
and must give the same steady-state count, labels, classes and claims per set.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from poise import load_study
from helpers import write_study
from rescaling import rescaled_study_text
from test_units import _compare

CORPUS = Path(__file__).resolve().parents[2] / "shared" / "data" / "biomodels"
# Left out: 019 (93 species: minutes per run), 050 and the others whose only positive
# constants are compartment sizes a law depends on, and 064 (Teusink glycolysis): Newton
# misses steady states there in some sets in either units (its completeness check
# reports it), so the two runs can differ by a missed saddle, not by a units error.
# four rate constants per model that its ODEs use (compartment sizes left alone: a
# conservation law may depend on them)
VARIED = {
    "BIOMD0000000005": ["Reaction1_k6", "Reaction2_k8notP", "Reaction3_k9", "Reaction4_k3"],
    "BIOMD0000000006": ["kappa", "k6", "k4", "k4prime"],
    "BIOMD0000000009": ["r1a_a1", "r1a_d1", "r1b_k2", "r2a_a2"],
    "BIOMD0000000016": ["rM_Vs"],
    "BIOMD0000000020": ["g_Na", "g_K", "g_L"],
    "BIOMD0000000026": ["k1", "k_1", "k2"],
    "BIOMD0000000054": ["P", "J", "W2", "W3"],
    "BIOMD0000000065": ["L_e", "mu", "gamma_M", "gamma_B"],
    "BIOMD0000000068": ["Phi", "Cys", "AdoMet"],
    "BIOMD0000000258": ["r31", "r24", "Chi14"],
    "BIOMD0000000317": ["r1_T1", "r2_a", "r3_T2"],
}
CLAIM = '\n[[claims]]\nname = "one stable"\nholds = "count(stable) == 1"\n'


def _study_text(model: str, tmp_path: Path) -> str:
    stub = load_study(write_study(tmp_path, f'[model]\nsbml = "{CORPUS / (model + ".xml")}"\n', "stub.toml"))
    lines = ["[model]", f'sbml = "{CORPUS / (model + ".xml")}"', "[parameters]"]
    for name in VARIED[model]:
        value = stub.fixed[name]
        lines.append(f'{name} = {{ dist = "uniform", low = {0.8 * value!r}, high = {1.2 * value!r} }}')
    lines += ["[sampling]", "size = 32", 'design = "random"', "seed = 1", "[sensitivity]", 'method = "none"']
    return "\n".join(lines) + "\n" + CLAIM


@pytest.mark.slow
@pytest.mark.skipif(not CORPUS.is_dir(), reason="the curated corpus is not available")
@pytest.mark.parametrize("model", list(VARIED))
def test_curated_models_give_the_same_answer_in_any_units(tmp_path, model):
    study = load_study(write_study(tmp_path, _study_text(model, tmp_path)))
    rng = np.random.default_rng(int(model[-3:]))
    time_unit = 10.0 ** int(rng.integers(-8, 9))
    units = {s: 10.0 ** int(rng.integers(-8, 9)) for s in study.states}
    rescaled = load_study(write_study(tmp_path, rescaled_study_text(study, units, time_unit), "rescaled.toml"))
    _compare(study, rescaled, units, time_unit, 32, tmp_path)
