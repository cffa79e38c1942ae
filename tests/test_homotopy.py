"""Homotopy continuation for polynomial and rational steady-state systems.

Each mathematical check compares with a source outside poise: numpy.roots (companion
matrix eigenvalues) and sympy (resultants, exact real roots) as reference libraries,
hand elimination, or a closed form from the literature.
"""

from __future__ import annotations

import numpy as np
import pytest
import sympy

from poise.equilibria import homotopy
from poise.equilibria.homotopy import HomotopyResult, generic_root_count, solve_batch
from poise.equilibria.polynomial import PolynomialSystem, polynomial_form

x, y, z, u, v = sympy.symbols("x y z u v", real=True)
a, b, c, a1, a2, k, K, n = sympy.symbols("a b c a1 a2 k K n", real=True)


def _real_roots(coefficients, imag_tol=1e-7):
    """Real roots of a univariate polynomial (highest power first) by numpy.roots,
    plus a flag for near-degenerate cases (near-double roots), where the number of
    real roots is ill-posed in floating point and the point is skipped."""
    roots = np.roots(coefficients)
    size = 1.0 + np.abs(roots)
    real = np.abs(roots.imag) <= imag_tol * size
    near_real_pair = (~real & (np.abs(roots.imag) <= 1e-4 * size)).any()
    r = np.sort(roots[real].real)
    close = r.size > 1 and np.min(np.diff(r)) < 1e-4 * (1.0 + np.abs(r).max())
    return r, bool(near_real_pair or close)


def _found(result: HomotopyResult, i: int) -> np.ndarray:
    return result.roots[i, :result.count[i]]


# --------------------------------------------------------------------- one-state cubic


def test_cubic_matches_numpy_roots_at_500_points():
    # x' = a + b x - x^3: one or three real steady states
    system = polynomial_form([a + b * x - x**3], [x], [a, b])
    rng = np.random.default_rng(11)
    params = rng.uniform(-2.0, 2.0, size=(500, 2))
    result = solve_batch(system, params)
    assert (result.status == 0).all()
    checked = 0
    for i, (av, bv) in enumerate(params):
        # discriminant of x^3 - b x - a; near zero the real-root count is ill-posed
        if abs(4 * bv**3 - 27 * av**2) < 1e-6:
            continue
        reference, _ = _real_roots([-1.0, 0.0, bv, av])  # reference library: numpy.roots
        got = _found(result, i)[:, 0]
        assert got.size == reference.size, (av, bv)
        np.testing.assert_allclose(got, reference, rtol=1e-9, atol=1e-9)
        checked += 1
    assert checked > 480
    assert set(np.unique(result.count)) == {1, 3}


def test_cubic_matches_sympy_real_roots_exactly_at_rational_points():
    system = polynomial_form([a + b * x - x**3], [x], [a, b])
    points = [(sympy.Rational(1, 3), sympy.Rational(2)), (sympy.Rational(-7, 5), sympy.Rational(3, 2)),
              (sympy.Rational(0), sympy.Rational(1)), (sympy.Rational(5, 2), sympy.Rational(-1, 4))]
    result = solve_batch(system, np.array(points, dtype=float))
    for i, (av, bv) in enumerate(points):
        # reference library: sympy.real_roots (exact isolation)
        exact = [float(r) for r in sympy.real_roots(sympy.Poly(av + bv * x - x**3, x))]
        np.testing.assert_allclose(_found(result, i)[:, 0], sorted(exact), rtol=1e-12, atol=1e-14)


# ------------------------------------------------------------ two coupled cubics (<= 9)


def _resultant_coefficients(f1, f2, eliminate, keep):
    """Coefficients (in the parameters a1, a2, c) of the resultant, highest power first."""
    res = sympy.Poly(sympy.resultant(f1, f2, eliminate), keep)  # reference library: sympy
    return sympy.lambdify([a1, a2, c], res.all_coeffs(), "numpy")


@pytest.mark.parametrize("with_hubs", [False, True])
def test_coupled_cubics_match_sympy_resultants_at_500_points(with_hubs):
    f1 = a1 * x - x**3 + c * y
    f2 = a2 * y - y**3 + c * x
    system = polynomial_form([f1, f2], [x, y], [a1, a2, c])
    assert system.path_count == 9
    in_x = _resultant_coefficients(f1, f2, y, x)   # eliminates y: polynomial in x
    in_y = _resultant_coefficients(f1, f2, x, y)   # eliminates x: polynomial in y
    rng = np.random.default_rng(5)
    size = 500
    coupling = rng.uniform(0.02, 0.6, size) * rng.choice([-1.0, 1.0], size)
    params = np.column_stack([rng.uniform(0.2, 2.0, size), rng.uniform(0.2, 2.0, size), coupling])
    result = solve_batch(system, params, hubs=params[:64][::-1] * 1.01 if with_hubs else None)
    assert (result.status == 0).all()
    checked = 0
    for i, p in enumerate(params):
        xs, bad_x = _real_roots(np.array(in_x(*p), dtype=float))
        ys, bad_y = _real_roots(np.array(in_y(*p), dtype=float))
        if bad_x or bad_y:  # near-double roots: tiny discriminant, count ill-posed
            continue
        got = _found(result, i)
        # f1 is linear in y (c != 0), so real x-roots and real roots correspond one to one
        assert len(got) == len(xs) == len(ys), p
        np.testing.assert_allclose(np.sort(got[:, 0]), xs, rtol=1e-7, atol=1e-9)
        np.testing.assert_allclose(np.sort(got[:, 1]), ys, rtol=1e-7, atol=1e-9)
        checked += 1
    assert checked > 450
    assert result.count.max() == 9  # the nine-steady-state regime is sampled


def test_general_quadratic_pair_matches_sympy_resultant():
    # two dense quadratics in (x, y) whose 12 coefficients are the parameters:
    # neither equation is linear in a variable; 0, 2 or 4 real roots
    p = sympy.symbols("p0:12", real=True)
    monomials = [1, x, y, x**2, x * y, y**2]
    g1 = sum(pi * m for pi, m in zip(p[:6], monomials))
    g2 = sum(pi * m for pi, m in zip(p[6:], monomials))
    system = polynomial_form([g1, g2], [x, y], p)
    res = sympy.Poly(sympy.resultant(g1, g2, y), x)  # reference library: sympy.resultant
    coefficients = sympy.lambdify([p], res.all_coeffs(), "numpy")
    rng = np.random.default_rng(8)
    params = rng.normal(size=(200, 12))
    result = solve_batch(system, params)
    checked = 0
    for i, q in enumerate(params):
        xs, bad = _real_roots(np.array(coefficients(q), dtype=float))
        if bad:
            continue
        got = _found(result, i)
        assert len(got) == len(xs), q
        np.testing.assert_allclose(np.sort(got[:, 0]), xs, rtol=1e-7, atol=1e-9)
        # back-substitution: each y is a common root of g1(x, .) and g2(x, .)
        for xv, yv in got:
            for g in (g1, g2):
                value = float(g.subs({x: xv, y: yv, **dict(zip(p, q))}))
                assert abs(value) < 1e-8 * (1 + np.abs(q).sum() * (1 + xv**2 + yv**2))
        checked += 1
    assert checked > 180
    assert {0, 2, 4} <= set(np.unique(result.count))


# ----------------------------------------------------------- Hill-type toggle switch


@pytest.mark.parametrize("with_hubs", [False, True])
@pytest.mark.parametrize("hill, size", [(2, 200), (3, 300)])
def test_toggle_switch_matches_eliminated_polynomial(hill, size, with_hubs):
    # u' = a1/(1 + v^h) - u, v' = a2/(1 + u^h) - v. Eliminating v = a2/(1 + u^h) and
    # clearing denominators gives a1 (1+u^h)^h - u ((1+u^h)^h + a2^h) = 0 (degree h^2+1).
    system = polynomial_form([a1 / (1 + v**hill) - u, a2 / (1 + u**hill) - v], [u, v], [a1, a2])
    assert system is not None
    rng = np.random.default_rng(hill)
    params = rng.uniform(0.5, 5.0, size=(size, 2))
    hubs = rng.uniform(0.5, 5.0, size=(64, 2)) if with_hubs else None
    result = solve_batch(system, params, hubs=hubs)
    assert (result.status == 0).all()
    P = np.polynomial.Polynomial
    checked = 0
    for i, (av1, av2) in enumerate(params):
        q = P([1.0] + [0.0] * (hill - 1) + [1.0])  # 1 + u^h
        eliminated = av1 * q**hill - P([0.0, 1.0]) * (q**hill + av2**hill)
        us, bad = _real_roots(eliminated.coef[::-1])  # reference: numpy.roots (companion matrix)
        if bad:
            continue
        got = _found(result, i)
        assert len(got) == len(us), (av1, av2)
        np.testing.assert_allclose(got[:, 0], us, rtol=1e-8, atol=1e-10)
        np.testing.assert_allclose(got[:, 1], av2 / (1 + us**hill), rtol=1e-8, atol=1e-10)
        checked += 1
    assert checked > 0.95 * size
    assert result.count.max() >= 3  # bistable parameter sets are sampled


def test_toggle_switch_at_extreme_parameter_scales():
    # steady states from 1e-14 to 1e7 within one set, and one within 1e-9 of a pole of
    # 1/(1 + v^3); reference: numpy.roots on the eliminated polynomial (as above)
    system = polynomial_form([a1 / (1 + v**3) - u, a2 / (1 + u**3) - v], [u, v], [a1, a2])
    params = np.array([[1e5, 2.0], [1e-4, 1e-4], [1e3, 1e3], [1e-8, 5.0], [1e7, 1e7]])
    result = solve_batch(system, params)
    P = np.polynomial.Polynomial
    q = P([1.0, 0.0, 0.0, 1.0])
    for i, (av1, av2) in enumerate(params):
        us, _ = _real_roots((av1 * q**3 - P([0.0, 1.0]) * (q**3 + av2**3)).coef[::-1])
        got = _found(result, i)
        assert len(got) == len(us), (av1, av2)
        np.testing.assert_allclose(got[:, 0], us, rtol=1e-6, atol=1e-12)


def test_grazing_model_with_hubs_matches_closed_form_including_a_huge_root():
    # kelp k' = r k (1 - k/K) - g k u/(h + k), urchins u' = e g k u/(h + k) - m u.
    # Analytic roots of the cleared system (easily re-derived by hand): (0, 0), (K, 0),
    # and k* = h m/(e g - m), u* = r (1 - k*/K)(h + k*)/g; k = -h is a pole, discarded.
    # The last set puts e g within 1e-4 of m, so k* ~ 1e4 h, u* ~ 1e8: a huge root beside small
    # ones (the duplicate merge must not swallow (0, 0) and (K, 0)).
    r, K, g, h, e, m, k = sympy.symbols("r K g h e m k", real=True)
    system = polynomial_form([r * k * (1 - k / K) - g * k * u / (h + k), e * g * k * u / (h + k) - m * u],
                             [k, u], [r, K, g, h, e, m])
    rng = np.random.default_rng(21)

    def draw(size):
        return np.column_stack([rng.uniform(0.5, 2, size), rng.uniform(2, 10, size), rng.uniform(0.2, 1, size),
                                rng.uniform(0.5, 3, size), rng.uniform(0.1, 0.5, size), rng.uniform(0.02, 0.3, size)])

    params = draw(300)
    params[-1, 4:] = [0.2, 0.2 * params[-1, 2] / (1 + 1e-4)]
    result = solve_batch(system, params, hubs=draw(64))
    assert (result.status == 0).all()
    for i, (rv, Kv, gv, hv, ev, mv) in enumerate(params):
        ks = hv * mv / (ev * gv - mv)
        expected = [(0.0, 0.0), (Kv, 0.0), (ks, rv * (1 - ks / Kv) * (hv + ks) / gv)]
        expected = np.array(sorted(expected))
        got = _found(result, i)
        assert len(got) == 3, params[i]
        np.testing.assert_allclose(got, expected, rtol=1e-7, atol=1e-9)
    assert np.abs(_found(result, len(params) - 1)).max() > 1e7


# ----------------------------------------------------------------------------- Lorenz


def test_lorenz_steady_states_match_closed_form():
    # source: Lorenz (1963), "Deterministic nonperiodic flow", J. Atmos. Sci. 20
    # (citation details from memory) -- steady states (0,0,0) and, for rho > 1,
    # (+-sqrt(beta (rho-1)), +-sqrt(beta (rho-1)), rho - 1); analytic, easily re-derived
    sigma, rho, beta = sympy.symbols("sigma rho beta", real=True)
    system = polynomial_form([sigma * (y - x), x * (rho - z) - y, x * y - beta * z],
                             [x, y, z], [sigma, rho, beta])
    assert system.path_count == 4  # one total-degree path diverges
    rng = np.random.default_rng(1963)
    above = np.column_stack([rng.uniform(1, 20, 200), rng.uniform(1.05, 50, 200), rng.uniform(0.3, 5, 200)])
    below = np.column_stack([rng.uniform(1, 20, 50), rng.uniform(0.05, 0.95, 50), rng.uniform(0.3, 5, 50)])
    params = np.vstack([above, below])
    result = solve_batch(system, params)
    assert (result.status == 0).all()
    for i, (s, r, bt) in enumerate(params):
        expected = [[0.0, 0.0, 0.0]]
        if r > 1:
            w = np.sqrt(bt * (r - 1))
            expected = [[-w, -w, r - 1], [0.0, 0.0, 0.0], [w, w, r - 1]]
        np.testing.assert_allclose(_found(result, i), expected, rtol=1e-9, atol=1e-9)


# ------------------------------------------------------------ detection and clearing


def test_rational_terms_with_integer_powers_qualify():
    # Michaelis-Menten uptake: cleared by hand, V x - k x (K + x) over the factor K + x
    mm = polynomial_form([a * x / (K + x) - k * x], [x], [a, K, k])
    assert mm is not None
    assert sympy.expand(mm.numerators[0] - (a * x - k * x * (K + x))) == 0
    assert mm.denominators == (K + x,)
    assert mm.degrees == (2,) and mm.path_count == 2
    # Hill function with integer exponent; 2.0 written as a float is still an integer power
    hill = polynomial_form([a * x**3 / (K**3 + x**3) - k * x + b], [x], [a, K, k, b])
    assert hill is not None and hill.degrees == (4,)
    as_float = polynomial_form([a * x**2.0 / (1 + x**2.0) - x], [x], [a])
    assert as_float is not None and as_float.degrees == (3,)
    # coefficients may depend on parameters in any way
    assert polynomial_form([sympy.exp(k) * x - sympy.sqrt(K) * x**2], [x], [k, K]) is not None


@pytest.mark.parametrize("expr", [sympy.exp(x) - a, sympy.sqrt(x) - a, x**n - a, x**sympy.Rational(1, 2) - a,
                                  sympy.Abs(x) - a, a / (1 + sympy.exp(-x)) - x])
def test_non_polynomial_systems_are_refused(expr):
    # by definition: none of these is a rational function of x
    assert polynomial_form([expr], [x], [a, n]) is None


def test_polynomial_form_rejects_malformed_input():
    with pytest.raises(ValueError):
        polynomial_form([x - a], [x, y], [a])
    with pytest.raises(ValueError):
        polynomial_form([x - a * z], [x], [a])
    # an equation that vanishes identically has no isolated roots
    assert polynomial_form([x - x, y - 1], [x, y], []) is None


def test_roots_at_cleared_poles_are_discarded():
    # y/(x - 1) = 0, x + y - 1 = 0: the cleared system y = 0, x + y = 1 has the single
    # root (1, 0), where x - 1 = 0 -- a pole, not a steady state (hand calculation).
    at_pole = polynomial_form([y / (x - 1), x + y - 1], [x, y], [])
    result = solve_batch(at_pole, np.zeros((1, 0)))
    assert result.count[0] == 0 and result.status[0] == 0
    # with the pole moved to x = 2 the same root is genuine
    away = polynomial_form([y / (x - 2), x + y - 1], [x, y], [])
    result = solve_batch(away, np.zeros((1, 0)))
    np.testing.assert_allclose(_found(result, 0), [[1.0, 0.0]], atol=1e-12)


def test_michaelis_menten_root_at_pole_for_zero_half_saturation():
    # a - k x/(K + x) = 0 gives x = a K/(k - a) (hand calculation); with K = 0 the
    # cleared root x = 0 is the pole of x/(K + x), and a != k means no steady state
    system = polynomial_form([a - k * x / (K + x)], [x], [a, k, K])
    params = np.array([[1.0, 3.0, 2.0], [1.0, 3.0, 0.0]])
    result = solve_batch(system, params)
    np.testing.assert_allclose(_found(result, 0)[:, 0], [1.0 * 2.0 / (3.0 - 1.0)])
    assert result.count[1] == 0


# ------------------------------------------------------- singular and diverging paths


def test_structural_double_root_is_found():
    # x^2 (a - x) = 0: roots 0 (double) and a (hand calculation)
    system = polynomial_form([x**2 * (a - x)], [x], [a])
    result = solve_batch(system, np.array([[1.0], [2.5], [-0.7], [0.0]]))
    for i, av in enumerate([1.0, 2.5, -0.7]):
        np.testing.assert_allclose(_found(result, i)[:, 0], sorted([0.0, av]), atol=1e-7)
    # a = 0: x^3 = 0, one triple root, reported once
    np.testing.assert_allclose(_found(result, 3)[:, 0], [0.0], atol=1e-7)


def test_paths_diverging_at_every_target_give_no_roots():
    # x + y = a and x + y = b are parallel lines for a != b: no steady state, and the
    # path from the generic start system diverges (hand calculation)
    system = polynomial_form([x + y - a, x + y - b], [x, y], [a, b])
    result = solve_batch(system, np.array([[1.0, 2.0], [0.0, -3.0]]))
    assert (result.count == 0).all() and (result.status == 0).all()


def test_a_line_of_roots_is_flagged_rather_than_reported_as_no_roots():
    # a y - b x = 0 (twice): every point of the line b x = a y is a root, none is
    # isolated (hand calculation). The path lands on a complex point of the line; the
    # set must be flagged (the caller then solves it by Newton and reports a continuum).
    system = polynomial_form([a * y - b * x, b * x - a * y], [x, y], [a, b])
    result = solve_batch(system, np.array([[1.0, 2.0], [0.5, 0.3]]))
    assert (result.status == 1).all()
    assert all("continuum" in text for text in result.message)


def test_generic_root_count_is_below_total_degree_for_toggle_switch():
    # the eliminated polynomial of the Hill-3 toggle has degree 3*3 + 1 = 10 (see above),
    # the Bezout bound of the cleared system is 4 * 4 = 16
    system = polynomial_form([a1 / (1 + v**3) - u, a2 / (1 + u**3) - v], [u, v], [a1, a2])
    assert system.path_count == 16
    assert 10 <= generic_root_count(system) <= 16


# ------------------------------------------------------------------- status reporting


def test_unevaluable_parameter_sets_are_flagged_not_dropped():
    # design requirement: a set that cannot be evaluated is recorded with a reason
    # sqrt(a) is not real for a < 0; K = 0 makes b x / K undefined
    system = polynomial_form([x**2 - sympy.sqrt(a) + b * x / K], [x], [a, b, K])
    params = np.array([[4.0, 0.0, 1.0], [-1.0, 0.0, 1.0], [4.0, 1.0, 0.0]])
    result = solve_batch(system, params)
    assert result.status.tolist() == [0, 2, 2]
    assert result.message[0] == "" and result.message[1] and result.message[2]
    np.testing.assert_allclose(_found(result, 0)[:, 0], [-np.sqrt(2.0), np.sqrt(2.0)])
    assert (result.count[1:] == 0).all()


def test_failed_paths_are_reported(monkeypatch):
    # design requirement: possibly incomplete results are flagged (status 1)
    # starve the tracker so that paths cannot reach the target: status 1, not silence
    system = polynomial_form([a1 * x - x**3 + c * y, a2 * y - y**3 + c * x], [x, y], [a1, a2, c])
    generic_root_count(system)  # start solutions computed with normal settings
    starved = homotopy._Settings(max_iterations=3)
    monkeypatch.setattr(homotopy, "_NORMAL", starved)
    monkeypatch.setattr(homotopy, "_RETRACK", (starved,))
    result = solve_batch(system, np.array([[1.0, 1.5, 0.1]]))
    assert result.status[0] == 1
    assert "paths failed" in result.message[0]


# --------------------------------------------------------------------- determinism


@pytest.mark.parametrize("with_hubs", [False, True])
def test_results_are_reproducible_and_independent_of_the_batch(with_hubs):
    # design requirement (same seed => same results, whatever the chunking)
    system = polynomial_form([a1 / (1 + v**3) - u, a2 / (1 + u**3) - v], [u, v], [a1, a2])
    params = np.random.default_rng(4).uniform(0.5, 5.0, size=(40, 2))
    hubs = np.random.default_rng(5).uniform(0.5, 5.0, size=(16, 2)) if with_hubs else None
    whole = solve_batch(system, params, seed=3, hubs=hubs)
    again = solve_batch(system, params, seed=3, hubs=hubs)
    np.testing.assert_array_equal(whole.roots, again.roots)
    part = solve_batch(system, params[10:17], seed=3, hubs=hubs)
    width = part.roots.shape[1]
    np.testing.assert_array_equal(part.roots, whole.roots[10:17, :width])
    assert np.isnan(whole.roots[10:17, width:]).all()
    np.testing.assert_array_equal(part.count, whole.count[10:17])


def test_empty_batch_and_wrong_shapes():
    system = polynomial_form([a + b * x - x**3], [x], [a, b])
    empty = solve_batch(system, np.zeros((0, 2)))
    assert empty.roots.shape[0] == 0 and empty.count.shape == (0,)
    with pytest.raises(ValueError):
        solve_batch(system, np.zeros((3, 3)))
    assert isinstance(system, PolynomialSystem)


# ------------------------------------------------------------------ endgame, parameter lines


def test_endgame_places_paths_at_a_singular_point_at_infinity_with_cycle_number_two():
    # e x^3 + x - a at e = 0: one root x = a; the other two escape to infinity as
    # x ~ +-i / sqrt(e) (hand calculation: balance e x^3 + x = 0), so along a path whose
    # leading coefficient shrinks like s they grow like s**(-1/2): cycle number 2 at a
    # double point at infinity. Plain steps stop short of it (|X_0| ~ 1e-6, which would
    # read as a finite point of size 1e5); the endgame lands on X_0 = 0.
    system = polynomial_form([a * x**3 + x - b], [x], [a, b])
    comp, start = homotopy._compile(system), homotopy._start(system, 0)
    target = comp.coefficients(np.array([[0.0, 0.3]]))
    target = (target / np.abs(target).max(axis=2, keepdims=True)).astype(complex)
    hom = homotopy._line(comp.table, start.chart, target, start.cstar[None])
    group = np.zeros(len(start.roots), dtype=int)
    end, state, cycle, _, _ = homotopy._track(hom, start.roots, group, homotopy._NORMAL)
    xs = end[:, 1] / end[:, 0]
    finite = np.abs(xs - 0.3) < 1e-6
    assert len(start.roots) == 3 and finite.sum() == 1 and (state == homotopy._DONE).all()
    assert (cycle[~finite] == 2).all()
    assert (np.abs(end[~finite, 0]) <= 1e-12 * np.abs(end[~finite]).max(axis=1)).all()
    result = solve_batch(system, np.array([[0.0, 0.3], [0.0, -2.0], [0.01, 0.3]]))
    assert (result.status == 0).all()
    np.testing.assert_allclose(_found(result, 0)[:, 0], [0.3], rtol=1e-12)
    np.testing.assert_allclose(_found(result, 1)[:, 0], [-2.0], rtol=1e-12)
    reference, _ = _real_roots([0.01, 0.0, 1.0, -0.3])  # e > 0: one real root (numpy.roots)
    np.testing.assert_allclose(_found(result, 2)[:, 0], reference, rtol=1e-10)


def test_along_line_matches_sympy_substitution():
    # coefficients polynomial in the parameters: c(p_t + s (p_h - p_t)) as a polynomial
    # in s must equal sympy's evaluation of each coefficient at that point (reference
    # library: sympy), for complex s off the nodes used to build it
    from poise.equilibria.parameter_path import along_line, parameter_family

    exprs = [[a**2 * b - 3 * c, sympy.Integer(2), a * b * c + b**3], [c - a, sympy.Integer(0), 5 * a * c**2]]
    family = parameter_family((a, b, c), exprs)
    assert family is not None and family.degree == 3
    rng = np.random.default_rng(8)
    target = rng.uniform(-2, 2, size=(3, 3))
    start = rng.normal(size=(3, 3)) + 1j * rng.normal(size=(3, 3))
    C = along_line(family, target, start)
    for s in (0.3 + 0.4j, -1.7, 2.5j):
        got = (C * s ** np.arange(C.shape[-1])).sum(axis=-1)
        for row in range(3):
            point = dict(zip((a, b, c), target[row] + s * (start[row] - target[row])))
            want = np.array([[complex(sympy.N(e.subs(point))) for e in line] for line in exprs])
            np.testing.assert_allclose(got[row], want, rtol=1e-12, atol=1e-12)
    assert parameter_family((a, b), [[sympy.sqrt(a) * b]]) is None  # not polynomial


def test_parameter_lines_track_fewer_paths_and_match_closed_form():
    # x^2 + a x y + b = 0 and x^2 + a x y + y + c = 0: subtracting, y = b - c, then
    # x^2 + a (b - c) x + b = 0 (hand elimination): 2 roots, while a generic system with
    # these monomials has 3 (the third path would diverge at every parameter set).
    system = polynomial_form([x**2 + a * x * y + b, x**2 + a * x * y + y + c], [x, y], [a, b, c])
    rng = np.random.default_rng(21)
    def draw(size):
        return np.column_stack([rng.uniform(0.5, 2, size), rng.uniform(-2, 2, size), rng.uniform(-2, 2, size)])
    hubs, params = draw(32), draw(500)
    assert generic_root_count(system) == 3
    assert homotopy.paths_per_set(system, hubs) == 2
    result = solve_batch(system, params, hubs=hubs)
    assert (result.status == 0).all()
    checked = 0
    for i, (av, bv, cv) in enumerate(params):
        xs, bad = _real_roots([1.0, av * (bv - cv), bv])  # reference library: numpy.roots
        if bad:
            continue
        got = _found(result, i)
        assert len(got) == len(xs), (av, bv, cv)
        np.testing.assert_allclose(got[:, 0], xs, rtol=1e-9, atol=1e-9)
        np.testing.assert_allclose(got[:, 1], bv - cv, rtol=1e-9, atol=1e-9)
        checked += 1
    assert checked > 480 and result.count.max() == 2 and result.count.min() == 0
    part = solve_batch(system, params[100:110], hubs=hubs)  # independent of the batch
    np.testing.assert_array_equal(part.roots, result.roots[100:110, :part.roots.shape[1]])


@pytest.mark.parametrize("with_hubs", [False, True])
def test_a_cluster_of_small_simple_roots_is_not_averaged_by_the_endgame(with_hubs):
    # (x - a)(x - 2a)(x - 3a)(x + b) with a, b ~ 1e-3: four simple roots close together
    # (hand calculation). Circles about s = 0 that also enclose the branch points between
    # them would return their mean with cycle number 4; all four roots must come back.
    system = polynomial_form([(x - a) * (x - 2 * a) * (x - 3 * a) * (x + b)], [x], [a, b])
    rng = np.random.default_rng(12)
    params = np.vstack([[1e-3, 1e-3], rng.uniform(5e-4, 2e-3, size=(80, 2))])
    hubs = rng.uniform(5e-4, 2e-3, size=(16, 2)) if with_hubs else None
    result = solve_batch(system, params, hubs=hubs)
    for i, (av, bv) in enumerate(params):
        np.testing.assert_allclose(_found(result, i)[:, 0], [-bv, av, 2 * av, 3 * av], rtol=1e-7, atol=1e-12)


def test_condition_number_matches_numpy():
    # reference: numpy.linalg.cond in the 1-norm, the measure the tracker uses for end
    # points (its thresholds were set for it)
    from poise.equilibria.tracker import _condition_1

    rng = np.random.default_rng(5)
    for n in (1, 2, 3, 5):
        for trial in range(50):
            J = rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))
            if trial % 5 == 0:
                J[0] = 1e-4 * J[-1] + 1e-8 * J[0]  # nearly singular
            got = _condition_1(J.copy(), np.empty((n, n), complex), np.empty(n, np.int64),
                               np.empty(n, complex))
            assert got == pytest.approx(np.linalg.cond(J, 1), rel=1e-6)
    singular = np.array([[1.0, 2.0], [2.0, 4.0]], dtype=complex)
    assert _condition_1(singular, np.empty((2, 2), complex), np.empty(2, np.int64),
                        np.empty(2, complex)) > 1e15


def test_roots_of_very_different_sizes_are_all_found():
    # x ~ 1e-5 next to y ~ 1e3 in one system; reference: the quadratic formula by hand.
    # x**2 + a x - 2 a**2 = 0 gives x = a or -2a; then y**2 + (2b + x) y - 3 b**2 = 0.
    # (A corrector accepting points on an estimated next correction lost a root here in
    # about 10 % of sets: the small coordinate was not converged.)
    x, y, a, b = sympy.symbols("x y a b")
    system = polynomial_form([(x - a) * (x + 2 * a), (y - b) * (y + 3 * b) + x * y], [x, y], [a, b])
    rng = np.random.default_rng(12)
    values = rng.uniform(0.5, 2.0, (300, 2)) * [1e-5, 1e3]
    result = solve_batch(system, values)
    assert (result.status == 0).all() and (result.count == 4).all()
    for (av, bv), roots, in zip(values, result.roots):
        expected = []
        for xv in (av, -2 * av):
            p = xv + 2 * bv
            big = (-p - np.copysign(np.sqrt(p * p + 12 * bv * bv), p)) / 2
            expected += [(xv, big), (xv, -3 * bv * bv / big)]  # product of roots: -3 b**2
        # each expected root has its own found root, equal to 1e-7 in every coordinate
        close = (np.abs(roots[:, None, :] - np.array(expected)[None]) <= 1e-7 * np.abs(expected)).all(axis=2)
        assert close.sum(axis=0).tolist() == [1, 1, 1, 1], (av, bv, roots, expected)


def test_start_velocities_match_sympy_derivatives():
    # reference: the Davidenko equation dX/ds = -[H_X; chart]^-1 [H_s; 0] with H_X and
    # H_s differentiated by sympy, for a path whose coefficients at s = 1 are the hub's
    # times a factor per row (as after scaling each target equation)
    from poise.equilibria import tracker

    rng = np.random.default_rng(8)
    exps = np.array([[[2, 1, 0], [0, 2, 1], [1, 0, 2], [3, 0, 0]],
                     [[0, 3, 0], [1, 1, 1], [2, 0, 1], [0, 0, 3]]], dtype=np.int64)
    live = np.ones((2, 4), dtype=bool)
    live[1, 3] = False

    def cnormal(*shape):
        return rng.normal(size=shape) + 1j * rng.normal(size=shape)

    chart = cnormal(3)
    hub = np.where(live, cnormal(2, 4), 0)
    roots = cnormal(1, 2, 3)                        # any points: the formula holds anywhere
    factors = tracker.start_factors(exps, live, chart, hub[None, ..., None], roots)
    row = cnormal(2)
    slope = np.where(live, cnormal(2, 4), 0)
    C = np.stack([hub * row[:, None] - slope, slope], axis=-1)[None]   # c(s) = C0 + s C1
    V = tracker.start_velocities(live, C, np.zeros(2, np.int64), np.arange(2), *factors)

    X = sympy.symbols("X0:3")
    s = sympy.Symbol("s")
    H = [sum((C[0, i, k, 0] + s * C[0, i, k, 1]) * sympy.prod([X[j] ** int(exps[i, k, j]) for j in range(3)])
             for k in range(4) if live[i, k]) for i in range(2)]
    for r in range(2):
        at = dict(zip(X, roots[0, r])) | {s: 1}
        J = np.array([[complex(sympy.diff(h, x).subs(at)) for x in X] for h in H] + [list(chart)])
        Hs = np.array([complex(sympy.diff(h, s).subs(at)) for h in H] + [0])
        np.testing.assert_allclose(V[r], -np.linalg.solve(J, Hs), rtol=1e-10)


@pytest.mark.parametrize("with_hubs", [False, True])
def test_a_cluster_of_roots_far_smaller_than_another_root_is_resolved(with_hubs):
    # roots a, 2a, 3a with a ~ 1e-5 next to -b ~ -1: relative to the whole point the
    # three are within 1e-5 of each other, their paths stall near s = 0, and the set is
    # solved again in units of the small roots. Reference: the factors themselves.
    x, a, b = sympy.symbols("x a b")
    system = polynomial_form([(x - a) * (x - 2 * a) * (x - 3 * a) * (x + b)], [x], [a, b])
    rng = np.random.default_rng(31)
    values = rng.uniform(0.5, 2.0, (200, 2)) * [1e-5, 1.0]
    hubs = rng.uniform(0.5, 2.0, (24, 2)) * [1e-5, 1.0] if with_hubs else None
    result = solve_batch(system, values, hubs=hubs)
    assert (result.status == 0).all() and (result.count == 4).all()
    for (av, bv), roots in zip(values, result.roots):
        np.testing.assert_allclose(np.sort(roots[:, 0]), [-bv, av, 2 * av, 3 * av], rtol=1e-9)


def test_a_second_solve_does_not_change_how_the_first_solve_roots_merge():
    # real roots -9.61e-3, 2.97e-3 and a close pair 1.6041e-9, 1.6134e-9, plus a complex
    # pair near 1.9e-4. Reference: the factors. Copies of the two large roots from the
    # rescaled second solve once moved the merge floor (the median root size) and the
    # close pair became one root.
    x = sympy.Symbol("x")
    r = sympy.symbols("r0:4")
    u, v = sympy.symbols("u v")
    system = polynomial_form([sympy.Mul(*[x - q for q in r]) * ((x - u) ** 2 + v ** 2)], [x], list(r) + [u, v])
    values = np.array([[-9.6098422352612744e-03, 2.9733267397200544e-03, 1.6040538267967488e-09,
                        1.6133583627464853e-09, 1.9345878823788214e-04, 5.2474806260195783e-06]])
    result = solve_batch(system, values)
    # the set may be flagged (status 1: its second solve, in units of the close pair,
    # lost paths among roots 1e7 times larger; the pipeline then solves it again with
    # Newton), but the roots it reports must be the four, the close pair kept apart
    assert result.status[0] in (0, 1) and result.count[0] == 4
    np.testing.assert_allclose(result.roots[0, :, 0], np.sort(values[0, :4]), rtol=1e-6)


def test_a_root_at_zero_does_not_set_the_units_of_the_second_solve():
    # x: roots a, 2a, 3a (a ~ 1e-5) and -b; y: roots 0 and c. A path that stalls at
    # y = 0 ends at y ~ 1e-89; rescaling y by that would send y = c to infinity.
    # Reference: the factors, 4 x 2 real roots.
    x, y, a, b, c = sympy.symbols("x y a b c")
    system = polynomial_form([(x - a) * (x - 2 * a) * (x - 3 * a) * (x + b), y * (y - c)], [x, y], [a, b, c])
    rng = np.random.default_rng(41)
    values = rng.uniform(0.5, 2.0, (60, 3)) * [1e-5, 1.0, 1.0]
    result = solve_batch(system, values)
    assert (result.status == 0).all() and (result.count == 8).all()
    for (av, bv, cv), roots in zip(values, result.roots):
        expected = np.array([(xv, yv) for xv in (-bv, av, 2 * av, 3 * av) for yv in (0.0, cv)])
        close = (np.abs(roots[:, None, :] - expected[None]) <= 1e-9 * np.abs(expected) + 1e-14).all(axis=2)
        assert close.sum(axis=0).tolist() == [1] * 8


def test_the_second_solve_ignores_an_anchor_coordinate_at_rounding_level():
    # the same system, with the anchor chosen by hand: y = 1e-89 is the root y = 0 up to
    # rounding, so y keeps the units of its largest root; every (x, y) root with x
    # small must come back from the second solve. Reference: the factors.
    x, y, a, b, c = sympy.symbols("x y a b c")
    system = polynomial_form([(x - a) * (x - 2 * a) * (x - 3 * a) * (x + b), y * (y - c)], [x, y], [a, b, c])
    values = np.array([[1.3e-5, 1.1, 0.7]])
    comp, start = homotopy._compile(system), homotopy._start(system, 0)
    target = comp.coefficients(values)
    target = target / np.abs(target).max(axis=2, keepdims=True)
    extra = homotopy._rescaled_roots(comp, start, target, np.array([0]), np.array([[2.6e-5 + 0j, 1e-89 + 0j]]),
                                     np.array([[1.1, 0.7]]))
    for xv in (1.3e-5, 2.6e-5, 3.9e-5):
        for yv in (0.0, 0.7):
            assert (np.abs(extra.points - [xv, yv]) <= [1e-9 * xv, 1e-9]).all(axis=1).any(), (xv, yv)


def test_a_complex_pair_close_to_the_axis_among_tiny_roots_is_not_a_real_root():
    # real roots -9.32e-8, -1.51e-6 and 2.46e-2, and the pair 1.0595e-6 +- 6.66e-8 i.
    # Reference: the factors (numpy.roots agrees). Tracking takes every point this far
    # below the largest root for singular; judged in its own units the pair is regular
    # and clearly complex.
    x = sympy.Symbol("x")
    r0, r1, r2, u, v = sympy.symbols("r0 r1 r2 u v")
    system = polynomial_form([(x - r0) * (x - r1) * (x - r2) * ((x - u) ** 2 + v ** 2)], [x], [r0, r1, r2, u, v])
    values = np.array([[-9.3246344029847618e-08, -1.5093325871599110e-06, 2.4590875494459513e-02,
                        1.0595419292877622e-06, 6.6581256004477239e-08]])
    result = solve_batch(system, values)
    assert result.status[0] == 0 and result.count[0] == 3
    np.testing.assert_allclose(result.roots[0, :, 0], np.sort(values[0, :3]), rtol=1e-8)


def test_a_root_lost_to_a_path_jump_among_tiny_roots_is_flagged():
    # x: real roots 2.17e-2, -4.49e-2, 9.91e-5, -1.25e-3 and a complex pair near 2e-9;
    # for each real x, y**2 - s y - t x = 0 has two real roots when its discriminant is
    # positive (the reference count: the factors and the discriminant). Paths of the
    # root at 9.91e-5 jump onto the tiny pair; the set must say that roots may be
    # missing rather than report fewer with status 0.
    x, y, s, t = sympy.symbols("x y s t")
    rs = sympy.symbols("r0:4")
    u0, v0 = sympy.symbols("u0 v0")
    f1 = sympy.Mul(*[(x - r) for r in rs]) * ((x - u0) ** 2 + v0 ** 2)
    system = polynomial_form([f1, y ** 2 - s * y - t * x], [x, y], list(rs) + [u0, v0, s, t])
    values = np.array([[0.02167831300081434, -0.04490645258920263, 9.9076385113814e-05,
                        -0.0012478579111090092, 1.9907971721461013e-09, 5.742488215655511e-10,
                        0.9190086536422605, 0.7116262818980447]])
    S, T = values[0, -2:]
    expected = sum(2 for r in values[0, :4] if S * S + 4 * T * r > 0)
    result = solve_batch(system, values)
    assert result.count[0] == expected or result.status[0] == 1


def test_copies_of_a_root_with_a_coordinate_at_rounding_level_merge():
    # two polished copies of the root (1, 0), whose second coordinate is zero up to
    # rounding and whose last Newton steps were exactly 0, are one root; a distinct
    # root 1e-11 away in that coordinate is not. Reference: the construction of the
    # points (two copies of one root and one other root: 2 roots); a review finding.
    from poise.equilibria.merge import unique_sorted

    x = np.array([[1.0, 1e-17], [1.0, -2e-17], [1.0, 1e-11]])
    roots, counts = unique_sorted(x, np.zeros(3, bool), np.zeros(3, int), 1, None, np.zeros_like(x))
    assert counts.tolist() == [2]
