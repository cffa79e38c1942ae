"""Eigenvalues of stacks of Jacobians and the steady-state classification rules.

Every function takes a stack of real Jacobians of shape ``(B, d, d)`` (one per steady
state) and works on the whole stack at once; there is no Python loop over matrices.
The Jacobians are expected to be restricted to the conservation class already, so a
zero eigenvalue here is a genuine non-hyperbolic direction, never a conserved total.

Eigenvalues come from closed forms where they are both faster and accurate:

* ``d == 1``: the single entry.
* ``d == 2``: trace ``T``, determinant ``D`` and discriminant ``T**2 - 4*D``, the
  latter computed as ``(a - d)**2 + 4*b*c`` so that it does not cancel when the
  eigenvalues nearly coincide; the smaller real root follows from ``D / lambda_1``.
* ``d == 3``: the characteristic polynomial of the trace-free part of ``J`` (the shift
  keeps a large common offset out of the coefficients), its simple real root of largest
  magnitude from the trigonometric or Cardano formula, polished by a Newton step, and
  the remaining pair from the deflated quadratic.  An a-posteriori error estimate per
  root sends every matrix whose closed-form eigenvalues may be less accurate than
  ``64 * eps * ||J||_F`` to LAPACK instead: nearly repeated eigenvalues, and spectra
  where one eigenvalue dwarfs the others (about 0.1 % of matrices with N(0, 1) entries,
  a quarter when entries spread over six decades).
* ``d >= 4``: batched ``numpy.linalg.eigvals``.

Matrices are first scaled by an exact power of two so that squares and cubes of the
entries can neither overflow nor underflow in the closed forms.

Tolerance
---------
With ``tol = rtol * max(1, ||J||_F)`` (Frobenius norm of each matrix; it bounds every
``|lambda|``), a real part with ``|Re lambda| <= tol`` counts as zero.  An eigenvalue
counts as complex when ``|Im lambda| > tol`` *and* ``Im**2 > rtol * (Re**2 + |lambda|**2)``.
For a 2x2 pair the second condition is exactly ``-disc > rtol * (T**2 + 4*|D|)``: the
discriminant measured against its own rounding scale.  It keeps a repeated real
eigenvalue, which rounding splits into a pair ``~ sqrt(eps) * ||J||`` apart, a node
rather than a focus.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

CLASS_NAMES = ("stable node", "stable focus", "unstable node", "unstable focus",
               "saddle", "saddle-focus", "center", "non-hyperbolic")
STABILITY_NAMES = ("stable", "unstable", "undetermined")

CLASS_CODES = {name: code for code, name in enumerate(CLASS_NAMES)}
STABILITY_CODES = {name: code for code, name in enumerate(STABILITY_NAMES)}

_STABLE_NODE, _STABLE_FOCUS, _UNSTABLE_NODE, _UNSTABLE_FOCUS, _SADDLE, \
    _SADDLE_FOCUS, _CENTER, _NON_HYPERBOLIC = range(len(CLASS_NAMES))
_STABLE, _UNSTABLE, _UNDETERMINED = range(len(STABILITY_NAMES))

_NEWTON_STEPS = 1
_CHUNK = 8192
# closed-form 3x3 eigenvalues must be within this many eps*||J|| of exact, else LAPACK
_ACCURACY_FACTOR = 64.0


@dataclass(frozen=True, eq=False)
class Classification:
    """Eigenvalues and class of each Jacobian in a stack of ``B`` matrices of size ``d``.

    Attributes
    ----------
    eigenvalues : ndarray of complex, shape (B, d)
        Sorted by descending real part, ties by descending imaginary part.  NaN for a
        matrix with non-finite entries.
    class_code : ndarray of int8, shape (B,)
        Index into `CLASS_NAMES`.
    stability_code : ndarray of int8, shape (B,)
        Index into `STABILITY_NAMES`.
    margin : ndarray of float, shape (B,)
        ``-max Re(lambda)``: positive for a stable steady state.  ``+inf`` when
        ``d == 0``, NaN for non-finite matrices.
    oscillatory : ndarray of bool, shape (B,)
        Some eigenvalue is complex beyond the tolerance.
    trace, determinant, discriminant : ndarray of float, shape (B,)
        ``T``, ``D`` and ``T**2 - 4*D`` for ``d == 2``; NaN otherwise.
    zero_eigenvalue : ndarray of bool, shape (B,)
        Some real eigenvalue is zero within its uncertainty (the steady state may lie
        on a continuum).
    """

    eigenvalues: np.ndarray
    class_code: np.ndarray
    stability_code: np.ndarray
    margin: np.ndarray
    oscillatory: np.ndarray
    trace: np.ndarray
    determinant: np.ndarray
    discriminant: np.ndarray
    zero_eigenvalue: np.ndarray | None = None

    @property
    def class_names(self) -> np.ndarray:
        """Class of each matrix as a string array."""
        return np.asarray(CLASS_NAMES)[self.class_code]

    @property
    def stability_names(self) -> np.ndarray:
        """Stability of each matrix as a string array."""
        return np.asarray(STABILITY_NAMES)[self.stability_code]


class _Spectrum(NamedTuple):
    """Eigenvalues of ``J / scale`` component-major: row k holds eigenvalue k."""

    re: np.ndarray       # (d, B), sorted by descending real part, then imaginary part
    im: np.ndarray       # (d, B)
    scale: np.ndarray    # (B,) exact powers of two
    norm: np.ndarray     # (B,) Frobenius norm of J / scale
    finite: np.ndarray   # (B,) bool, all entries of J finite
    trace: np.ndarray    # (B,) of J / scale (d == 2 only, else NaN)
    det: np.ndarray
    disc: np.ndarray

    def eigenvalues(self) -> np.ndarray:
        """Eigenvalues of J as a (B, d) complex array."""
        lam = np.empty(self.re.shape[::-1], dtype=complex)
        lam.real = (self.re * self.scale).T
        lam.imag = (self.im * self.scale).T
        return lam


def eigenvalues(jacobians: np.ndarray) -> np.ndarray:
    """Eigenvalues of a stack of real square matrices.

    Parameters
    ----------
    jacobians : array_like, shape (B, d, d)
        Real matrices.

    Returns
    -------
    ndarray of complex, shape (B, d)
        Eigenvalues of each matrix, sorted by descending real part and, for equal
        real parts, descending imaginary part.  Rows of matrices with non-finite
        entries are NaN.

    Raises
    ------
    ValueError
        If the input is not a real array of shape (B, d, d).
    """
    return _spectrum(_as_stack(jacobians)).eigenvalues()


def classify(jacobians: np.ndarray, term_sizes: np.ndarray | None = None,
             rtol: float = 1e-9) -> Classification:
    """Classify steady states from their Jacobians.

    Rules (docs/methods.md, the classification table): all ``Re lambda < 0`` is a stable node,
    or a stable focus when some eigenvalue is complex; all ``Re lambda > 0`` an unstable
    node or focus; both signs a saddle or saddle-focus (unstable); in two dimensions a
    pure imaginary pair is a center (undetermined); any other zero real part is
    non-hyperbolic, unstable if some ``Re lambda > 0`` and undetermined otherwise.
    A matrix with non-finite entries is non-hyperbolic and undetermined, margin NaN.

    For ``d == 0`` (every direction removed by conservation laws) the class is
    "stable node", stable, margin ``+inf``: the conservation class is the single
    state itself, so every admissible perturbation is zero and stays zero; the
    rules above agree, as "all eigenvalues negative" holds vacuously.

    "Zero" is judged against what the entries of J can be trusted to: each entry is
    uncertain by ``rtol`` times the size of its terms (`term_sizes`, the sum of the
    absolute values of the terms that make it up, which may cancel; default ``|J|``).
    That uncertainty ``E`` moves an eigenvalue by at most (to first order)
    ``|y|^T E |x| / |y^H x|`` for its right and left eigenvectors x, y, and by
    about ``sqrt(rho(E J))`` where it is (nearly) defective; a real or imaginary part
    within that is zero (see the module notes). Both bounds change with the units of
    time and of each state exactly as the eigenvalues do, so the class never depends
    on the units a model is written in.

    Parameters
    ----------
    jacobians : array_like, shape (B, d, d)
        Real Jacobians, restricted to the conservation class.
    term_sizes : array_like, shape (B, d, d), optional
        Size of the terms of each entry (``>= |J|``); default ``|J|``.
    rtol : float, default 1e-9
        Relative uncertainty of an entry, in units of its term size.

    Returns
    -------
    Classification

    Raises
    ------
    ValueError
        If the input is not a real array of shape (B, d, d) or rtol is not >= 0.
    """
    if not (np.isfinite(rtol) and rtol >= 0):
        raise ValueError(f"rtol must be a finite number >= 0, got {rtol!r}")
    stack = _as_stack(jacobians)
    dim = stack.shape[1]
    spec = _spectrum(stack)
    re, im, scale = spec.re, spec.im, spec.scale
    sizes = np.abs(stack) if term_sizes is None else np.maximum(np.abs(stack), np.asarray(term_sizes, float))
    with np.errstate(all="ignore"):
        error = np.where(np.isfinite(sizes), rtol * sizes, 0.0) / scale[:, None, None]
    unit = stack / scale[:, None, None]

    if dim == 2:
        neg, pos, zero, some_complex, zero_eig = _verdict2(unit, error, spec)
    else:
        if dim == 1:
            bound = error[:, 0, 0][None]
        elif dim >= 3:
            re, im, bound = _spectrum_with_uncertainty(unit, error, spec.finite)
            re[:, ~spec.finite] = np.nan
            im[:, ~spec.finite] = np.nan
        else:
            bound = np.zeros((0, unit.shape[0]))
        neg, pos = re < -bound, re > bound
        zero = ~(neg | pos)
        imaginary = np.abs(im) > bound
        some_complex = imaginary.any(axis=0)
        zero_eig = (zero & ~imaginary).any(axis=0)
    all_neg = neg.all(axis=0)                       # vacuously true for d == 0
    all_pos = pos.all(axis=0)                       # d == 0: all_neg wins below
    center = zero.all(axis=0) & some_complex & (dim == 2)
    # codes 0..5 are (stable, unstable, saddle) x (node, focus): base + complex flag
    hyperbolic = (np.where(all_neg, _STABLE_NODE, np.where(all_pos, _UNSTABLE_NODE, _SADDLE))
                  + some_complex)
    class_code = np.where(zero.any(axis=0), np.where(center, _CENTER, _NON_HYPERBOLIC),
                          hyperbolic).astype(np.int8)
    stability_code = np.where(all_neg, _STABLE, np.where(pos.any(axis=0), _UNSTABLE,
                                                         _UNDETERMINED)).astype(np.int8)
    margin = 0.0 - np.max(re, axis=0, initial=-np.inf) * scale   # 0.0 - x: no -0.0
    oscillatory = some_complex.copy()

    bad = ~spec.finite
    if bad.any():
        class_code[bad] = _NON_HYPERBOLIC
        stability_code[bad] = _UNDETERMINED
        margin[bad] = np.nan
        oscillatory[bad] = False
        zero_eig[bad] = False
    # NaN unless d == 2 (set so by _spectrum)
    with np.errstate(over="ignore"):
        trace = spec.trace * scale
        det = spec.det * scale ** 2
        disc = spec.disc * scale ** 2

    lam = np.empty(re.shape[::-1], dtype=complex)
    lam.real, lam.imag = (re * scale).T, (im * scale).T
    return Classification(eigenvalues=lam, class_code=class_code,
                          stability_code=stability_code, margin=margin,
                          oscillatory=oscillatory, trace=trace, determinant=det,
                          discriminant=disc, zero_eigenvalue=zero_eig)


def _verdict2(unit: np.ndarray, error: np.ndarray, spec: _Spectrum):
    """Signs for 2x2 matrices from trace, determinant and discriminant, each against
    its first-order uncertainty from the entries' (componentwise, so unchanged by a
    diagonal change of units). Returns per eigenvalue (2, B): negative, positive, zero
    real part; per matrix: some eigenvalue complex, a real eigenvalue zero."""
    a, b, c, d = unit[:, 0, 0], unit[:, 0, 1], unit[:, 1, 0], unit[:, 1, 1]
    ea, eb, ec, ed = error[:, 0, 0], error[:, 0, 1], error[:, 1, 0], error[:, 1, 1]
    with np.errstate(all="ignore"):
        return _signs2(a, b, c, d, ea, eb, ec, ed, spec)


def _signs2(a, b, c, d, ea, eb, ec, ed, spec: _Spectrum):
    d_trace = ea + ed
    d_det = np.abs(a) * ed + np.abs(d) * ea + np.abs(b) * ec + np.abs(c) * eb + ea * ed + eb * ec
    d_disc = 2.0 * np.abs(a - d) * (ea + ed) + 4.0 * (np.abs(b) * ec + np.abs(c) * eb) + (ea + ed) ** 2
    trace, det, disc = spec.trace, spec.det, spec.disc
    some_complex = -disc > d_disc
    saddle = det < -d_det
    singular = np.abs(det) <= d_det          # a zero eigenvalue
    negative = trace < -d_trace
    positive = trace > d_trace
    # saddle: one eigenvalue of each sign (sorted: the first is the larger)
    # det > 0: both share the sign of the trace; det ~ 0: one zero, the other ~ trace
    neg = np.stack([np.where(saddle, False, ~singular & negative),
                    np.where(saddle, True, negative)])
    pos = np.stack([np.where(saddle, True, positive),
                    np.where(saddle, False, ~singular & positive)])
    zero = ~(neg | pos)
    return neg, pos, zero, some_complex & ~saddle, singular


def _spectrum_with_uncertainty(unit: np.ndarray, error: np.ndarray, finite: np.ndarray):
    """Eigenvalues (rows (d, B), sorted as `_spectrum` sorts them) of matrices of size
    d >= 3 and how far each can be off: the first-order effect ``|y|^T E |x|`` of the
    entries' uncertainty E (right eigenvectors x, rows y of their inverse, so y x = 1)
    plus LAPACK's own rounding (``eps ||J|| ||x|| ||y||`` on the balanced matrix), the
    first capped by ``sqrt(rho(E |J|))``, the size of the split of a (nearly) defective
    eigenvalue. Every term is unchanged by a diagonal change of units (the balanced
    matrix is, up to powers of two) and scales with the time unit like the eigenvalues."""
    batch, dim = unit.shape[:2]
    safe = np.where(finite[:, None, None], unit, 0.0)
    balanced, error = _balance(safe, error)
    eps = np.finfo(float).eps
    with np.errstate(all="ignore"):
        lam, right = np.linalg.eig(balanced)
        left = _inverse(right)
        first = np.einsum("bki,bij,bjk->bk", np.abs(left), error, np.abs(right))
        condition = np.linalg.norm(left, axis=2) * np.linalg.norm(right, axis=1)
        rounding = 16.0 * dim * eps * np.linalg.norm(balanced, axis=(1, 2))[:, None] * condition
        first = np.where(np.isfinite(first), first, np.inf)
        # a (nearly) defective eigenvalue: its first-order bound blows up, cap it
        wide = np.flatnonzero((first > np.abs(lam)).any(axis=1))
        if wide.size:
            coupled = np.abs(np.linalg.eigvals(error[wide] @ np.abs(balanced[wide]))).max(axis=1)
            first[wide] = np.minimum(first[wide], np.sqrt(coupled)[:, None])
            rounding[wide] = np.minimum(rounding[wide], np.sqrt(eps) * np.linalg.norm(
                balanced[wide], axis=(1, 2))[:, None])
        bound = first + np.where(np.isfinite(rounding), rounding, 0.0)
    order = np.lexsort((-lam.imag, -lam.real), axis=-1)
    lam = np.take_along_axis(lam, order, axis=-1)
    bound = np.take_along_axis(bound, order, axis=-1)
    return lam.real.T.copy(), lam.imag.T.copy(), bound.T.copy()


def _balance(m: np.ndarray, error: np.ndarray, sweeps: int = 8):
    """Diagonal similarity by powers of two (exact) equalising each row's and column's
    off-diagonal size (Osborne's iteration, as LAPACK's balancing does), applied to the
    matrices and to their entries' uncertainty alike."""
    m, error = m.copy(), error.copy()
    for _ in range(sweeps):
        for i in range(m.shape[1]):
            column = np.abs(m[:, :, i]).sum(axis=1) - np.abs(m[:, i, i])
            row = np.abs(m[:, i, :]).sum(axis=1) - np.abs(m[:, i, i])
            with np.errstate(divide="ignore", invalid="ignore"):
                f = np.exp2(np.round(0.5 * np.log2(row / column)))
            f = np.where(np.isfinite(f) & (column > 0) & (row > 0), f, 1.0)
            m[:, :, i] *= f[:, None]
            m[:, i, :] /= f[:, None]
            error[:, :, i] *= f[:, None]
            error[:, i, :] /= f[:, None]
    return m, error


def _inverse(v: np.ndarray) -> np.ndarray:
    """Batched inverse; singular matrices give inf (their eigenvalues are defective)."""
    try:
        return np.linalg.inv(v)
    except np.linalg.LinAlgError:
        out = np.full(v.shape, np.inf, dtype=v.dtype)
        for i, mat in enumerate(v):
            try:
                out[i] = np.linalg.inv(mat)
            except np.linalg.LinAlgError:
                pass
        return out


def _as_stack(jacobians) -> np.ndarray:
    arr = np.asarray(jacobians)
    if arr.ndim != 3 or arr.shape[1] != arr.shape[2]:
        raise ValueError(f"expected a stack of square matrices of shape (B, d, d), "
                         f"got shape {arr.shape}")
    if np.iscomplexobj(arr):
        raise ValueError("expected real matrices, got a complex array")
    try:
        return arr.astype(np.float64, copy=False)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"expected a real numeric array, got dtype {arr.dtype}") from exc


def _spectrum(stack: np.ndarray) -> _Spectrum:
    """Sorted eigenvalues of ``J / scale`` with ``scale`` an exact power of two."""
    n_mat, dim = stack.shape[:2]
    # component-major copy: row i*d + j holds entry (i, j) of every matrix, so all
    # arithmetic and reductions run over long contiguous arrays, not tiny matrices
    comp = np.ascontiguousarray(stack.reshape(n_mat, dim * dim).T)
    finite = np.isfinite(comp).all(axis=0)
    if not finite.all():
        comp = np.where(finite, comp, 0.0)
    if dim == 0:
        scale = np.ones(n_mat)
    else:
        # max |entry| of J / scale lies in [0.5, 1): no overflow in squares and cubes
        # (the exponent is capped so that 2**e itself stays finite near the float maximum)
        scale = np.ldexp(1.0, np.minimum(np.frexp(np.abs(comp).max(axis=0))[1], 1023))
        comp = comp / scale                 # never in place: comp may view the input
    norm = np.sqrt(np.einsum("kb,kb->b", comp, comp))
    parts = comp.reshape(dim, dim, n_mat)

    nan = np.full(n_mat, np.nan)
    trace, det, disc = nan, nan.copy(), nan.copy()
    if dim <= 1:
        re, im = parts[0].copy() if dim else np.zeros((0, n_mat)), np.zeros((dim, n_mat))
    elif dim == 2:
        re, im, trace, det, disc = _eig2(parts)
    elif dim == 3:
        re, im = np.empty((3, n_mat)), np.empty((3, n_mat))
        # in cache-sized chunks: the closed form is many passes over short arrays
        for start in range(0, n_mat, _CHUNK):
            part = slice(start, start + _CHUNK)
            re[:, part], im[:, part] = _eig3(parts[:, :, part], norm[part])
        _sort3(re, im)
    else:
        lam = _eig_lapack(parts.transpose(2, 0, 1))
        lam = np.take_along_axis(lam, np.lexsort((-lam.imag, -lam.real), axis=-1), axis=-1)
        re, im = np.ascontiguousarray(lam.real.T), np.ascontiguousarray(lam.imag.T)

    bad = ~finite
    if bad.any():
        for arr in (re, im):
            arr[:, bad] = np.nan
        for arr in (trace, det, disc):
            arr[bad] = np.nan
    return _Spectrum(re, im, scale, norm, finite, trace, det, disc)


def _sort3(re: np.ndarray, im: np.ndarray) -> None:
    """Sort three rows in place, per column: descending real, then imaginary part."""
    for i, j in ((0, 1), (1, 2), (0, 1)):              # a sorting network for three
        swap = (re[i] < re[j]) | ((re[i] == re[j]) & (im[i] < im[j]))
        for arr in (re, im):
            arr[i], arr[j] = np.where(swap, arr[j], arr[i]), np.where(swap, arr[i], arr[j])


def _eig2(m: np.ndarray):
    """Closed-form eigenvalues of 2x2 matrices, given component-major as (2, 2, B).

    Returns real and imaginary parts as (2, B) rows in the sort order, then trace,
    determinant and discriminant.
    """
    a, b, c, d = m[0, 0], m[0, 1], m[1, 0], m[1, 1]
    trace = a + d
    det = a * d - b * c
    disc = (a - d) ** 2 + 4.0 * b * c          # = trace**2 - 4*det, without cancellation
    real = disc >= 0
    root = np.sqrt(np.abs(disc))
    # larger-magnitude real root first (no cancellation), the other from the product
    big = 0.5 * (trace + np.copysign(root, trace))
    small = _safe_divide(det, big)
    half_trace = 0.5 * trace
    re = np.stack([np.where(real, np.maximum(big, small), half_trace),
                   np.where(real, np.minimum(big, small), half_trace)])
    im_top = np.where(real, 0.0, 0.5 * root)
    im = np.stack([im_top, 0.0 - im_top])
    return re, im, trace, det, disc


def _eig3(m: np.ndarray, norm: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Closed-form eigenvalues of 3x3 matrices, given component-major as (3, 3, B).

    ``norm`` holds their Frobenius norms.  Returns real and imaginary parts as (3, B)
    rows, unsorted.
    """
    eps = np.finfo(float).eps
    shift = (m[0, 0] + m[1, 1] + m[2, 2]) / 3.0
    m00, m11, m22 = m[0, 0] - shift, m[1, 1] - shift, m[2, 2] - shift
    m01, m02, m10, m12, m20, m21 = m[0, 1], m[0, 2], m[1, 0], m[1, 2], m[2, 0], m[2, 1]
    # characteristic polynomial of the trace-free part: t**3 + p*t + q
    terms_p = (m11 * m22, m12 * m21, m00 * m11, m01 * m10, m00 * m22, m02 * m20)
    p = terms_p[0] - terms_p[1] + terms_p[2] - terms_p[3] + terms_p[4] - terms_p[5]
    cof = (terms_p[0] - terms_p[1], m10 * m22 - m12 * m20, m10 * m21 - m11 * m20)
    q = -(m00 * cof[0] - m01 * cof[1] + m02 * cof[2])

    r = _cubic_outer_root(p, q)
    for _ in range(_NEWTON_STEPS):
        # Newton on the simple root; keep a step only where it lowers the residual
        res = (r * r + p) * r + q
        cand = r - _safe_divide(res, 3.0 * r * r + p)
        r = np.where(np.abs((cand * cand + p) * cand + q) < np.abs(res), cand, r)

    # other two roots: t**2 + r*t + e0 with e0 their product, taken from whichever
    # expression does not cancel (-q/r when r dominates, r**2 + p otherwise)
    e0 = np.where((r * r >= np.abs(p)) & (r != 0), _safe_divide(-q, r), r * r + p)
    half = -0.5 * r
    quarter_disc = half * half - e0
    real = quarter_disc >= 0
    root = np.sqrt(np.abs(quarter_disc))
    big = half + np.copysign(root, half)
    small = _safe_divide(e0, big)
    # the three roots as (real, imaginary) parts; the pair is complex where ~real
    x = (r, np.where(real, big, half), np.where(real, small, half))
    y = (np.zeros_like(r), np.where(real, 0.0, root), np.where(real, 0.0, -root))

    # A-posteriori check.  The polynomial route is only as good as the roots are
    # well-conditioned with respect to its coefficients, which can be worse than their
    # conditioning with respect to J (e.g. one eigenvalue far larger than the other
    # two: the shift turns the small pair into a near-double root).  Estimate each
    # root's forward error as (residual + rounding in p and q) / |p'(t)| and hand the
    # matrices where it exceeds a small multiple of the backward-stable accuracy
    # eps*||J|| to LAPACK.
    p_abs = sum(np.abs(term) for term in terms_p)
    q_abs = (np.abs(m00) * (np.abs(terms_p[0]) + np.abs(terms_p[1]))
             + np.abs(m01) * (np.abs(m10 * m22) + np.abs(m12 * m20))
             + np.abs(m02) * (np.abs(m10 * m21) + np.abs(m11 * m20)))
    budget = (_ACCURACY_FACTOR * eps) * norm
    trusted = np.ones(r.shape[0], dtype=bool)
    for k in range(3):
        i, j = (k + 1) % 3, (k + 2) % 3
        xk, yk = x[k], y[k]
        modulus = _modulus(xk, yk)
        residual = _modulus(xk * (xk * xk - 3.0 * yk * yk + p) + q,
                            yk * (3.0 * xk * xk - yk * yk + p))
        rounding = 4.0 * eps * (modulus ** 3 + p_abs * modulus + q_abs)
        slope = _modulus(xk - x[i], yk - y[i]) * _modulus(xk - x[j], yk - y[j])
        # written so that a zero slope or a NaN fails the test
        trusted &= residual + rounding <= budget * slope

    re = np.stack(x) + shift
    im = np.stack(y)
    redo = ~trusted
    if redo.any():
        lam = _eig_lapack(m[:, :, redo].transpose(2, 0, 1))
        re[:, redo], im[:, redo] = lam.real.T, lam.imag.T
    return re, im


def _modulus(re: np.ndarray, im: np.ndarray) -> np.ndarray:
    """|re + i*im| for values of order one (np.hypot guards overflow, at 10x the cost)."""
    return np.sqrt(re * re + im * im)


def _safe_divide(num: np.ndarray, den: np.ndarray) -> np.ndarray:
    """``num / den``, and 0 where ``den == 0``."""
    nonzero = den != 0
    with np.errstate(over="ignore"):
        return np.where(nonzero, num / np.where(nonzero, den, 1.0), 0.0)


def _cubic_outer_root(p: np.ndarray, q: np.ndarray) -> np.ndarray:
    """A real root of t**3 + p*t + q that is simple unless all roots coincide.

    With three real roots, the one of largest magnitude (the other two sum to minus
    it, so it can only be repeated when all three are zero); with one real root, that.
    """
    half_q = 0.5 * q
    third_p = p / 3.0
    h = half_q * half_q + third_p ** 3
    sign_q = np.where(q >= 0, 1.0, -1.0)

    # one real root: Cardano, choosing the cube root that does not cancel
    u = -np.cbrt(half_q + sign_q * np.sqrt(np.maximum(h, 0.0)))
    one = u - _safe_divide(third_p, u)

    # three real roots: trigonometric form (p <= 0 here)
    m = np.sqrt(np.maximum(-third_p, 0.0))
    den = m * m * m
    arg = _safe_divide(np.abs(half_q), den)
    angle = np.arccos(np.minimum(arg, 1.0)) / 3.0
    three = -sign_q * 2.0 * m * np.cos(angle)

    return np.where(h > 0, one, three)


def _eig_lapack(m: np.ndarray) -> np.ndarray:
    try:
        return np.linalg.eigvals(m).astype(complex, copy=False)
    except np.linalg.LinAlgError:
        # QR iteration failed on some matrix (very rare): find which, one by one,
        # so one bad matrix does not cost the whole stack its eigenvalues
        lam = np.full(m.shape[:2], complex(np.nan, np.nan))
        for i, mat in enumerate(m):
            try:
                lam[i] = np.linalg.eigvals(mat)
            except np.linalg.LinAlgError:
                pass
        return lam
