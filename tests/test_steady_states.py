"""Every steady state at one parameter point, against published worked examples,
closed forms and sympy."""

from __future__ import annotations

import math

import numpy as np
import pytest
import sympy

from poise.inspect import inspect_point
from poise.study.loader import load_study

from helpers import write_study


def steady_states(tmp_path, text, **overrides):
    study = load_study(write_study(tmp_path, text))
    result = inspect_point(study, overrides)
    assert result["status"] == "ok"
    return result["equilibria"]


def by_point(equilibria, states):
    return {tuple(round(eq["state"][s], 6) for s in states): eq for eq in equilibria}


COMPETITION = """
    [model]
    states = ["x", "y"]
    [model.ode]
    x = "x*(3 - x - 2*y)"
    y = "y*(2 - x - y)"
    [parameters]
"""


def test_competition_model_worked_example(tmp_path):
    # source: Strogatz, Nonlinear Dynamics and Chaos (1994), §6.4 (rabbits and sheep):
    # four fixed points, (0,0) unstable node, (0,2) and (3,0) stable nodes, (1,1) saddle.
    found = by_point(steady_states(tmp_path, COMPETITION), ("x", "y"))
    assert set(found) == {(0, 0), (0, 2), (3, 0), (1, 1)}
    assert found[(0, 0)]["class"] == "unstable node"
    assert found[(0, 2)]["class"] == "stable node"
    assert found[(3, 0)]["class"] == "stable node"
    assert found[(1, 1)]["class"] == "saddle"
    # Strogatz gives the eigenvalues at (1,1) as -1 ± sqrt(2).
    eig = sorted(re for re, _ in found[(1, 1)]["eigenvalues"])
    assert eig == pytest.approx([-1 - math.sqrt(2), -1 + math.sqrt(2)], rel=1e-9)


def test_predator_prey_saddle_and_center(tmp_path):
    # common practice, no source: x' = x - xy, y' = xy - y has a saddle at the origin and
    # a linear center at (1, 1) (Jacobian [[0, -1], [1, 0]]).
    text = """
        [model]
        states = ["x", "y"]
        [model.ode]
        x = "x - x*y"
        y = "x*y - y"
        [parameters]
    """
    found = by_point(steady_states(tmp_path, text), ("x", "y"))
    assert set(found) == {(0, 0), (1, 1)}
    assert found[(0, 0)]["class"] == "saddle"
    assert found[(1, 1)]["class"] == "center"
    assert found[(1, 1)]["stability"] == "undetermined"
    assert found[(1, 1)]["trace"] == pytest.approx(0, abs=1e-12)
    assert found[(1, 1)]["determinant"] == pytest.approx(1)


LORENZ = """
    [model]
    states = ["x", "y", "z"]
    [model.ode]
    x = "sigma*(y - x)"
    y = "x*(r - z) - y"
    z = "x*y - b*z"
    [model.domain]
    x = [-inf, inf]
    y = [-inf, inf]
    z = [-inf, inf]
    [parameters]
    sigma = 10
    r = 28
    b = 2.6666666666666665
"""


@pytest.mark.parametrize("r", [0.5, 0.9, 2.0, 10.0, 20.0, 24.0, 25.0, 28.0, 60.0])
def test_lorenz_steady_states(tmp_path, r):
    # source: Lorenz (1963), J. Atmos. Sci. 20:130; Strogatz (1994) §9.2: the origin is
    # stable for r < 1 and a saddle for r > 1; C± = (±sqrt(b(r-1)), ±sqrt(b(r-1)), r-1)
    # are stable for 1 < r < r_H = sigma(sigma+b+3)/(sigma-b-1) ≈ 24.74, saddle-foci above.
    sigma, b = 10.0, 8.0 / 3.0
    r_hopf = sigma * (sigma + b + 3) / (sigma - b - 1)
    assert r_hopf == pytest.approx(24.74, abs=0.01)
    equilibria = steady_states(tmp_path, LORENZ, r=r)
    found = by_point(equilibria, ("x", "y", "z"))
    origin = found[(0, 0, 0)]
    if r < 1:
        assert len(equilibria) == 1
        assert origin["class"] == "stable node"
        return
    assert origin["class"] == "saddle"
    c = math.sqrt(b * (r - 1))
    assert len(equilibria) == 3
    for sign in (1, -1):
        eq = found[(round(sign * c, 6), round(sign * c, 6), round(r - 1, 6))]
        expected = "stable" if r < r_hopf else "unstable"
        assert eq["stability"] == expected
        if r > r_hopf:
            assert eq["class"] == "saddle-focus"


def test_steady_states_agree_with_sympy_solve(tmp_path):
    # reference library: sympy.solve on small polynomial models, at random parameter points.
    rng = np.random.default_rng(3)
    text = """
        [model]
        states = ["x", "y"]
        [model.ode]
        x = "a*x - x**2 - c*x*y"
        y = "b*y - y**2 + c*x*y - d"
        [model.domain]
        x = [-inf, inf]
        y = [-inf, inf]
        [parameters]
        a = 1.0
        b = 1.0
        c = 0.5
        d = 0.1
    """
    x, y = sympy.symbols("x y")
    for _ in range(6):
        a, b, c, d = rng.uniform(0.2, 2.0), rng.uniform(0.5, 3.0), rng.uniform(-1, 1), rng.uniform(0, 0.3)
        a, b, c, d = (sympy.Rational(round(v * 100), 100) for v in (a, b, c, d))
        equations = [a * x - x**2 - c * x * y, b * y - y**2 + c * x * y - d]
        reference = set()
        for sol in sympy.solve(equations, [x, y], dict=True):
            vx, vy = complex(sol[x].evalf()), complex(sol[y].evalf())
            if abs(vx.imag) < 1e-9 and abs(vy.imag) < 1e-9:
                reference.add((round(vx.real, 5), round(vy.real, 5)))
        found = steady_states(tmp_path, text, a=float(a), b=float(b), c=float(c), d=float(d))
        mine = {(round(eq["state"]["x"], 5), round(eq["state"]["y"], 5)) for eq in found}
        assert mine == reference, (a, b, c, d)


ENZYME = """
    [model]
    states = ["S", "E", "C", "P"]
    [model.ode]
    S = "inflow - k_on*E*S + k_off*C"
    E = "-k_on*E*S + (k_off + k_cat)*C"
    C = "k_on*E*S - (k_off + k_cat)*C"
    P = "k_cat*C - out*P"
    {conserved}
    [parameters]
    inflow = 0.5
    k_on = 2.0
    k_off = 1.0
    k_cat = 1.5
    out = 0.3
    {total}
"""


def test_michaelis_menten_network_conserves_enzyme(tmp_path):
    # source: law of mass action for E + S <-> C -> E + P (Michaelis & Menten 1913;
    # Briggs & Haldane 1925): d(E + C)/dt = 0, so E + C = E_total is conserved.
    from poise.model.conservation import find_laws
    text = ENZYME.format(conserved='[model.conserved]\nE_total = "E + C"', total="E_total = 1.0")
    study = load_study(write_study(tmp_path, text))
    laws = find_laws(study.ode, study.states)
    assert laws == [{"E": 1, "C": 1}]
    equilibria = inspect_point(study)["equilibria"]
    # The unique positive steady state: S inflow balances k_cat*C, so C = inflow/k_cat,
    # E = E_total - C, S = (k_off + k_cat) C / (k_on E), P = k_cat C / out (closed form).
    assert len(equilibria) == 1
    eq = equilibria[0]
    c = 0.5 / 1.5
    e = 1.0 - c
    assert eq["state"]["C"] == pytest.approx(c, rel=1e-9)
    assert eq["state"]["E"] == pytest.approx(e, rel=1e-9)
    assert eq["state"]["S"] == pytest.approx((1.0 + 1.5) * c / (2.0 * e), rel=1e-9)
    assert eq["state"]["P"] == pytest.approx(1.5 * c / 0.3, rel=1e-9)
    # Three eigenvalues on the conservation class, none a structural zero.
    assert len(eq["eigenvalues"]) == 3
    assert min(abs(re) for re, _ in eq["eigenvalues"]) > 1e-6
    assert eq["stability"] == "stable"
    assert eq["class"] != "non-hyperbolic"


def test_missing_conservation_law_suggests_the_line(tmp_path):
    from helpers import run_cli
    path = write_study(tmp_path, ENZYME.format(conserved="", total=""))
    status, out, err = run_cli("check", str(path))
    assert status == 2
    assert "[model.conserved]" in err and '"E + C"' in err
    assert "Traceback" not in err


CIRCLE = """
    [model]
    states = ["x", "y"]
    [model.ode]
    x = "x*(x**2 + y**2 - R)"
    y = "y*(x**2 + y**2 - R)"
    [model.domain]
    x = [-inf, inf]
    y = [-inf, inf]
    [parameters]
    R = 2.0
    [solver]
    method = "newton"
"""


@pytest.mark.parametrize("method", ["newton", "homotopy"])
def test_steady_states_on_a_continuum_are_reported_as_such(tmp_path, method):
    # closed form: f = (x, y)·(x² + y² − R) vanishes on the whole circle x² + y² = R
    # (a curve of steady states) and at the isolated origin. Homotopy paths land on
    # complex points of the circle; such a set is handed to Newton, which reports it.
    equilibria = steady_states(tmp_path, CIRCLE.replace('"newton"', f'"{method}"'))
    origin = [eq for eq in equilibria if eq["state"] == {"x": 0.0, "y": 0.0}]
    assert len(origin) == 1 and not origin[0]["continuum"]
    assert origin[0]["class"] == "stable node"   # J = -R·I at the origin
    ring = [eq for eq in equilibria if eq is not origin[0]]
    assert ring and all(eq["continuum"] for eq in ring)
    for eq in ring:
        assert eq["state"]["x"] ** 2 + eq["state"]["y"] ** 2 == pytest.approx(2.0, rel=1e-9)
        assert eq["class"] == "non-hyperbolic"


def test_an_isolated_fold_is_not_a_continuum(tmp_path):
    # source: saddle-node bifurcation normal form x' = r + x² at r = 0 (Strogatz 1994 §3.1):
    # x = 0 is an isolated steady state with a zero eigenvalue.
    text = """
        [model]
        states = ["x"]
        [model.ode]
        x = "r + x**2"
        [model.domain]
        x = [-inf, inf]
        [parameters]
        r = 0.0
        [solver]
        method = "newton"
    """
    equilibria = steady_states(tmp_path, text)
    assert len(equilibria) == 1
    assert equilibria[0]["state"]["x"] == pytest.approx(0.0, abs=1e-6)
    assert equilibria[0]["class"] == "non-hyperbolic"
    assert not equilibria[0]["continuum"]


def test_a_model_that_vanishes_everywhere_reports_a_continuum(tmp_path):
    # closed form: x' = r x (y - 1), y' = r y (x - 2) has the isolated steady states (0, 0)
    # and (2, 1) for r != 0, and every point is a steady state for r = 0.
    text = """
        [model]
        states = ["x", "y"]
        [model.ode]
        x = "r*x*(y - 1)"
        y = "r*y*(x - 2)"
        [parameters]
        r = 1.0
        [solver]
        method = "newton"
    """
    isolated = steady_states(tmp_path, text)
    assert {(eq["state"]["x"], eq["state"]["y"]) for eq in isolated} == {(0.0, 0.0), (2.0, 1.0)}
    assert not any(eq["continuum"] for eq in isolated)
    everywhere = steady_states(tmp_path, text, r=0.0)
    assert everywhere and all(eq["continuum"] for eq in everywhere)
