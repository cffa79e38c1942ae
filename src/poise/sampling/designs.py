"""Sampling designs: which points of the unit cube become parameter sets.

Three kinds of point sets: ``"random"`` (numpy Generator), ``"lhs"`` (Latin
hypercube) and ``"sobol"`` (scrambled Sobol' sequence), all seeded. For Sobol
sensitivity indices the design is the Saltelli-type cross design of SALib
(``SALib.sample.sobol.sample``): per base row, the rows ``A``, ``AB:<p>`` for each
parameter ``p``, (``BA:<p>`` with second order), then ``B``.

Only the unit cube is handled here; `map_to_parameters` sends it through each
parameter's inverse CDF.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from scipy.stats import qmc

from poise.errors import SOBOL_BALANCE_WARNING
from poise.sampling.distributions import Distribution

KINDS = ("random", "lhs", "sobol")

# Points are kept this far from 0 and 1 so that inverse CDFs of unbounded
# distributions stay finite (about 8.1 standard deviations for a normal).
_EPS = float(np.finfo(float).eps)


@dataclass(frozen=True)
class Design:
    """Points of the open unit cube, one row per parameter set.

    Attributes
    ----------
    unit : numpy.ndarray
        Shape ``(n_rows, k)``, values in ``[eps, 1 - eps]``.
    block : numpy.ndarray
        One string per row: ``"draw"`` for plain designs; ``"A"``, ``"B"``,
        ``"AB:<param>"`` and ``"BA:<param>"`` for a Sobol-index design.
    independent : numpy.ndarray
        Boolean per row: usable as an independent draw for probabilities
        (plain design: all rows; Sobol-index design: the ``A`` and ``B`` rows).
    names : tuple of str
        Uncertain parameter names, in column order.
    kind : str
        ``"random"``, ``"lhs"`` or ``"sobol"``: how the base points were drawn.
    base_size : int
        The base sample size N.
    second_order : bool
        Whether the design carries the ``BA`` rows for second-order indices.
    """

    unit: np.ndarray
    block: np.ndarray
    independent: np.ndarray
    names: tuple[str, ...]
    kind: str
    base_size: int
    second_order: bool

    @property
    def n_rows(self) -> int:
        """Number of parameter sets."""
        return int(self.unit.shape[0])

    @property
    def for_sobol_indices(self) -> bool:
        """True for a Saltelli-type design (rows come in A/AB/(BA)/B groups)."""
        return bool(self.n_rows) and self.block[0] != "draw"


def _base_points(kind: str, size: int, dim: int, seed: int) -> np.ndarray:
    """``size`` points of the unit cube in ``dim`` dimensions."""
    rng = np.random.default_rng(seed)
    if kind == "random":
        return rng.random((size, dim))
    if kind == "lhs":
        return qmc.LatinHypercube(d=dim, rng=rng).random(size)
    # Sobol: the sequence is balanced only for powers of 2. For any other size we
    # take the first `size` points anyway (the user asked for that many sets) and
    # silence scipy's balance warning; choose a power of 2 for the best accuracy.
    engine = qmc.Sobol(d=dim, scramble=True, rng=rng)
    if size & (size - 1) == 0:
        return engine.random_base2(int(size).bit_length() - 1)
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=SOBOL_BALANCE_WARNING)
        return engine.random(size)


def _saltelli_rows(base: np.ndarray, k: int, second_order: bool) -> tuple[np.ndarray, int]:
    """Cross design from base points ``[A | B]`` of shape (N, 2k), in SALib's row order.

    Vectorised over base rows (SALib builds the same matrix element by element).
    """
    a, b = base[:, :k], base[:, k:]
    per_row = 2 * k + 2 if second_order else k + 2
    out = np.empty((base.shape[0], per_row, k))
    out[:, 0] = a
    for j in range(k):
        out[:, 1 + j] = a
        out[:, 1 + j, j] = b[:, j]
        if second_order:
            out[:, 1 + k + j] = b
            out[:, 1 + k + j, j] = a[:, j]
    out[:, -1] = b
    return out.reshape(-1, k), per_row


def make_design(names: Sequence[str], kind: str, size: int, seed: int,
                sobol_indices: bool, second_order: bool = False) -> Design:
    """Draw the parameter-set design in the unit cube.

    Parameters
    ----------
    names : sequence of str
        Uncertain parameter names (column order).
    kind : {"random", "lhs", "sobol"}
        How points are drawn. With ``sobol_indices`` the kind draws the ``2k``
        columns of the base matrices ``[A | B]``; ``"sobol"`` then reproduces
        ``SALib.sample.sobol.sample(problem, size, calc_second_order=second_order,
        seed=numpy.random.default_rng(seed))`` on ``[0, 1]^k`` exactly (scrambled,
        no skipped points, as SALib recommends).
    size : int
        Plain design: number of rows. Sobol-index design: the base size N, giving
        ``N*(k+2)`` rows, or ``N*(2k+2)`` with ``second_order``.
    seed : int
        Seed; the same seed gives the same design.
    sobol_indices : bool
        Build the Saltelli-type cross design for Sobol indices.
    second_order : bool, optional
        Add the ``BA`` rows needed for second-order indices.

    Returns
    -------
    Design
        With no uncertain parameter (``k == 0``) the design is ``size`` rows of an
        empty ``(size, 0)`` array, all ``"draw"`` and independent: there is nothing
        to vary and nothing to attribute, so no cross design is built.

    Notes
    -----
    For ``"sobol"`` a size that is not a power of 2 is accepted as is (the first
    ``size`` points of the scrambled sequence, scipy's balance warning silenced);
    powers of 2 keep the sequence's balance properties.
    """
    if kind not in KINDS:
        raise ValueError(f"unknown design {kind!r}; expected one of {', '.join(KINDS)}")
    size = int(size)
    if size < 1:
        raise ValueError(f"design size must be at least 1, got {size}")
    names = tuple(names)
    k = len(names)

    if k == 0 or not sobol_indices:
        unit = _base_points(kind, size, k, seed) if k else np.empty((size, 0))
        return Design(unit=np.clip(unit, _EPS, 1 - _EPS),
                      block=np.full(size, "draw", dtype=object),
                      independent=np.ones(size, dtype=bool),
                      names=names, kind=kind, base_size=size, second_order=False)

    base = _base_points(kind, size, 2 * k, seed)
    unit, per_row = _saltelli_rows(base, k, second_order)
    labels = ["A"] + [f"AB:{p}" for p in names]
    if second_order:
        labels += [f"BA:{p}" for p in names]
    labels.append("B")
    block = np.array(labels * size, dtype=object)
    independent = (block == "A") | (block == "B")
    return Design(unit=np.clip(unit, _EPS, 1 - _EPS), block=block,
                  independent=np.asarray(independent, dtype=bool), names=names,
                  kind=kind, base_size=size, second_order=bool(second_order))


def map_to_parameters(design: Design, distributions: Mapping[str, Distribution]) -> np.ndarray:
    """Parameter values of every design row.

    Parameters
    ----------
    design : Design
    distributions : mapping of str to Distribution
        One entry per name in ``design.names`` (extra entries are ignored).

    Returns
    -------
    numpy.ndarray
        Shape ``(design.n_rows, k)``; column ``j`` is
        ``distributions[design.names[j]].ppf(design.unit[:, j])``.
    """
    missing = [n for n in design.names if n not in distributions]
    if missing:
        raise KeyError(f"no distribution for {', '.join(missing)}")
    values = np.empty(design.unit.shape, dtype=float)
    for j, name in enumerate(design.names):
        values[:, j] = distributions[name].ppf(design.unit[:, j])
    return values
