"""Evaluation of compiled claims, vectorised over every parameter set at once.

A compiled claim is a small tree of the dataclasses below (built by
`poise.study.claims.compile_claim`, never by ``eval``). The condition inside an
aggregator is computed over every steady-state row of every set in one pass, and
the rows are folded per set with :func:`numpy.bincount`.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np


class Columns:
    """Where names get their values: per parameter set, or per steady-state row."""

    def __init__(self, steady, owner, sets, n_sets, *, per_row: bool):
        self.steady, self.owner, self.sets, self.n_sets = steady, owner, sets, n_sets
        self.per_row = per_row

    def rows(self) -> "Columns":
        return Columns(self.steady, self.owner, self.sets, self.n_sets, per_row=True)

    def parameter(self, name: str) -> np.ndarray:
        try:
            values = np.asarray(self.sets[name], dtype=float)
        except KeyError:
            raise ValueError(f"parameter table lacks column '{name}'") from None
        if values.shape != (self.n_sets,):
            raise ValueError(f"parameter column '{name}' has shape {values.shape}, "
                             f"expected ({self.n_sets},)")
        return values[self.owner] if self.per_row else values

    def steady_column(self, name: str, dtype) -> np.ndarray:
        try:
            values = np.asarray(self.steady[name], dtype=dtype)
        except KeyError:
            raise ValueError(f"steady-state table lacks column '{name}'") from None
        if values.shape != self.owner.shape:
            raise ValueError(f"steady-state column '{name}' has shape {values.shape}, "
                             f"expected {self.owner.shape}")
        return values


# Every node returns (value, undefined): `undefined` marks the elements whose value
# rests on a division by zero or a number out of range (not finite). Conditions use
# three-valued logic, so that an undefined part does not matter when the rest settles
# the answer ("false and ?" is false, "any" with one sure hit is true).

def _bad(value) -> np.ndarray:
    return ~np.isfinite(value)


def _either(masks) -> np.ndarray:
    """Element-wise "or" of masks of any broadcastable shapes."""
    return functools.reduce(np.logical_or, masks)


@dataclass(frozen=True)
class Number:
    value: float

    def evaluate(self, columns: Columns):
        return np.float64(self.value), np.False_


@dataclass(frozen=True)
class Parameter:
    name: str

    def evaluate(self, columns: Columns):
        values = columns.parameter(self.name)
        return values, _bad(values)


@dataclass(frozen=True)
class SteadyColumn:
    name: str
    is_flag: bool

    def evaluate(self, columns: Columns):
        values = columns.steady_column(self.name, bool if self.is_flag else float)
        return values, (np.False_ if self.is_flag else _bad(values))


@dataclass(frozen=True)
class Arithmetic:
    """``first op1 x1 op2 x2 ...`` applied left to right (flat, so long sums need no recursion)."""

    first: object
    steps: tuple  # ((op, operand), ...)

    def evaluate(self, columns: Columns):
        result, undefined = self.first.evaluate(columns)
        for op, operand in self.steps:
            value, unknown = operand.evaluate(columns)
            undefined = undefined | unknown
            if op == "+":
                result = result + value
            elif op == "-":
                result = result - value
            elif op == "*":
                result = result * value
            elif op == "/":
                result = result / value
            else:
                result = result ** value
        return result, undefined | _bad(result)


@dataclass(frozen=True)
class Negate:
    operand: object

    def evaluate(self, columns: Columns):
        value, undefined = self.operand.evaluate(columns)
        return -value, undefined


_NUMPY_FUNCTIONS = {"exp": np.exp, "log": np.log, "sqrt": np.sqrt, "abs": np.abs}


@dataclass(frozen=True)
class Function:
    name: str
    args: tuple

    def evaluate(self, columns: Columns):
        values, unknown = zip(*(arg.evaluate(columns) for arg in self.args))
        if self.name == "min":
            result = np.minimum.reduce(np.broadcast_arrays(*values))
        elif self.name == "max":
            result = np.maximum.reduce(np.broadcast_arrays(*values))
        else:
            result = _NUMPY_FUNCTIONS[self.name](values[0])
        return result, _either(unknown) | _bad(result)


@dataclass(frozen=True)
class Compare:
    ops: tuple
    operands: tuple

    def evaluate(self, columns: Columns):
        values, unknown = zip(*(operand.evaluate(columns) for operand in self.operands))
        result = np.True_
        for op, a, b in zip(self.ops, values, values[1:]):
            if op == "<":
                holds = a < b
            elif op == "<=":
                holds = a <= b
            elif op == ">":
                holds = a > b
            elif op == ">=":
                holds = a >= b
            elif op == "==":
                holds = a == b
            else:  # NaN is unequal to everything in IEEE terms; a claim calls it false
                holds = (a != b) & ~np.isnan(a) & ~np.isnan(b)
            result = result & holds
        return result, _either(unknown)


@dataclass(frozen=True)
class Logic:
    op: str  # "and" | "or"
    operands: tuple

    def evaluate(self, columns: Columns):
        values, unknown = zip(*(operand.evaluate(columns) for operand in self.operands))
        if self.op == "and":   # a sure "false" settles it
            result = functools.reduce(np.logical_and, values)
            settled = _either([~v & ~u for v, u in zip(values, unknown)])
        else:                  # a sure "true" settles it
            result = _either(values)
            settled = _either([v & ~u for v, u in zip(values, unknown)])
        return result, _either(unknown) & ~settled


@dataclass(frozen=True)
class Not:
    operand: object

    def evaluate(self, columns: Columns):
        value, undefined = self.operand.evaluate(columns)
        return np.logical_not(value), undefined


@dataclass(frozen=True)
class Aggregate:
    kind: str                 # "any" | "all" | "none" | "count"
    condition: object | None  # None: count() of every steady state

    def evaluate(self, columns: Columns):
        owner, n_sets = columns.owner, columns.n_sets
        if self.condition is None:
            return np.bincount(owner, minlength=n_sets).astype(float), np.False_
        holds, unknown = self.condition.evaluate(columns.rows())
        holds, unknown = np.broadcast_to(holds, owner.shape), np.broadcast_to(unknown, owner.shape)

        def per_set(rows):
            return np.bincount(owner[rows], minlength=n_sets)

        unknowns = per_set(unknown) > 0
        if self.kind == "all":
            return per_set(~holds) == 0, unknowns & (per_set(~holds & ~unknown) == 0)
        hits, sure = per_set(holds), per_set(holds & ~unknown) > 0
        if self.kind == "any":
            return hits > 0, unknowns & ~sure
        if self.kind == "none":
            return hits == 0, unknowns & ~sure
        return hits.astype(float), unknowns
