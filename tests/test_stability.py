"""Eigenvalues and steady-state classification (poise.stability).

Every check names the outside source it is compared with: numpy.linalg.eigvals as a
reference library, matrices with a known spectrum (similarity preserves eigenvalues),
the Routh-Hurwitz criterion, the trace-determinant classification and worked examples
from Strogatz, Nonlinear Dynamics and Chaos (1994), and Lorenz (1963).
"""

from __future__ import annotations

import itertools
import sys

import numpy as np
import pytest

from poise.stability import (CLASS_NAMES, STABILITY_NAMES, Classification, classify,
                             eigenvalues)

N_RANDOM = 10_000


def _matched_error(ours: np.ndarray, ref: np.ndarray) -> np.ndarray:
    """Per matrix, max |ours - ref| under the best pairing of the two spectra."""
    dim = ours.shape[1]
    best = np.full(ours.shape[0], np.inf)
    for perm in itertools.permutations(range(dim)):
        best = np.minimum(best, np.max(np.abs(ours[:, list(perm)] - ref), axis=1, initial=0))
    return best


def _random_stack(rng: np.random.Generator, n: int, dim: int) -> np.ndarray:
    """n random matrices: one fifth each plain, ~1e6, ~1e-6, diagonally similar with
    scales over 12 decades, and entrywise scales over 12 decades."""
    per = n // 5
    base = rng.standard_normal((5, per, dim, dim))
    row = 10.0 ** rng.uniform(-6, 6, (per, dim))
    parts = [base[0], 1e6 * base[1], 1e-6 * base[2],
             base[3] * row[:, :, None] / row[:, None, :],
             base[4] * 10.0 ** rng.uniform(-6, 6, (per, dim, dim))]
    return np.concatenate(parts)


def _names(result: Classification) -> list[tuple[str, str]]:
    return list(zip(result.class_names.tolist(), result.stability_names.tolist()))


# --------------------------------------------------------------------------- eigenvalues

@pytest.mark.parametrize("dim", [1, 2, 3, 4, 5])
def test_eigenvalues_agree_with_numpy_on_random_matrices(dim):
    # reference library: numpy.linalg.eigvals (LAPACK geev).  For d >= 4 poise itself
    # calls numpy, so there this checks only scaling, sorting and shapes; the
    # known-spectrum test below is the independent check for those sizes.
    rng = np.random.default_rng(1000 + dim)
    stack = _random_stack(rng, N_RANDOM, dim)
    ours = eigenvalues(stack)
    ref = np.linalg.eigvals(stack).astype(complex)
    assert ours.shape == (N_RANDOM, dim) and ours.dtype == complex
    norm = np.linalg.norm(stack, axis=(1, 2))
    # both are backward stable: errors of order eps * ||J|| for these spectra
    assert np.all(_matched_error(ours, ref) <= 1e-11 * norm)


@pytest.mark.parametrize("dim", [2, 3, 4, 5])
def test_eigenvalues_are_sorted_by_real_then_imaginary_part(dim):
    # specification of the API (design of poise.stability); values: numpy.linalg.eigvals
    rng = np.random.default_rng(7 + dim)
    lam = eigenvalues(_random_stack(rng, 5000, dim))
    re, im = lam.real, lam.imag
    assert np.all(np.diff(re, axis=1) <= 0)
    ties = np.diff(re, axis=1) == 0
    assert ties.any()                                  # conjugate pairs exist
    assert np.all(np.diff(im, axis=1)[ties] <= 0)


def test_three_element_sort_breaks_ties_by_imaginary_part():
    # specification of the API; the 3x3 path sorts with its own network, so feed it
    # every order of a conjugate pair and a real value, including ties in real part
    module = sys.modules["poise.stability.classify"]
    values = [0.5, -1 + 2j, -1 - 2j]
    perms = list(itertools.permutations(values))
    re = np.array([[v.real for v in perm] for perm in perms]).T.copy()
    im = np.array([[complex(v).imag for v in perm] for perm in perms]).T.copy()
    module._sort3(re, im)
    np.testing.assert_array_equal(re.T, [[0.5, -1, -1]] * len(perms))
    np.testing.assert_array_equal(im.T, [[0, 2, -2]] * len(perms))


@pytest.mark.parametrize("dim", [2, 3, 4, 5])
def test_eigenvalues_of_matrices_with_known_spectrum(dim):
    # analytic result: Q diag(lambda) Q^T with Q orthogonal has eigenvalues lambda;
    # includes exactly repeated eigenvalues (near-degenerate for the closed forms)
    rng = np.random.default_rng(50 + dim)
    n = 2000
    q, _ = np.linalg.qr(rng.standard_normal((n, dim, dim)))
    spectrum = rng.standard_normal((n, dim))
    spectrum[: n // 2, 1] = spectrum[: n // 2, 0]               # a double eigenvalue
    spectrum[n // 4: n // 2, :] = spectrum[n // 4: n // 2, :1]  # all equal
    spectrum[n // 2: 3 * n // 4] += 1e4                         # large common offset
    stack = q @ (spectrum[:, :, None] * np.swapaxes(q, 1, 2))
    norm = np.linalg.norm(stack, axis=(1, 2))
    ours = eigenvalues(stack)
    assert np.all(_matched_error(ours, spectrum.astype(complex)) <= 1e-11 * norm)


@pytest.mark.parametrize("dim", [2, 3])
def test_defective_eigenvalue_as_accurate_as_numpy(dim):
    # analytic result: S (Jordan block) S^-1 has a double eigenvalue mu; a defective
    # eigenvalue is only determined to ~sqrt(eps)*||J|| by any method, so compare with
    # the accuracy of the reference library numpy.linalg.eigvals on the same matrices
    rng = np.random.default_rng(90 + dim)
    n = 2000
    jordan = np.zeros((n, dim, dim))
    mu = rng.standard_normal(n)
    jordan[:, 0, 0] = jordan[:, 1, 1] = mu
    jordan[:, 0, 1] = 1.0
    if dim == 3:
        jordan[:, 2, 2] = mu - 1.0 - rng.random(n)
    s = rng.standard_normal((n, dim, dim)) + 3 * np.eye(dim)
    stack = s @ jordan @ np.linalg.inv(s)
    exact = np.diagonal(jordan, axis1=1, axis2=2).astype(complex)
    norm = np.linalg.norm(stack, axis=(1, 2))
    err_ours = _matched_error(eigenvalues(stack), exact) / norm
    err_numpy = _matched_error(np.linalg.eigvals(stack).astype(complex), exact) / norm
    # rounding makes either method lucky on single matrices: compare the distributions
    for level in (0.5, 0.99, 1.0):
        assert np.quantile(err_ours, level) <= 10 * np.quantile(err_numpy, level)
    assert np.max(err_ours) < 1e-6


def test_3x3_closed_form_serves_well_scaled_matrices(monkeypatch):
    # the closed form hands matrices it cannot vouch for to LAPACK; on well-scaled
    # random matrices that must stay rare, or d == 3 silently becomes the slow path
    # (common practice, no source; accuracy itself is checked against numpy above)
    module = sys.modules["poise.stability.classify"]
    handed_over = []
    real_lapack = module._eig_lapack
    monkeypatch.setattr(module, "_eig_lapack",
                        lambda mats: handed_over.append(len(mats)) or real_lapack(mats))
    stack = np.random.default_rng(33).standard_normal((20_000, 3, 3))
    ours = eigenvalues(stack)
    assert sum(handed_over) < 0.02 * len(stack)
    ref = np.linalg.eigvals(stack).astype(complex)
    assert np.all(_matched_error(ours, ref) <= 1e-12 * np.linalg.norm(stack, axis=(1, 2)))


@pytest.mark.parametrize("dim", [0, 1, 2, 3, 4])
def test_input_is_left_unchanged(dim):
    # specification of the API: no side effects on the caller's arrays
    rng = np.random.default_rng(dim)
    stack = 1e3 * rng.standard_normal((50, dim, dim))
    if dim:
        stack[0, 0, 0] = np.nan
    before = stack.copy()
    classify(stack)
    eigenvalues(stack)
    np.testing.assert_array_equal(stack, before)


def test_eigenvalues_rejects_bad_shapes():
    # specification of the API: (B, d, d) real stacks only
    with pytest.raises(ValueError):
        eigenvalues(np.zeros((2, 2)))
    with pytest.raises(ValueError):
        eigenvalues(np.zeros((2, 2, 3)))
    with pytest.raises(ValueError):
        eigenvalues(np.zeros((2, 2, 2), dtype=complex))


# --------------------------------------------------------------------- Routh-Hurwitz

def test_stability_agrees_with_routh_hurwitz_on_random_3x3():
    # source: Routh (1877) / Hurwitz (1895) criterion for lambda^3 + a1 lambda^2 +
    # a2 lambda + a3: all roots in the open left half-plane iff a1 > 0, a3 > 0 and
    # a1*a2 > a3 (any control textbook)
    rng = np.random.default_rng(1877)
    n = 1000
    stack = rng.standard_normal((n, 3, 3)) - rng.uniform(-1.0, 3.0, (n, 1, 1)) * np.eye(3)
    a1 = -np.trace(stack, axis1=1, axis2=2)
    a2 = sum(stack[:, i, i] * stack[:, j, j] - stack[:, i, j] * stack[:, j, i]
             for i, j in ((0, 1), (0, 2), (1, 2)))
    a3 = -np.linalg.det(stack)
    hurwitz_stable = (a1 > 0) & (a3 > 0) & (a1 * a2 > a3)
    # skip matrices too close to the boundary (common practice, no source)
    s = np.linalg.norm(stack, axis=(1, 2))
    clear = np.minimum.reduce([np.abs(a1) / s, np.abs(a3) / s**3,
                               np.abs(a1 * a2 - a3) / s**3]) > 1e-6
    assert clear.sum() > 900
    result = classify(stack[clear])
    verdict = result.stability_names
    assert 100 < hurwitz_stable[clear].sum() < 900         # both outcomes are exercised
    np.testing.assert_array_equal(verdict == "stable", hurwitz_stable[clear])
    np.testing.assert_array_equal(verdict == "unstable", ~hurwitz_stable[clear])


# ------------------------------------------------------------ trace-determinant plane

def _strogatz_class(trace: float, det: float) -> tuple[str, str]:
    # source: Strogatz (1994) §5.2, classification on the trace-determinant plane;
    # det == 0 (a zero eigenvalue) and the parabola T^2 = 4D follow design.md's table
    # (repeated real eigenvalues: a degenerate node or star, counted as a node)
    disc = trace * trace - 4 * det
    if det < 0:
        return "saddle", "unstable"
    if det == 0:
        return "non-hyperbolic", "unstable" if trace > 0 else "undetermined"
    if trace == 0:
        return "center", "undetermined"
    side = "stable" if trace < 0 else "unstable"
    kind = "node" if disc >= 0 else "focus"
    return f"{side} {kind}", side


_T_VALUES = [-3.0, -2.0, -1.0, -0.5, 0.0, 0.5, 1.0, 2.0, 3.0]
_D_VALUES = [-2.0, -0.25, 0.0, 0.25, 0.5625, 1.0, 2.0, 2.25, 4.0]


@pytest.mark.parametrize("power", [0, 20, -20])
def test_2x2_classification_on_exact_trace_determinant_grid(power):
    # source: Strogatz (1994) §5.2; the grid contains the boundaries exactly:
    # D = 0, T = 0 and T^2 = 4D (e.g. T = -2, D = 1; T = 3, D = 2.25).
    # Scaling by 2**power keeps every value exact (dyadic numbers).
    pairs = list(itertools.product(_T_VALUES, _D_VALUES))
    factor = 2.0 ** power
    mats = []
    for t, d in pairs:
        a = 0.5 * t + 0.25                          # generic form [[a, 1], [c, T - a]]
        mats.append([[0.0, 1.0], [-d, t]])          # companion form
        mats.append([[a, 1.0], [a * (t - a) - d, t - a]])
    stack = factor * np.array(mats)
    result = classify(stack)
    expected = [_strogatz_class(t, d) for t, d in pairs for _ in range(2)]
    assert _names(result) == expected
    t_col = factor * np.repeat([t for t, _ in pairs], 2)
    d_col = factor**2 * np.repeat([d for _, d in pairs], 2)
    np.testing.assert_array_equal(result.trace, t_col)
    np.testing.assert_array_equal(result.determinant, d_col)
    np.testing.assert_array_equal(result.discriminant, t_col**2 - 4 * d_col)


def test_2x2_classification_on_random_trace_determinant_points():
    # source: Strogatz (1994) §5.2 on points away from the boundaries, each realised
    # as a random matrix [[a, b], [c, T - a]] with bc = a(T - a) - D
    rng = np.random.default_rng(52)
    n = 5000
    t = rng.uniform(-4, 4, n)
    d = rng.uniform(-4, 4, n)
    away = (np.abs(t) > 1e-3) & (np.abs(d) > 1e-3) & (np.abs(t * t - 4 * d) > 1e-3)
    t, d = t[away], d[away]
    a = rng.uniform(-3, 3, t.size)
    b = rng.choice([-1, 1], t.size) * 10.0 ** rng.uniform(-2, 2, t.size)
    c = (a * (t - a) - d) / b
    stack = np.stack([np.stack([a, b], -1), np.stack([c, t - a], -1)], 1)
    result = classify(stack)
    expected = [_strogatz_class(ti, di) for ti, di in zip(t, d)]
    assert _names(result) == expected
    np.testing.assert_allclose(result.trace, t, atol=1e-12)
    np.testing.assert_allclose(result.determinant, d, atol=1e-10)


# -------------------------------------------------------------------- worked examples

def test_competition_model_fixed_points():
    # source: Strogatz (1994) §6.4, x' = x(3 - x - 2y), y' = y(2 - x - y):
    # (0,0) unstable node, (0,2) and (3,0) stable nodes, (1,1) saddle
    def jacobian(x, y):
        return [[3 - 2 * x - 2 * y, -2 * x], [-y, 2 - x - 2 * y]]

    points = [(0, 0), (0, 2), (3, 0), (1, 1)]
    result = classify(np.array([jacobian(x, y) for x, y in points], dtype=float))
    assert _names(result) == [("unstable node", "unstable"), ("stable node", "stable"),
                              ("stable node", "stable"), ("saddle", "unstable")]
    # (1,1): T = -2, D = -1, eigenvalues -1 +- sqrt(2) (by hand from the formula)
    np.testing.assert_allclose(result.eigenvalues[3], [-1 + np.sqrt(2), -1 - np.sqrt(2)])
    assert not result.oscillatory.any()


def test_linear_center():
    # source: Strogatz (1994) §5.2 (x' = y, y' = -x: closed orbits, a center)
    result = classify(np.array([[[0.0, 1.0], [-1.0, 0.0]]]))
    assert _names(result) == [("center", "undetermined")]
    np.testing.assert_allclose(result.eigenvalues[0], [1j, -1j])
    assert result.oscillatory[0] and result.margin[0] == 0.0


def test_3x3_saddle_focus_with_known_spectrum():
    # analytic result: a rotation-scaling block [[-1, 2], [-2, -1]] has -1 +- 2i;
    # with +0.5 added and a similarity applied the class is saddle-focus
    # (design.md's table: both signs, some complex)
    block = np.array([[-1.0, 2.0, 0.0], [-2.0, -1.0, 0.0], [0.0, 0.0, 0.5]])
    s = np.array([[1.0, 2.0, 0.0], [0.0, 1.0, 3.0], [1.0, 0.0, 1.0]])
    stack = np.array([block, s @ block @ np.linalg.inv(s)])
    result = classify(stack)
    assert _names(result) == [("saddle-focus", "unstable")] * 2
    np.testing.assert_allclose(result.eigenvalues, [[0.5, -1 + 2j, -1 - 2j]] * 2, atol=1e-12)
    np.testing.assert_allclose(result.margin, -0.5)


SIGMA, BETA = 10.0, 8.0 / 3.0


def _lorenz_jacobian(x, y, z, rho):
    return [[-SIGMA, SIGMA, 0.0], [rho - z, -1.0, -x], [y, x, -BETA]]


def test_lorenz_origin_is_a_saddle():
    # source: Lorenz (1963); at the origin with sigma = 10, rho = 28, beta = 8/3 the
    # eigenvalues are -8/3 and (-11 +- sqrt(1201))/2
    result = classify(np.array([_lorenz_jacobian(0, 0, 0, 28.0)]))
    assert _names(result) == [("saddle", "unstable")]
    exact = [(-11 + np.sqrt(1201)) / 2, -8 / 3, (-11 - np.sqrt(1201)) / 2]
    np.testing.assert_allclose(result.eigenvalues[0], exact, rtol=1e-13)


def test_lorenz_nontrivial_fixed_points_around_the_hopf_value():
    # source: Strogatz (1994) §9.2 (Lorenz 1963): C+ is stable for 1 < r < r_H =
    # sigma(sigma + b + 3)/(sigma - b - 1), with a complex pair for r above about 1.35
    # (from memory); at r_H a pure imaginary pair (Hopf); above it unstable with a
    # complex pair of positive real part and a negative real eigenvalue
    r_hopf = SIGMA * (SIGMA + BETA + 3) / (SIGMA - BETA - 1)
    mats = []
    for rho in (20.0, r_hopf, 28.0):
        x = np.sqrt(BETA * (rho - 1))
        mats.append(_lorenz_jacobian(x, x, rho - 1, rho))
    result = classify(np.array(mats))
    # a pure imaginary pair in three dimensions is not a center: design.md's table
    assert _names(result) == [("stable focus", "stable"), ("non-hyperbolic", "undetermined"),
                              ("saddle-focus", "unstable")]
    assert result.oscillatory.all()


def test_diagonal_matrices_with_a_zero_entry_are_non_hyperbolic():
    # analytic result: a diagonal matrix's eigenvalues are its entries; a zero one is
    # non-hyperbolic, unstable when another is positive (design.md's table)
    cases = [([0.0], "undetermined"), ([-1.0, 0.0], "undetermined"), ([1.0, 0.0], "unstable"),
             ([-1.0, -2.0, 0.0], "undetermined"), ([-1.0, 3.0, 0.0], "unstable"),
             ([-1.0, -2.0, -3.0, 0.0], "undetermined"), ([0.0] * 5, "undetermined")]
    for diag, stability in cases:
        result = classify(np.diag(diag)[None])
        assert _names(result) == [("non-hyperbolic", stability)], diag


@pytest.mark.parametrize("dim", [1, 2, 3, 4, 5])
def test_diagonal_matrices_follow_sign_pattern(dim):
    # analytic result: diagonal entries are the eigenvalues, all real:
    # all negative -> stable node, all positive -> unstable node, mixed -> saddle
    rng = np.random.default_rng(dim)
    entries = rng.uniform(0.5, 2.0, (300, dim)) * rng.choice([-1.0, 1.0], (300, dim))
    result = classify(entries[:, :, None] * np.eye(dim))
    expected = np.where((entries < 0).all(1), "stable node",
                        np.where((entries > 0).all(1), "unstable node", "saddle"))
    np.testing.assert_array_equal(result.class_names, expected)
    np.testing.assert_allclose(result.margin, -entries.max(1))


# ------------------------------------------------------- tolerance and special cases

def test_repeated_real_eigenvalue_is_a_node_not_a_focus():
    # analytic result: a Jordan block [[-1, 1], [0, -1]] has the real double eigenvalue
    # -1 (degenerate node, Strogatz (1994) §5.2); rounding after a similarity splits it
    # by ~1e-8, which must not turn it into a focus
    rng = np.random.default_rng(3)
    n = 500
    s = rng.standard_normal((n, 2, 2)) + 3 * np.eye(2)
    jordan2 = np.array([[-1.0, 1.0], [0.0, -1.0]])
    stack2 = s @ jordan2 @ np.linalg.inv(s)
    s3 = rng.standard_normal((n, 3, 3)) + 3 * np.eye(3)
    jordan3 = np.array([[-1.0, 1.0, 0.0], [0.0, -1.0, 0.0], [0.0, 0.0, -2.5]])
    stack3 = s3 @ jordan3 @ np.linalg.inv(s3)
    for stack in (stack2, stack3):
        result = classify(stack)
        assert set(result.class_names) == {"stable node"}
        assert not result.oscillatory.any()


def test_slow_rotation_still_counts_as_focus():
    # analytic result: [[-1, w], [-w, -1]] has eigenvalues -1 +- i w
    for w in (1e-3, 1.0, 1e3):
        result = classify(np.array([[[-1.0, w], [-w, -1.0]]]))
        assert _names(result) == [("stable focus", "stable")]


def test_zero_is_judged_against_the_uncertainty_of_the_entries():
    # analytic result: a diagonal matrix's eigenvalues are its entries. Exact entries
    # decide the sign however small an eigenvalue is next to the others (-1e6 and 1e-3:
    # a saddle); an entry that is the difference of terms of size 1e7 is uncertain by
    # rtol * 1e7 = 1e-2 and its 1e-3 cannot be told from zero.
    stack = np.array([np.diag([-1e6, 1e-3]), np.diag([-1.0, 1e-3]), np.diag([-1.0, 1e-9])])
    assert _names(classify(stack)) == [("saddle", "unstable")] * 3
    sizes = np.abs(stack)
    sizes[0, 1, 1] = 1e7
    assert _names(classify(stack, sizes))[0] == ("non-hyperbolic", "undetermined")
    loose = classify(np.diag([-1.0, 1e-3])[None], rtol=10.0)
    assert _names(loose) == [("non-hyperbolic", "undetermined")]


def test_imaginary_parts_within_the_uncertainty_are_not_oscillation():
    # analytic result: [[0, w], [-w, 0]] has eigenvalues +- i w. With exact entries a
    # tiny w is still a center; when the entries are uncertain by more than w (terms of
    # size 1 that cancel to w), both parts count as zero: non-hyperbolic, in 2 and 3 dims
    tiny = 1e-10
    rot2 = np.array([[0.0, tiny], [-tiny, 0.0]])
    assert _names(classify(rot2[None])) == [("center", "undetermined")]
    rot3 = np.zeros((3, 3))
    rot3[:2, :2] = rot2
    rot3[2, 2] = -1.0
    for mat in (rot2, rot3):
        sizes = np.maximum(np.abs(mat), 1.0)
        result = classify(mat[None], sizes[None])
        assert _names(result) == [("non-hyperbolic", "undetermined")]
        assert not result.oscillatory[0]


@pytest.mark.parametrize("dim", [1, 2, 3, 4, 6])
def test_classes_do_not_depend_on_the_units(dim):
    # common practice, no source: a physical result does not depend on its units.
    # Rescaling time by t and each state by d_i turns J into t * D J D^-1 (a similarity,
    # same eigenvalues up to the factor t) and the entries' term sizes alike; the class
    # must not change. Spectra spread over many decades (stiff models) included.
    rng = np.random.default_rng(dim)
    n = 400
    spread = 10.0 ** rng.uniform(-6, 6, (n, dim))
    basis = rng.standard_normal((n, dim, dim)) + 2 * np.eye(dim)
    stack = basis @ (spread[:, :, None] * np.eye(dim) * rng.choice([-1.0, 1.0], (n, 1, dim))) @ np.linalg.inv(basis)
    stack[: n // 4] = rng.standard_normal((n // 4, dim, dim))
    sizes = np.abs(stack) * 10.0 ** rng.uniform(0, 3, stack.shape)
    units = 10.0 ** rng.uniform(-8, 8, (n, dim))
    time = 10.0 ** rng.uniform(-8, 8, (n, 1, 1))
    similar = time * units[:, :, None] * stack / units[:, None, :]
    scaled_sizes = time * units[:, :, None] * sizes / units[:, None, :]
    before, after = classify(stack, sizes), classify(similar, scaled_sizes)
    np.testing.assert_array_equal(before.class_code, after.class_code)
    np.testing.assert_array_equal(before.stability_code, after.stability_code)


def test_pure_imaginary_pairs_beyond_two_dimensions_are_not_centers():
    # analytic result: block-diagonal rotations [[0, w], [-w, 0]] have eigenvalues
    # +- i w; design.md's table keeps "center" for two-dimensional systems only
    rot = np.array([[0.0, 2.0], [-2.0, 0.0]])
    four = np.zeros((4, 4))
    four[:2, :2] = rot
    four[2:, 2:] = 0.5 * rot
    three = np.zeros((3, 3))
    three[:2, :2] = rot                     # third eigenvalue exactly zero
    result = classify(np.array([four]))
    assert _names(result) == [("non-hyperbolic", "undetermined")]
    result = classify(np.array([three]))
    assert _names(result) == [("non-hyperbolic", "undetermined")]
    assert result.oscillatory.all()


def test_non_finite_entries_are_undetermined():
    # specification (design.md: a set where the model cannot be evaluated is recorded,
    # never a crash); finite rows are unaffected (analytic: diagonal eigenvalues)
    for dim in (1, 2, 3, 4):
        stack = np.stack([-np.eye(dim), -np.eye(dim), -np.eye(dim)])
        stack[0, 0, dim - 1] = np.nan
        stack[1, dim - 1, 0] = np.inf
        result = classify(stack)
        assert _names(result) == [("non-hyperbolic", "undetermined")] * 2 + [
            ("stable node", "stable")]
        assert np.isnan(result.margin[:2]).all() and result.margin[2] == 1.0
        assert np.isnan(result.eigenvalues[:2].real).all()
        assert not result.oscillatory.any()


def test_zero_dimensional_system_is_a_stable_node():
    # documented convention: a fully conserved system has no free direction
    result = classify(np.zeros((4, 0, 0)))
    assert _names(result) == [("stable node", "stable")] * 4
    assert np.all(result.margin == np.inf)
    assert result.eigenvalues.shape == (4, 0)


def test_empty_batch_and_field_shapes():
    # specification of the API
    for dim in (0, 1, 2, 3, 6):
        result = classify(np.zeros((0, dim, dim)))
        assert result.eigenvalues.shape == (0, dim)
        assert result.class_code.shape == result.margin.shape == (0,)
    result = classify(-np.eye(3)[None].repeat(2, 0))
    assert result.class_code.dtype == np.int8 and result.stability_code.dtype == np.int8
    assert np.isnan(result.trace).all() and np.isnan(result.discriminant).all()
    assert len(CLASS_NAMES) == 8 and len(STABILITY_NAMES) == 3
    with pytest.raises(ValueError):
        classify(-np.eye(2)[None], rtol=-1.0)
