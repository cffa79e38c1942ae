"""Study texts several test files use, and fixtures that hand them out.

Each text is indented as the tests write it; `helpers.write_study` dedents it. Tests
that build variants at import time (parametrize lists) import the constants; the
others take the fixtures.
"""

from __future__ import annotations

import pytest

# Logistic prey A grazed by G with a linear functional response; one uncertain
# parameter. A scenario of our own, used to exercise input handling (test_cli,
# test_study_input).
GRAZING_STUDY = """
    [model]
    states = ["A", "G"]
    [model.ode]
    A = "r*A*(1 - A/K) - c*A*G"
    G = "c*A*G - d*G"
    [parameters]
    r = 1.0
    K = { dist = "uniform", low = 2, high = 10 }
    c = 0.5
    d = 0.2
"""

# The dimensionless mutual-repression switch u' = a1/(1 + v^2) - u, v' = a2/(1 + u^2) - v
# with Hill exponent 2 (Gardner, Cantor & Collins, Nature 403, 2000); eliminating v gives
# a quintic in u, so numpy.roots is an outside reference for its steady states
# (test_finder, test_completeness).
TOGGLE_MODEL = """
    [model]
    states = ["u", "v"]
    [model.ode]
    u = "a1/(1 + v**2) - u"
    v = "a2/(1 + u**2) - v"
    [parameters]
    a1 = { dist = "uniform", low = 0.5, high = 6 }
    a2 = { dist = "uniform", low = 0.5, high = 6 }
"""


@pytest.fixture
def grazing_study() -> str:
    """The grazing study text (`GRAZING_STUDY`)."""
    return GRAZING_STUDY


@pytest.fixture
def toggle_model() -> str:
    """The two-parameter toggle-switch model text (`TOGGLE_MODEL`)."""
    return TOGGLE_MODEL
