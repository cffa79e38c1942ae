"""Claims: boolean statements about the steady states of each parameter set.

A claim such as ``count(stable) >= 2`` or ``any(stable and G > 1e-9)`` is compiled
once from study-file text into a small tree of plain dataclasses (never
``eval``; the nodes and their vectorised evaluation are in `poise.study.claim_nodes`),
type-checked, and then evaluated for all parameter sets at once.
"""

from __future__ import annotations

import ast
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from poise.errors import ExpressionError
from poise.study.claim_nodes import (Aggregate, Arithmetic, Columns, Compare, Function, Logic,
                                     Negate, Not, Number, Parameter, SteadyColumn)
from poise.study.expressions import (check_call, check_name, literal_number,
                                     quote_source, refusal, syntax_tree)
from poise.study.vocabulary import AGGREGATORS, STEADY_FLAGS, STEADY_NUMBERS

__all__ = ["STEADY_FLAGS", "STEADY_NUMBERS", "AGGREGATORS", "Claim", "compile_claim"]

_FUNCTION_ARITY = {"exp": (1, 1), "log": (1, 1), "sqrt": (1, 1), "abs": (1, 1),
                   "min": (2, None), "max": (2, None)}
_AGGREGATOR_ARITY = {"any": (1, 1), "all": (1, 1), "none": (1, 1), "count": (0, 1)}
_CALL_ARITY = {**_FUNCTION_ARITY, **_AGGREGATOR_ARITY}

_ARITHMETIC = {ast.Add: "+", ast.Sub: "-", ast.Mult: "*", ast.Div: "/", ast.Pow: "**"}
_COMPARISONS = {ast.Lt: "<", ast.LtE: "<=", ast.Gt: ">", ast.GtE: ">=",
                ast.Eq: "==", ast.NotEq: "!="}

BOOL, NUMBER = "true/false", "number"


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
    names: frozenset = field(default=frozenset(), compare=False)   # the names it reads

    def evaluate(self, steady: Mapping[str, np.ndarray], owner: np.ndarray,
                 sets: Mapping[str, np.ndarray], n_sets: int) -> np.ndarray:
        """Whether the claim holds for each parameter set (see `evaluate_sets`)."""
        return self.evaluate_sets(steady, owner, sets, n_sets)[0]

    def evaluate_sets(self, steady: Mapping[str, np.ndarray], owner: np.ndarray,
                      sets: Mapping[str, np.ndarray], n_sets: int) -> tuple[np.ndarray, np.ndarray]:
        """Whether the claim holds for each parameter set, and where it is undefined.

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
        holds, undefined : numpy.ndarray of bool, shape (n_sets,)
            `undefined` marks the sets where the answer rests on a division by zero
            or a number out of range (e.g. ``count()/0 > 1``): an error in that set,
            not an answer. Three-valued logic decides what matters: ``x/y > 1`` is
            undefined where ``y == 0``, but ``y > 0 and x/y > 1`` is false there.

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
        columns = Columns(steady, owner, sets, int(n_sets), per_row=False)
        with np.errstate(all="ignore"):
            result, undefined = self._program.evaluate(columns)
        shape = (int(n_sets),)
        return (np.broadcast_to(np.asarray(result, dtype=bool), shape).copy(),
                np.broadcast_to(np.asarray(undefined, dtype=bool), shape).copy())


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
            return Number(float(literal_number(node, self.text))), NUMBER
        if isinstance(node, ast.Name):
            return self.name(node, inside)
        if isinstance(node, ast.UnaryOp):
            operand, kind = self.compile(node.operand, inside)
            if isinstance(node.op, ast.Not):
                self.expect(kind, BOOL, node.operand, "'not' applies to")
                return Not(operand), BOOL
            if isinstance(node.op, (ast.UAdd, ast.USub)):
                self.expect(kind, NUMBER, node.operand, "a sign applies to")
                return (Negate(operand) if isinstance(node.op, ast.USub) else operand), NUMBER
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
            return Arithmetic(first, tuple(steps)), NUMBER
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
            return Compare(tuple(ops), tuple(operands)), BOOL
        if isinstance(node, ast.BoolOp):
            word = "and" if isinstance(node.op, ast.And) else "or"
            operands = []
            for operand_node in node.values:
                operand, kind = self.compile(operand_node, inside)
                self.expect(kind, BOOL, operand_node, f"'{word}' combines")
                operands.append(operand)
            return Logic(word, tuple(operands)), BOOL
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
            return Parameter(name), NUMBER
        if not inside:
            what = "state" if meaning == "state" else "steady-state property"
            raise ExpressionError(
                f"{what} '{name}' describes one steady state and can only be used "
                f"inside any(), all(), none() or count()")
        if name in STEADY_FLAGS:
            return SteadyColumn(name, is_flag=True), BOOL
        return SteadyColumn(name, is_flag=False), NUMBER

    def call(self, node: ast.Call, inside: bool) -> tuple[object, str]:
        name = check_call(node, _CALL_ARITY, self.text)
        if name in _AGGREGATOR_ARITY:
            if inside:
                raise ExpressionError(
                    f"aggregators cannot be nested: {self.quote(node)} stands inside "
                    f"another any(), all(), none() or count()")
            if not node.args:
                return Aggregate("count", None), NUMBER
            condition, kind = self.compile(node.args[0], inside=True)
            if kind != BOOL:
                raise ExpressionError(
                    f"{name}() needs a condition that is true or false, but "
                    f"{self.quote(node.args[0])} is a number (e.g. write "
                    f"{name}({self.quote(node.args[0])} > 0))")
            return Aggregate(name, condition), (NUMBER if name == "count" else BOOL)
        args = []
        for arg_node in node.args:
            arg, kind = self.compile(arg_node, inside)
            self.expect(kind, NUMBER, arg_node, f"{name}() needs")
            args.append(arg)
        return Function(name, tuple(args)), NUMBER

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
        used = _names_used(tree, holds)
        unknown = sorted(used - known)
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
    return Claim(name, holds, program, frozenset(used - set(_CALL_ARITY)))
