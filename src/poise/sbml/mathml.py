"""SBML math (libsbml's formula tree) to sympy, and sympy back to study-file text.

The tree is walked node by node; nothing is evaluated as Python. Everything the
standard defines is read, including what a steady-state model cannot use
(discontinuous functions, delays, time): an initial value may use them, since it is
only evaluated once at time 0. Whether an expression can go into the model's
equations is decided when it is written as text (`to_text` and
`poise.sbml.refusals`). Sizes are bounded while reading: nesting depth, the
number of nodes visited (function definitions expanded) and exponents, so that no
input makes sympy build something huge.
"""

from __future__ import annotations

import math
from typing import Callable, Mapping

import libsbml
import sympy

from poise.errors import ExpressionError
from poise.study.expressions import MAX_EXPONENT, MAX_MAGNITUDE_LOG10
from poise.study.expressions import to_text as study_text

# Stands for the csymbol `time`; no poise name can look like this.
TIME = sympy.Symbol("@time")
# The value SBML Level 3 gives the csymbol `avogadro`.
AVOGADRO = 6.02214179e23
# Constructs read so that initial values can use them, never written into equations.
DELAY = sympy.Function("sbml_delay")
RATE_OF = sympy.Function("sbml_rateOf")

MAX_DEPTH = 100          # nesting of operations, function bodies included
MAX_NODES = 500_000      # formula nodes visited in one model, function bodies expanded


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


def _integer_part(x: sympy.Expr) -> sympy.Expr:
    return sympy.sign(x) * sympy.floor(sympy.Abs(x))


# Functions with a sympy equivalent. Hyperbolic ones (and their inverses) are
# rewritten with exp and log, which study files have.
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
    libsbml.AST_FUNCTION_ARCSINH: ("arcsinh", 1, _unary(lambda x: sympy.log(x + sympy.sqrt(x**2 + 1)))),
    libsbml.AST_FUNCTION_ARCCOSH: ("arccosh", 1, _unary(lambda x: sympy.log(x + sympy.sqrt(x**2 - 1)))),
    libsbml.AST_FUNCTION_ARCTANH: ("arctanh", 1, _unary(lambda x: sympy.log((1 + x) / (1 - x)) / 2)),
    libsbml.AST_FUNCTION_ARCCOTH: ("arccoth", 1, _unary(lambda x: sympy.log((x + 1) / (x - 1)) / 2)),
    libsbml.AST_FUNCTION_ARCSECH: ("arcsech", 1, _unary(lambda x: sympy.log((1 + sympy.sqrt(1 - x**2)) / x))),
    libsbml.AST_FUNCTION_ARCCSCH: ("arccsch", 1, _unary(lambda x: sympy.log(1 / x + sympy.sqrt(1 / x**2 + 1)))),
    libsbml.AST_FUNCTION_ARCSIN: ("arcsin", 1, _unary(sympy.asin)),
    libsbml.AST_FUNCTION_ARCCOS: ("arccos", 1, _unary(sympy.acos)),
    libsbml.AST_FUNCTION_ARCTAN: ("arctan", 1, _unary(sympy.atan)),
    libsbml.AST_FUNCTION_ARCSEC: ("arcsec", 1, _unary(sympy.asec)),
    libsbml.AST_FUNCTION_ARCCSC: ("arccsc", 1, _unary(sympy.acsc)),
    libsbml.AST_FUNCTION_ARCCOT: ("arccot", 1, _unary(sympy.acot)),
    libsbml.AST_FUNCTION_MAX: ("max", None, lambda args: sympy.Max(*args)),
    libsbml.AST_FUNCTION_MIN: ("min", None, lambda args: sympy.Min(*args)),
    libsbml.AST_FUNCTION_FLOOR: ("floor", 1, _unary(sympy.floor)),
    libsbml.AST_FUNCTION_CEILING: ("ceiling", 1, _unary(sympy.ceiling)),
    libsbml.AST_FUNCTION_FACTORIAL: ("factorial", 1, _unary(lambda x: sympy.gamma(x + 1))),
    libsbml.AST_FUNCTION_QUOTIENT: ("quotient", 2, lambda a: _integer_part(a[0] / a[1])),
    libsbml.AST_FUNCTION_REM: ("rem", 2, lambda a: a[0] - a[1] * _integer_part(a[0] / a[1])),
    libsbml.AST_FUNCTION_DELAY: ("delay", 2, lambda a: DELAY(a[0], a[1])),
    libsbml.AST_FUNCTION_RATE_OF: ("rateOf", 1, _unary(RATE_OF)),
}

_RELATIONS = {libsbml.AST_RELATIONAL_LT: sympy.Lt, libsbml.AST_RELATIONAL_LEQ: sympy.Le,
              libsbml.AST_RELATIONAL_GT: sympy.Gt, libsbml.AST_RELATIONAL_GEQ: sympy.Ge,
              libsbml.AST_RELATIONAL_EQ: sympy.Eq}
def _xor(*args: sympy.Basic) -> sympy.Basic:
    """Exclusive or, written with and / or / not (which study files have): true when an
    odd number of arguments hold."""
    result = sympy.false
    for arg in args:
        result = sympy.Or(sympy.And(result, sympy.Not(arg)), sympy.And(sympy.Not(result), arg))
    return result


_LOGIC = {libsbml.AST_LOGICAL_AND: sympy.And, libsbml.AST_LOGICAL_OR: sympy.Or,
          libsbml.AST_LOGICAL_XOR: _xor}


class MathReader:
    """Converts libsbml formula trees to sympy expressions.

    Parameters
    ----------
    symbols : mapping
        SBML id -> sympy expression it stands for (a Symbol with its poise name, or
        an expression, e.g. amount / size for a species in a changing compartment).
    functions : mapping
        functionDefinition id -> (argument names, body ASTNode). The owning SBML
        document must stay alive while the reader is used (libsbml frees the
        nodes with it).

    Attributes
    ----------
    origins : dict
        sympy sub-expression built inside a function definition -> where it was
        built, e.g. "functionDefinition 'F' (called by the kinetic law of reaction 'R')",
        for messages about it.
    """

    def __init__(self, symbols: Mapping[str, sympy.Expr],
                 functions: Mapping[str, tuple[tuple[str, ...], libsbml.ASTNode]]):
        self.symbols = symbols
        self.functions = functions
        self.visited = 0
        self.origins: dict[sympy.Basic, str] = {}
        self._calls: dict[tuple, sympy.Expr] = {}

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
        try:
            return self._node(node, where, dict(local or {}), (), 0)
        except (TypeError, ValueError, AttributeError) as exc:
            # sympy refuses e.g. a true/false value where a number is needed
            detail = " ".join(str(exc).split())[:100]
            raise SbmlProblem(f"{where} mixes numbers and true/false values ({detail})") from None

    def _node(self, node, where: str, scope: dict, calls: tuple[str, ...], depth: int) -> sympy.Expr:
        self.visited += 1
        if self.visited > MAX_NODES:
            raise SbmlProblem(f"the model's math expands to more than {MAX_NODES:,} operations "
                              f"(reading {where}); function definitions that call each other "
                              "many times are the usual cause")
        if depth > MAX_DEPTH:
            raise SbmlProblem(f"{where} nests operations more than {MAX_DEPTH} levels deep")
        kind = node.getType()
        n = node.getNumChildren()

        def child(i: int) -> sympy.Expr:
            """A child that must be a number (not a true/false value)."""
            result = self._node(node.getChild(i), where, scope, calls, depth + 1)
            if not isinstance(result, sympy.Expr):
                raise SbmlProblem(f"{where} uses a true/false value where a number is needed")
            return result

        def condition(i: int) -> sympy.Basic:
            result = self._node(node.getChild(i), where, scope, calls, depth + 1)
            if not isinstance(result, sympy.logic.boolalg.Boolean):
                raise SbmlProblem(f"{where} uses a number where a true/false condition is needed")
            return result

        if kind == libsbml.AST_INTEGER:
            return sympy.Integer(node.getInteger())
        if kind in (libsbml.AST_REAL, libsbml.AST_REAL_E):
            value = node.getReal()
            if not math.isfinite(value):
                raise SbmlProblem(f"{where}: the number {value} (infinity or NaN) cannot be used")
            return number(value)
        if kind == libsbml.AST_RATIONAL:
            if node.getDenominator() == 0:
                raise SbmlProblem(f"{where}: a rational number with denominator 0")
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
        if kind == libsbml.AST_CONSTANT_TRUE:
            return sympy.true
        if kind == libsbml.AST_CONSTANT_FALSE:
            return sympy.false
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
            return bounded_power(child(0), child(1), where)
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
            return bounded_power(child(1), 1 / child(0), where)
        if kind == libsbml.AST_FUNCTION_PIECEWISE:
            return self._piecewise([condition(i) if i % 2 else child(i) for i in range(n)], where)
        if kind in _RELATIONS or kind == libsbml.AST_RELATIONAL_NEQ:
            if n < 2 or (kind == libsbml.AST_RELATIONAL_NEQ and n != 2):
                raise SbmlProblem(f"{where}: a comparison with {n} arguments")
            values = [child(i) for i in range(n)]
            relation = _RELATIONS.get(kind, sympy.Ne)
            return sympy.And(*[relation(a, b) for a, b in zip(values, values[1:])])
        if kind in _LOGIC:
            return _LOGIC[kind](*[condition(i) for i in range(n)])
        if kind == libsbml.AST_LOGICAL_NOT:
            self._arity(node, where, 1, "not")
            return sympy.Not(condition(0))
        if kind == libsbml.AST_LOGICAL_IMPLIES:
            self._arity(node, where, 2, "implies")
            return sympy.Or(sympy.Not(condition(0)), condition(1))
        if kind in _FUNCTIONS:
            name, arity, build = _FUNCTIONS[kind]
            if arity is not None:
                self._arity(node, where, arity, name)
            elif n == 0:
                raise SbmlProblem(f"{where}: {name}() needs at least one argument")
            result = build([child(i) for i in range(n)])
            if calls:
                self.origins.setdefault(result, where)
            return result
        if kind == libsbml.AST_FUNCTION:
            return self._call(node, where, scope, calls, depth)
        label = node.getName() or libsbml.formulaToL3String(node)
        raise SbmlProblem(f"{where} uses the unsupported math construct '{label}'")

    @staticmethod
    def _piecewise(children: list[sympy.Expr], where: str) -> sympy.Expr:
        if not children:
            raise SbmlProblem(f"{where}: piecewise() with no pieces")
        pieces = [(children[i], children[i + 1]) for i in range(0, len(children) - 1, 2)]
        if len(children) % 2:
            pieces.append((children[-1], sympy.true))
        pieces = [(v, c) for v, c in pieces if c is not sympy.false]
        if not pieces:
            raise SbmlProblem(f"{where}: no condition of piecewise can hold")
        return sympy.Piecewise(*pieces)

    def _name(self, name: str, where: str, scope: dict) -> sympy.Expr:
        if name in scope:
            return scope[name]
        if name in self.symbols:
            return self.symbols[name]
        raise SbmlProblem(f"{where} refers to '{name}', which the model does not define")

    def _call(self, node, where: str, scope: dict, calls: tuple[str, ...], depth: int) -> sympy.Expr:
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
        values = tuple(self._node(node.getChild(i), where, scope, calls, depth + 1)
                       for i in range(node.getNumChildren()))
        key = (name, values)
        if key not in self._calls:  # one expansion per distinct call
            inner = dict(zip(arguments, values))  # a body sees its arguments (and globals, leniently)
            self._calls[key] = self._node(body, f"functionDefinition '{name}' (called by {where})",
                                          inner, (*calls, name), depth + 1)
        return self._calls[key]

    @staticmethod
    def _arity(node, where: str, expected: int, name: str) -> None:
        if node.getNumChildren() != expected:
            raise SbmlProblem(f"{where}: '{name}' takes {expected} arguments, "
                              f"got {node.getNumChildren()}")


def bounded_power(base: sympy.Expr, exponent: sympy.Expr, where: str) -> sympy.Expr:
    """``base ** exponent``, refused before sympy would compute a huge number."""
    if exponent.is_Number:
        if not exponent.is_finite or abs(exponent) > MAX_EXPONENT:
            raise SbmlProblem(f"{where}: the exponent {exponent} is too large (limit {MAX_EXPONENT})")
        for factor in sympy.Mul.make_args(base):
            if factor.is_Number and factor != 0 and abs(factor) != 1:
                magnitude = abs(float(factor))
                size = (abs(float(exponent)) * abs(math.log10(magnitude))
                        if 0 < magnitude < math.inf else math.inf)
                if size > MAX_MAGNITUDE_LOG10:
                    raise SbmlProblem(f"{where}: ({factor})^({exponent}) is a number beyond "
                                      f"1e{MAX_MAGNITUDE_LOG10}")
            elif factor.is_Pow and factor.exp.is_Number and abs(factor.exp * exponent) > MAX_EXPONENT:
                raise SbmlProblem(f"{where}: the combined exponent {factor.exp}*{exponent} is too "
                                  f"large (limit {MAX_EXPONENT})")
    return sympy.Pow(base, exponent)


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
