"""Claims: boolean statements about the steady states of each parameter set.

A claim such as ``count(stable) >= 2`` or ``any(stable and G > 1e-9)`` is compiled
once from study-file text into a small tree of plain dataclasses (never
``eval``), type-checked, and then evaluated for all parameter sets at once: the
condition inside an aggregator is computed over every steady-state row of every
set in one vectorised pass, and the rows are folded per set with
:func:`numpy.bincount`.
"""

from __future__ import annotations

import ast
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from poise.errors import ExpressionError
from poise.study.expressions import (check_call, check_name, literal_number,
                                     quote_source, refusal, syntax_tree)

__all__ = ["STEADY_FLAGS", "STEADY_NUMBERS", "AGGREGATORS", "Claim", "compile_claim"]

STEADY_FLAGS = ("stable", "unstable", "undetermined", "node", "focus", "saddle", "oscillatory")
STEADY_NUMBERS = ("margin",)
AGGREGATORS = ("any", "all", "none", "count")

_FUNCTION_ARITY = {"exp": (1, 1), "log": (1, 1), "sqrt": (1, 1), "abs": (1, 1),
                   "min": (2, None), "max": (2, None)}
_AGGREGATOR_ARITY = {"any": (1, 1), "all": (1, 1), "none": (1, 1), "count": (0, 1)}
_CALL_ARITY = {**_FUNCTION_ARITY, **_AGGREGATOR_ARITY}

_ARITHMETIC = {ast.Add: "+", ast.Sub: "-", ast.Mult: "*", ast.Div: "/", ast.Pow: "**"}
_COMPARISONS = {ast.Lt: "<", ast.LtE: "<=", ast.Gt: ">", ast.GtE: ">=",
                ast.Eq: "==", ast.NotEq: "!="}

BOOL, NUMBER = "true/false", "number"


# --------------------------------------------------------------------------- evaluation

class _Columns:
    """Where names get their values: per parameter set, or per steady-state row."""

    def __init__(self, steady, owner, sets, n_sets, *, per_row: bool):
        self.steady, self.owner, self.sets, self.n_sets = steady, owner, sets, n_sets
        self.per_row = per_row

    def rows(self) -> "_Columns":
        return _Columns(self.steady, self.owner, self.sets, self.n_sets, per_row=True)

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


@dataclass(frozen=True)
class _Number:
    value: float

    def evaluate(self, columns: _Columns):
        return np.float64(self.value)


@dataclass(frozen=True)
class _Parameter:
    name: str

    def evaluate(self, columns: _Columns):
        return columns.parameter(self.name)


@dataclass(frozen=True)
class _SteadyColumn:
    name: str
    is_flag: bool

    def evaluate(self, columns: _Columns):
        return columns.steady_column(self.name, bool if self.is_flag else float)


@dataclass(frozen=True)
class _Arithmetic:
    """``first op1 x1 op2 x2 ...`` applied left to right (flat, so long sums need no recursion)."""

    first: object
    steps: tuple  # ((op, operand), ...)

    def evaluate(self, columns: _Columns):
        result = self.first.evaluate(columns)
        for op, operand in self.steps:
            value = operand.evaluate(columns)
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
        return result


@dataclass(frozen=True)
class _Negate:
    operand: object

    def evaluate(self, columns: _Columns):
        return -self.operand.evaluate(columns)


_NUMPY_FUNCTIONS = {"exp": np.exp, "log": np.log, "sqrt": np.sqrt, "abs": np.abs}


@dataclass(frozen=True)
class _Function:
    name: str
    args: tuple

    def evaluate(self, columns: _Columns):
        values = [arg.evaluate(columns) for arg in self.args]
        if self.name == "min":
            return np.minimum.reduce(np.broadcast_arrays(*values))
        if self.name == "max":
            return np.maximum.reduce(np.broadcast_arrays(*values))
        return _NUMPY_FUNCTIONS[self.name](values[0])


@dataclass(frozen=True)
class _Compare:
    ops: tuple
    operands: tuple

    def evaluate(self, columns: _Columns):
        values = [operand.evaluate(columns) for operand in self.operands]
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
        return result


@dataclass(frozen=True)
class _Logic:
    op: str  # "and" | "or"
    operands: tuple

    def evaluate(self, columns: _Columns):
        combine = np.logical_and if self.op == "and" else np.logical_or
        return combine.reduce(np.broadcast_arrays(
            *[operand.evaluate(columns) for operand in self.operands]))


@dataclass(frozen=True)
class _Not:
    operand: object

    def evaluate(self, columns: _Columns):
        return np.logical_not(self.operand.evaluate(columns))


@dataclass(frozen=True)
class _Aggregate:
    kind: str                 # "any" | "all" | "none" | "count"
    condition: object | None  # None: count() of every steady state

    def evaluate(self, columns: _Columns):
        owner, n_sets = columns.owner, columns.n_sets
        if self.condition is None:
            return np.bincount(owner, minlength=n_sets).astype(float)
        holds = np.broadcast_to(self.condition.evaluate(columns.rows()), owner.shape)
        if self.kind == "all":
            failing = np.bincount(owner[~holds], minlength=n_sets)
            return failing == 0
        hits = np.bincount(owner[holds], minlength=n_sets)
        if self.kind == "any":
            return hits > 0
        if self.kind == "none":
            return hits == 0
        return hits.astype(float)


# --------------------------------------------------------------------------- the claim

@dataclass(frozen=True)
class Claim:
    """A compiled claim; build it with :func:`compile_claim`.

    Attributes
    ----------
    name : str
        The claim's name from the study file.
    holds : str
        The claim's text.
    """

    name: str
    holds: str
    _program: object = field(default=None, repr=False, compare=False)

    def evaluate(self, steady: Mapping[str, np.ndarray], owner: np.ndarray,
                 sets: Mapping[str, np.ndarray], n_sets: int) -> np.ndarray:
        """Whether the claim holds for each parameter set.

        Parameters
        ----------
        steady : mapping of str to numpy.ndarray
            Columns over the steady-state rows of all sets together: each state
            name (float), each of :data:`STEADY_FLAGS` (bool) and ``margin`` (float).
            Only the columns the claim uses are read.
        owner : numpy.ndarray of int
            For each steady-state row, the index (0 .. n_sets-1) of its parameter set.
        sets : mapping of str to numpy.ndarray
            Parameter name to values, each of length `n_sets`.
        n_sets : int
            Number of parameter sets.

        Returns
        -------
        numpy.ndarray of bool, shape (n_sets,)

        Notes
        -----
        Over a set with no steady states, ``all(...)`` and ``none(...)`` are true,
        ``any(...)`` is false and ``count(...)`` is 0. Every comparison involving
        NaN is false, ``!=`` included.
        """
        if self._program is None:
            raise ValueError("this Claim was not built by compile_claim()")
        owner = np.asarray(owner)
        if owner.ndim != 1 or (owner.size and not np.issubdtype(owner.dtype, np.integer)):
            raise ValueError("owner must be a one-dimensional integer array")
        owner = owner.astype(np.intp, copy=False)
        if owner.size and (owner.min() < 0 or owner.max() >= n_sets):
            raise ValueError(f"owner holds set indices outside 0..{n_sets - 1}")
        columns = _Columns(steady, owner, sets, int(n_sets), per_row=False)
        with np.errstate(all="ignore"):
            result = self._program.evaluate(columns)
        return np.broadcast_to(np.asarray(result, dtype=bool), (int(n_sets),)).copy()


# --------------------------------------------------------------------------- compiler

class _Compiler:
    """Type-checks a claim's syntax tree and turns it into evaluation nodes."""

    def __init__(self, text: str, states: Sequence[str], parameters: Sequence[str]):
        self.text = text
        self.states = set(states)
        self.parameters = set(parameters)

    def quote(self, node: ast.AST) -> str:
        return quote_source(self.text, node)

    def compile(self, node: ast.expr, inside: bool) -> tuple[object, str]:
        """Evaluation node and its type (BOOL or NUMBER).

        `inside` says whether `node` stands inside an aggregator, where it is
        evaluated per steady state rather than per parameter set.
        """
        if isinstance(node, ast.Constant):
            return _Number(float(literal_number(node, self.text))), NUMBER
        if isinstance(node, ast.Name):
            return self.name(node, inside)
        if isinstance(node, ast.UnaryOp):
            operand, kind = self.compile(node.operand, inside)
            if isinstance(node.op, ast.Not):
                self.expect(kind, BOOL, node.operand, "'not' applies to")
                return _Not(operand), BOOL
            if isinstance(node.op, (ast.UAdd, ast.USub)):
                self.expect(kind, NUMBER, node.operand, "a sign applies to")
                return (_Negate(operand) if isinstance(node.op, ast.USub) else operand), NUMBER
            raise refusal(node, self.text)
        if isinstance(node, ast.BinOp):
            if type(node.op) not in _ARITHMETIC:
                raise refusal(node, self.text)
            # Left-leaning chains (a + b * c - d ...) are compiled iteratively.
            chain = [node]
            while (isinstance(chain[-1].left, ast.BinOp)
                   and type(chain[-1].left.op) in _ARITHMETIC):
                chain.append(chain[-1].left)
            first, kind = self.compile(chain[-1].left, inside)
            self.expect(kind, NUMBER, chain[-1].left,
                        f"arithmetic ('{_ARITHMETIC[type(chain[-1].op)]}') needs")
            steps = []
            for link in reversed(chain):
                op = _ARITHMETIC[type(link.op)]
                right, kind = self.compile(link.right, inside)
                self.expect(kind, NUMBER, link.right, f"arithmetic ('{op}') needs")
                steps.append((op, right))
            return _Arithmetic(first, tuple(steps)), NUMBER
        if isinstance(node, ast.Compare):
            operands = []
            for operand_node in (node.left, *node.comparators):
                operand, kind = self.compile(operand_node, inside)
                self.expect(kind, NUMBER, operand_node, "comparisons need")
                operands.append(operand)
            ops = []
            for op in node.ops:
                if type(op) not in _COMPARISONS:
                    raise ExpressionError(
                        f"only < <= > >= == != comparisons are allowed: {self.quote(node)}")
                ops.append(_COMPARISONS[type(op)])
            return _Compare(tuple(ops), tuple(operands)), BOOL
        if isinstance(node, ast.BoolOp):
            word = "and" if isinstance(node.op, ast.And) else "or"
            operands = []
            for operand_node in node.values:
                operand, kind = self.compile(operand_node, inside)
                self.expect(kind, BOOL, operand_node, f"'{word}' combines")
                operands.append(operand)
            return _Logic(word, tuple(operands)), BOOL
        if isinstance(node, ast.Call):
            return self.call(node, inside)
        raise refusal(node, self.text)

    def expect(self, kind: str, wanted: str, node: ast.AST, what: str) -> None:
        if kind != wanted:
            if wanted == BOOL:
                raise ExpressionError(
                    f"{what} conditions (true or false), but {self.quote(node)} is a number")
            raise ExpressionError(
                f"{what} numbers, but {self.quote(node)} is true or false")

    def name(self, node: ast.Name, inside: bool) -> tuple[object, str]:
        name = check_name(node, self.text)
        meanings = []
        if name in self.states:
            meanings.append("state")
        if name in self.parameters:
            meanings.append("parameter")
        if name in STEADY_FLAGS or name in STEADY_NUMBERS:
            meanings.append("steady-state property")
        if len(meanings) > 1:
            raise ExpressionError(
                f"'{name}' is ambiguous here: it is both a {' and a '.join(meanings)}; "
                f"rename the {meanings[0]}")
        if not meanings:
            if name in _CALL_ARITY:
                raise ExpressionError(f"'{name}' is a function; call it, e.g. {name}(...)")
            raise ExpressionError(f"unknown name '{name}'")  # caught earlier by _names_used
        meaning = meanings[0]
        if meaning == "parameter":
            return _Parameter(name), NUMBER
        if not inside:
            what = "state" if meaning == "state" else "steady-state property"
            raise ExpressionError(
                f"{what} '{name}' describes one steady state and can only be used "
                f"inside any(), all(), none() or count()")
        if name in STEADY_FLAGS:
            return _SteadyColumn(name, is_flag=True), BOOL
        return _SteadyColumn(name, is_flag=False), NUMBER

    def call(self, node: ast.Call, inside: bool) -> tuple[object, str]:
        name = check_call(node, _CALL_ARITY, self.text)
        if name in _AGGREGATOR_ARITY:
            if inside:
                raise ExpressionError(
                    f"aggregators cannot be nested: {self.quote(node)} stands inside "
                    f"another any(), all(), none() or count()")
            if not node.args:
                return _Aggregate("count", None), NUMBER
            condition, kind = self.compile(node.args[0], inside=True)
            if kind != BOOL:
                raise ExpressionError(
                    f"{name}() needs a condition that is true or false, but "
                    f"{self.quote(node.args[0])} is a number (e.g. write "
                    f"{name}({self.quote(node.args[0])} > 0))")
            return _Aggregate(name, condition), (NUMBER if name == "count" else BOOL)
        args = []
        for arg_node in node.args:
            arg, kind = self.compile(arg_node, inside)
            self.expect(kind, NUMBER, arg_node, f"{name}() needs")
            args.append(arg)
        return _Function(name, tuple(args)), NUMBER

    def allowed(self) -> str:
        parts = []
        if self.states:
            parts.append("states " + ", ".join(sorted(self.states)))
        if self.parameters:
            parts.append("parameters " + ", ".join(sorted(self.parameters)))
        parts.append("steady-state properties " + ", ".join(STEADY_FLAGS + STEADY_NUMBERS))
        return "; ".join(parts)


def _names_used(tree: ast.expr, text: str) -> set[str]:
    """Check a claim's syntax tree against the whitelist; return the names it uses."""
    found: set[str] = set()
    stack = [tree]
    while stack:
        node = stack.pop()
        if isinstance(node, ast.Constant):
            literal_number(node, text)
        elif isinstance(node, ast.Name):
            found.add(check_name(node, text))
        elif isinstance(node, ast.UnaryOp) and isinstance(
                node.op, (ast.UAdd, ast.USub, ast.Not)):
            stack.append(node.operand)
        elif isinstance(node, ast.BinOp) and type(node.op) in _ARITHMETIC:
            stack.extend((node.left, node.right))
        elif isinstance(node, ast.BoolOp):
            stack.extend(node.values)
        elif isinstance(node, ast.Compare):
            for op in node.ops:
                if type(op) not in _COMPARISONS:
                    raise ExpressionError(
                        f"only < <= > >= == != comparisons are allowed: "
                        f"{quote_source(text, node)}")
            stack.append(node.left)
            stack.extend(node.comparators)
        elif isinstance(node, ast.Call):
            check_call(node, _CALL_ARITY, text)
            stack.extend(node.args)
        else:
            raise refusal(node, text)
    return found


def compile_claim(name: str, holds: str, states: Sequence[str],
                  parameters: Sequence[str]) -> Claim:
    """Compile a claim's text into a :class:`Claim`.

    Parameters
    ----------
    name : str
        The claim's name, used in error messages.
    holds : str
        A condition in Python syntax: ``and``, ``or``, ``not``, comparisons
        (chains such as ``0 < x < 1`` too), ``+ - * / **``, numbers, the functions
        ``exp log sqrt abs min max`` and the aggregators ``any(cond)``,
        ``all(cond)``, ``none(cond)``, ``count(cond)`` and ``count()``. Inside an
        aggregator the condition may use state names, parameter names,
        :data:`STEADY_FLAGS` and ``margin``; outside, only parameters, numbers and
        aggregator results. Aggregators do not nest.
    states, parameters : sequence of str
        The model's state and parameter names.

    Returns
    -------
    Claim

    Raises
    ------
    ExpressionError
        Syntax outside the whitelist, a type error (the claim must be true or
        false; ``and``/``or``/``not`` take conditions; arithmetic takes numbers),
        a state or flag outside an aggregator, or unknown names (listed, with
        ``unknown_names`` set on the error). Messages start with the claim's name.
    """
    try:
        tree = syntax_tree(holds)
        compiler = _Compiler(holds, states, parameters)
        known = (compiler.states | compiler.parameters | set(STEADY_FLAGS)
                 | set(STEADY_NUMBERS) | set(_CALL_ARITY))
        unknown = sorted(_names_used(tree, holds) - known)
        if unknown:
            listed = ", ".join(f"'{item}'" for item in unknown)
            error = ExpressionError(
                f"unknown name{'s' if len(unknown) > 1 else ''} {listed}; "
                f"allowed: {compiler.allowed()}")
            error.unknown_names = unknown
            raise error
        program, kind = compiler.compile(tree, inside=False)
        if kind != BOOL:
            hint = (f"{quote_source(holds, tree)} >= 1" if isinstance(tree, ast.Call)
                    else f"{quote_source(holds, tree)} > 0")
            raise ExpressionError(f"a claim must be true or false; did you mean {hint}?")
    except ExpressionError as exc:
        wrapped = ExpressionError(f"claim '{name}': {exc}")
        if hasattr(exc, "unknown_names"):
            wrapped.unknown_names = exc.unknown_names
        raise wrapped from None
    return Claim(name, holds, program)
