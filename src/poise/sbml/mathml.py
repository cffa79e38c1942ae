"""SBML math (libsbml's formula tree) to sympy, and sympy back to study-file text.

The tree is walked node by node; nothing is evaluated as Python. Every construct a
steady-state analysis cannot take (discontinuities, logic, delays, ...) is refused
with a message naming the element the math belongs to.
"""

from __future__ import annotations

import math
from typing import Callable, Mapping

import libsbml
import sympy

from poise.errors import ExpressionError
from poise.study.expressions import to_text as study_text

# Stands for the csymbol `time`; no poise name can look like this.
TIME = sympy.Symbol("@time")
# The value SBML Level 3 gives the csymbol `avogadro`.
AVOGADRO = 6.02214179e23


def number(value: float) -> sympy.Expr:
    """An exact integer where the value is one (keeps powers polynomial), else a float."""
    value = float(value)
    if value.is_integer() and abs(value) < 2**53:
        return sympy.Integer(int(value))
    return sympy.Float(value)


class SbmlProblem(Exception):
    """Unsupported or invalid SBML content; `read_sbml` adds the file name."""


def _unary(function: Callable[[sympy.Expr], sympy.Expr]):
    return lambda args: function(args[0])


# Functions with a direct equivalent among poise's functions, or rewritten in terms
# of them (reciprocal and hyperbolic trigonometry).
_FUNCTIONS: dict[int, tuple[str, int | None, Callable]] = {
    libsbml.AST_FUNCTION_EXP: ("exp", 1, _unary(sympy.exp)),
    libsbml.AST_FUNCTION_LN: ("ln", 1, _unary(sympy.log)),
    libsbml.AST_FUNCTION_ABS: ("abs", 1, _unary(sympy.Abs)),
    libsbml.AST_FUNCTION_SIN: ("sin", 1, _unary(sympy.sin)),
    libsbml.AST_FUNCTION_COS: ("cos", 1, _unary(sympy.cos)),
    libsbml.AST_FUNCTION_TAN: ("tan", 1, _unary(sympy.tan)),
    libsbml.AST_FUNCTION_TANH: ("tanh", 1, _unary(sympy.tanh)),
    libsbml.AST_FUNCTION_SEC: ("sec", 1, _unary(lambda x: 1 / sympy.cos(x))),
    libsbml.AST_FUNCTION_CSC: ("csc", 1, _unary(lambda x: 1 / sympy.sin(x))),
    libsbml.AST_FUNCTION_COT: ("cot", 1, _unary(lambda x: 1 / sympy.tan(x))),
    libsbml.AST_FUNCTION_COTH: ("coth", 1, _unary(lambda x: 1 / sympy.tanh(x))),
    libsbml.AST_FUNCTION_SINH: ("sinh", 1, _unary(lambda x: (sympy.exp(x) - sympy.exp(-x)) / 2)),
    libsbml.AST_FUNCTION_COSH: ("cosh", 1, _unary(lambda x: (sympy.exp(x) + sympy.exp(-x)) / 2)),
    libsbml.AST_FUNCTION_SECH: ("sech", 1, _unary(lambda x: 2 / (sympy.exp(x) + sympy.exp(-x)))),
    libsbml.AST_FUNCTION_CSCH: ("csch", 1, _unary(lambda x: 2 / (sympy.exp(x) - sympy.exp(-x)))),
    libsbml.AST_FUNCTION_MAX: ("max", None, lambda args: sympy.Max(*args)),
    libsbml.AST_FUNCTION_MIN: ("min", None, lambda args: sympy.Min(*args)),
}

_REFUSED = {
    libsbml.AST_FUNCTION_PIECEWISE: "piecewise",
    libsbml.AST_FUNCTION_DELAY: "delay",
    libsbml.AST_FUNCTION_RATE_OF: "rateOf",
    libsbml.AST_FUNCTION_FLOOR: "floor",
    libsbml.AST_FUNCTION_CEILING: "ceiling",
    libsbml.AST_FUNCTION_FACTORIAL: "factorial",
    libsbml.AST_FUNCTION_QUOTIENT: "quotient",
    libsbml.AST_FUNCTION_REM: "rem",
    libsbml.AST_CONSTANT_TRUE: "true",
    libsbml.AST_CONSTANT_FALSE: "false",
}
# Whole families, by libsbml's constant names: comparisons, logic, inverse trigonometry.
for _name in dir(libsbml):
    for _prefix, _label in (("AST_RELATIONAL_", "comparison"), ("AST_LOGICAL_", "logical operator"),
                            ("AST_FUNCTION_ARC", "inverse function arc")):
        if _name.startswith(_prefix):
            _REFUSED.setdefault(getattr(libsbml, _name),
                                f"{_label} {_name[len(_prefix):].lower()}".replace("arc ", "arc"))


class MathReader:
    """Converts libsbml formula trees to sympy expressions.

    Parameters
    ----------
    symbols : mapping
        SBML id -> sympy Symbol (already renamed to a poise name).
    functions : mapping
        functionDefinition id -> (argument names, body ASTNode). The owning SBML
        document must stay alive while the reader is used (libsbml frees the
        nodes with it).
    """

    def __init__(self, symbols: Mapping[str, sympy.Symbol],
                 functions: Mapping[str, tuple[tuple[str, ...], libsbml.ASTNode]]):
        self.symbols = symbols
        self.functions = functions

    def read(self, node: libsbml.ASTNode | None, where: str,
             local: Mapping[str, sympy.Expr] | None = None) -> sympy.Expr:
        """Convert one formula.

        Parameters
        ----------
        node : libsbml.ASTNode
            The math element.
        where : str
            The element the math belongs to, for messages, e.g. "reaction 'R1'".
        local : mapping, optional
            Names that shadow the global ones (a kinetic law's local parameters).
        """
        if node is None:
            raise SbmlProblem(f"{where} has no math")
        return self._node(node, where, dict(local or {}), ())

    def _node(self, node, where: str, scope: dict, calls: tuple[str, ...]) -> sympy.Expr:
        kind = node.getType()
        n = node.getNumChildren()

        def child(i: int) -> sympy.Expr:
            return self._node(node.getChild(i), where, scope, calls)

        if kind == libsbml.AST_INTEGER:
            return sympy.Integer(node.getInteger())
        if kind in (libsbml.AST_REAL, libsbml.AST_REAL_E):
            value = node.getReal()
            if not math.isfinite(value):
                raise SbmlProblem(f"{where}: the number {value} (infinity or NaN) cannot be used")
            return number(value)
        if kind == libsbml.AST_RATIONAL:
            return sympy.Rational(node.getNumerator(), node.getDenominator())
        if kind == libsbml.AST_NAME:
            return self._name(node.getName(), where, scope)
        if kind == libsbml.AST_NAME_TIME:
            return TIME
        if kind == libsbml.AST_NAME_AVOGADRO:
            return sympy.Float(AVOGADRO)
        if kind == libsbml.AST_CONSTANT_E:
            return sympy.E
        if kind == libsbml.AST_CONSTANT_PI:
            return sympy.pi
        if kind == libsbml.AST_PLUS:
            return sympy.Add(*[child(i) for i in range(n)])
        if kind == libsbml.AST_TIMES:
            return sympy.Mul(*[child(i) for i in range(n)])
        if kind == libsbml.AST_MINUS:
            if n == 1:
                return -child(0)
            self._arity(node, where, 2, "minus")
            return child(0) - child(1)
        if kind == libsbml.AST_DIVIDE:
            self._arity(node, where, 2, "divide")
            return child(0) / child(1)
        if kind in (libsbml.AST_POWER, libsbml.AST_FUNCTION_POWER):
            self._arity(node, where, 2, "power")
            return child(0) ** child(1)
        if kind == libsbml.AST_FUNCTION_LOG:
            # one child: base 10; two children: (logbase, argument)
            if n == 1:
                return sympy.log(child(0)) / sympy.log(10)
            self._arity(node, where, 2, "log")
            return sympy.log(child(1)) / sympy.log(child(0))
        if kind == libsbml.AST_FUNCTION_ROOT:
            # one child: square root; two children: (degree, argument)
            if n == 1:
                return sympy.sqrt(child(0))
            self._arity(node, where, 2, "root")
            return child(1) ** (1 / child(0))
        if kind in _FUNCTIONS:
            name, arity, build = _FUNCTIONS[kind]
            if arity is not None:
                self._arity(node, where, arity, name)
            elif n == 0:
                raise SbmlProblem(f"{where}: {name}() needs at least one argument")
            return build([child(i) for i in range(n)])
        if kind == libsbml.AST_FUNCTION:
            return self._call(node, where, scope, calls)
        if kind in _REFUSED:
            raise SbmlProblem(f"{where} uses {_REFUSED[kind]}, which a steady-state analysis "
                              "cannot take (only smooth arithmetic is supported)")
        label = node.getName() or libsbml.formulaToL3String(node)
        raise SbmlProblem(f"{where} uses the unsupported math construct '{label}'")

    def _name(self, name: str, where: str, scope: dict) -> sympy.Expr:
        if name in scope:
            return scope[name]
        if name in self.symbols:
            return self.symbols[name]
        raise SbmlProblem(f"{where} refers to '{name}', which the model does not define")

    def _call(self, node, where: str, scope: dict, calls: tuple[str, ...]) -> sympy.Expr:
        name = node.getName()
        if name not in self.functions:
            raise SbmlProblem(f"{where} calls '{name}', which is not a functionDefinition of the model")
        if name in calls:
            chain = " -> ".join([*calls, name])
            raise SbmlProblem(f"functionDefinition '{name}' calls itself ({chain})")
        arguments, body = self.functions[name]
        if node.getNumChildren() != len(arguments):
            raise SbmlProblem(f"{where} calls '{name}' with {node.getNumChildren()} "
                              f"arguments; it takes {len(arguments)}")
        values = [self._node(node.getChild(i), where, scope, calls)
                  for i in range(node.getNumChildren())]
        # A function body sees only its own arguments (and global ids, leniently).
        inner = dict(zip(arguments, values))
        return self._node(body, f"functionDefinition '{name}' (called by {where})", inner,
                          (*calls, name))

    @staticmethod
    def _arity(node, where: str, expected: int, name: str) -> None:
        if node.getNumChildren() != expected:
            raise SbmlProblem(f"{where}: '{name}' takes {expected} arguments, "
                              f"got {node.getNumChildren()}")


# --- sympy -> study-file text ---------------------------------------------------

def to_text(expr: sympy.Expr) -> str:
    """Write a sympy expression in study-file syntax (Python operators, ``**``).

    Uses the study package's printer so that SBML-derived text and study files
    speak exactly one dialect; pi, which that dialect lacks, becomes a float.
    """
    if TIME in expr.free_symbols:
        raise SbmlProblem("time-dependent math cannot be used in a steady-state model")
    try:
        return study_text(expr.xreplace({sympy.pi: sympy.Float(math.pi)}))
    except ExpressionError as exc:
        raise SbmlProblem(str(exc)) from None
