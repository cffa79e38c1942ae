"""The safe expression parser: study-file text to sympy, and back.

Model expressions use Python operator syntax. The text is parsed with :mod:`ast`
and every node is checked against a whitelist; sympy objects are then built
directly from the checked tree. Nothing in the text is ever evaluated as Python
code, and sizes are bounded before and after parsing so that hostile input is
refused quickly instead of exhausting time or memory.

The size checks and the refusal messages are shared with the claim compiler
(:mod:`poise.study.claims`) through :func:`syntax_tree`, :func:`literal_number`,
:func:`check_name`, :func:`check_call`, :func:`refusal` and :func:`quote_source`.
"""

from __future__ import annotations

import ast
import keyword
import math
import re
import unicodedata
from collections.abc import Mapping

import sympy
from sympy.printing.str import StrPrinter

from poise.errors import ExpressionError

__all__ = [
    "FUNCTIONS",
    "MAX_TEXT_LENGTH",
    "MAX_BRACKET_DEPTH",
    "MAX_NESTING",
    "MAX_NODES",
    "MAX_OPERANDS",
    "MAX_MIN_MAX_ARGUMENTS",
    "MAX_EXPONENT",
    "referenced_names",
    "parse_expression",
    "to_text",
    "syntax_tree",
    "literal_number",
    "refusal",
    "check_name",
    "check_call",
    "quote_source",
]

FUNCTIONS: frozenset[str] = frozenset(
    {"exp", "log", "sqrt", "sin", "cos", "tan", "tanh", "abs", "min", "max", "hill", "piecewise"})

MAX_TEXT_LENGTH = 20_000      # characters; a real kinetic law is far shorter
MAX_BRACKET_DEPTH = 60        # CPython's own parser gives up near 200 levels
MAX_NESTING = 100             # operations inside operations, flat sums/products count once
MAX_NODES = 2_500             # syntax-tree nodes (operands, operations, calls)
MAX_OPERANDS = 1_000          # names and numbers; CPython's tree builder recurses along chains
MAX_MIN_MAX_ARGUMENTS = 20    # in all; sympy compares min/max arguments pairwise
MAX_EXPONENT = 1_000          # largest |numeric exponent|
MAX_INTEGER = 10**30          # largest |integer literal|
MAX_DIGITS = 1_000            # longest run of digits in a number literal
MAX_MAGNITUDE_LOG10 = 300     # numeric constants stay within 1e-300 .. 1e300 under powers

# arity: (least, most); None = no upper bound
_ARITY = {"exp": (1, 1), "log": (1, 1), "sqrt": (1, 1), "sin": (1, 1), "cos": (1, 1),
          "tan": (1, 1), "tanh": (1, 1), "abs": (1, 1), "min": (2, None),
          "max": (2, None), "hill": (3, 3), "piecewise": (2, None)}

# piecewise(value1, condition1, value2, condition2, ..., otherwise): the conditions are
# comparisons joined by and / or / not; nothing else in a model expression is a condition
_COMPARISONS = {ast.Lt: sympy.Lt, ast.LtE: sympy.Le, ast.Gt: sympy.Gt, ast.GtE: sympy.Ge,
                ast.Eq: sympy.Eq, ast.NotEq: sympy.Ne}

_SYMPY_FUNCTIONS = {"exp": sympy.exp, "log": sympy.log, "sqrt": sympy.sqrt,
                    "sin": sympy.sin, "cos": sympy.cos, "tan": sympy.tan,
                    "tanh": sympy.tanh, "abs": sympy.Abs, "min": sympy.Min,
                    "max": sympy.Max}

_ADDITIVE = (ast.Add, ast.Sub)
_MULTIPLICATIVE = (ast.Mult, ast.Div)
_DIGIT_RUN = re.compile(r"[0-9_]{%d,}" % (MAX_DIGITS + 1))
_OPERAND = re.compile(r"[^\W\d]\w*|\.?\d[\w.]*")


# --------------------------------------------------------------------------- shared checks

def quote_source(text: str, node: ast.AST) -> str:
    """The source text of `node`, shortened to 40 characters, for messages."""
    segment = ast.get_source_segment(text, node) if text else None
    if segment is None:
        try:
            segment = ast.unparse(node)
        except Exception:  # unparse of an odd node must not mask the real message
            segment = type(node).__name__
    segment = " ".join(segment.split())
    return segment if len(segment) <= 40 else segment[:37] + "..."


def _check_text(text: object) -> str:
    """Refuse text that is not worth handing to the Python parser."""
    if not isinstance(text, str):
        raise ExpressionError(f"an expression must be text, not {type(text).__name__}")
    if not text.strip():
        raise ExpressionError("the expression is empty")
    if len(text) > MAX_TEXT_LENGTH:
        raise ExpressionError(
            f"the expression is {len(text):,} characters long; "
            f"the limit is {MAX_TEXT_LENGTH:,}")
    # Python folds look-alike characters (fullwidth letters, ligatures, non-breaking
    # spaces) into plain ones, so a name could silently become a different name.
    if unicodedata.normalize("NFKC", text) != text:
        odd = next(ch for ch in text if unicodedata.normalize("NFKC", ch) != ch)
        raise ExpressionError(
            f"the expression contains the character {odd!r} (U+{ord(odd):04X}), which "
            f"Python would silently replace; write it in plain form")
    depth = deepest = 0
    for ch in text:
        if ch in "([{":
            depth += 1
            deepest = max(deepest, depth)
        elif ch in ")]}":
            depth -= 1
    if deepest > MAX_BRACKET_DEPTH:
        raise ExpressionError(
            f"the expression nests brackets {deepest} levels deep; "
            f"the limit is {MAX_BRACKET_DEPTH}")
    if _DIGIT_RUN.search(text):
        raise ExpressionError(f"a number in the expression has more than {MAX_DIGITS} digits")
    operands = len(_OPERAND.findall(text))
    if operands > MAX_OPERANDS:
        raise ExpressionError(
            f"the expression has {operands:,} names and numbers; the limit is "
            f"{MAX_OPERANDS:,}; split it into named sub-expressions")
    return text


def _effective_depth(tree: ast.AST) -> int:
    """Nesting depth where a flat chain ``a + b - c`` or ``a * b / c`` counts once."""
    deepest = 0
    stack = [(tree, 1)]
    while stack:
        node, depth = stack.pop()
        deepest = max(deepest, depth)
        for child in ast.iter_child_nodes(node):
            same_chain = (isinstance(node, ast.BinOp) and isinstance(child, ast.BinOp)
                          and child is node.left
                          and (isinstance(node.op, _ADDITIVE) and isinstance(child.op, _ADDITIVE)
                               or isinstance(node.op, _MULTIPLICATIVE)
                               and isinstance(child.op, _MULTIPLICATIVE)))
            stack.append((child, depth if same_chain else depth + 1))
    return deepest


def syntax_tree(text: str) -> ast.expr:
    """Parse `text` into a Python syntax tree after the size checks.

    Parameters
    ----------
    text : str
        One expression in study-file syntax.

    Returns
    -------
    ast.expr
        The body of the parsed expression. Nothing is checked against a whitelist
        yet: that is the caller's job (model expressions and claims allow
        different constructs).

    Raises
    ------
    ExpressionError
        Empty or over-long text, brackets nested too deeply, over-long numbers,
        a syntax error, too many nodes, or nesting too deep.
    """
    _check_text(text)
    try:
        tree = ast.parse(text, mode="eval")
    except SyntaxError as exc:
        where = f" (column {exc.offset})" if exc.offset else ""
        raise ExpressionError(f"not a valid expression{where}: {exc.msg}") from None
    except (RecursionError, MemoryError):
        raise ExpressionError(
            "the expression is too long or too deeply nested for the parser; "
            "split it into named sub-expressions") from None
    except Exception as exc:  # e.g. ValueError from the parser; never let it escape raw
        raise ExpressionError(f"not a valid expression: {exc}") from None
    count = 0
    for node in ast.walk(tree):
        count += isinstance(node, ast.expr)
        if count > MAX_NODES:
            raise ExpressionError(
                f"the expression has more than {MAX_NODES:,} parts; simplify it "
                f"or split it into named sub-expressions")
    depth = _effective_depth(tree.body)
    if depth > MAX_NESTING:
        raise ExpressionError(
            f"the expression nests operations {depth} levels deep; the limit is {MAX_NESTING}")
    return tree.body


def literal_number(node: ast.Constant, text: str = "") -> int | float:
    """The value of a numeric literal, refusing anything else.

    Integers are limited to ``MAX_INTEGER`` in magnitude and floats must be finite.
    Strings, bytes, complex numbers, ``True``, ``False``, ``None`` and ``...`` are
    refused.
    """
    value = node.value
    if isinstance(value, bool) or value is None or value is Ellipsis:
        raise ExpressionError(f"'{value}' is not allowed; use numbers")
    if isinstance(value, (str, bytes)):
        raise ExpressionError(f"text strings are not allowed: {quote_source(text, node)}")
    if isinstance(value, complex):
        raise ExpressionError(f"complex numbers are not allowed: {quote_source(text, node)}")
    if isinstance(value, int):
        if abs(value) > MAX_INTEGER:
            raise ExpressionError(
                f"the integer {quote_source(text, node)} is too large (limit 1e30); "
                f"write it in floating-point form such as 1e31")
        return value
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ExpressionError(f"the number {quote_source(text, node)} is too large")
        return value
    raise ExpressionError(f"{type(value).__name__} values are not allowed")


_REFUSED = {
    ast.Attribute: "attribute access ('.') is not allowed",
    ast.Subscript: "indexing ('[...]') is not allowed",
    ast.Slice: "slices are not allowed",
    ast.Lambda: "lambda functions are not allowed",
    ast.ListComp: "comprehensions are not allowed",
    ast.SetComp: "comprehensions are not allowed",
    ast.DictComp: "comprehensions are not allowed",
    ast.GeneratorExp: "generator expressions are not allowed",
    ast.JoinedStr: "f-strings are not allowed",
    ast.FormattedValue: "f-strings are not allowed",
    ast.NamedExpr: "assignment expressions (':=') are not allowed",
    ast.IfExp: "conditional expressions ('... if ... else ...') are not allowed",
    ast.Tuple: "tuples are not allowed",
    ast.List: "lists are not allowed",
    ast.Dict: "dicts are not allowed",
    ast.Set: "sets are not allowed",
    ast.Starred: "starred arguments ('*') are not allowed",
    ast.Await: "'await' is not allowed",
    ast.Yield: "'yield' is not allowed",
    ast.YieldFrom: "'yield' is not allowed",
    ast.BoolOp: "'and' / 'or' are not allowed in model expressions",
    ast.Compare: "comparisons are not allowed in model expressions",
}

_REFUSED_OPERATORS = {
    ast.FloorDiv: "'//' (floor division) is not allowed; use '/'",
    ast.Mod: "'%' (remainder) is not allowed",
    ast.MatMult: "'@' (matrix product) is not allowed",
    ast.LShift: "bit shifts are not allowed",
    ast.RShift: "bit shifts are not allowed",
    ast.BitOr: "bit operations ('|') are not allowed",
    ast.BitXor: "bit operations ('^') are not allowed; use '**' for powers",
    ast.BitAnd: "bit operations ('&') are not allowed",
    ast.Invert: "bit operations ('~') are not allowed",
    ast.Not: "'not' is not allowed in model expressions",
}


def refusal(node: ast.AST, text: str = "") -> ExpressionError:
    """An error saying why `node` is not allowed, quoting its source."""
    op = getattr(node, "op", None)
    message = _REFUSED_OPERATORS.get(type(op)) if op is not None else None
    if message is None:
        message = _REFUSED.get(type(node), f"{type(node).__name__} is not allowed")
    return ExpressionError(f"{message}: {quote_source(text, node)}")


def check_name(node: ast.Name, text: str = "") -> str:
    """Refuse dunder and private-looking names; return the identifier."""
    if node.id.startswith("__") or node.id.endswith("__"):
        raise ExpressionError(f"names with '__' are not allowed: {node.id}")
    return node.id


def check_call(node: ast.Call, arity: Mapping[str, tuple[int, int | None]],
               text: str = "", *, kind: str = "function") -> str:
    """Refuse anything but a plain call of a known function with the right arity."""
    if not isinstance(node.func, ast.Name) or node.func.id not in arity:
        called = quote_source(text, node.func)
        known = ", ".join(sorted(arity))
        raise ExpressionError(
            f"'{called}' is not a known {kind}; calls are allowed only to: {known}")
    name = node.func.id
    if node.keywords:
        raise ExpressionError(f"keyword arguments are not allowed: {quote_source(text, node)}")
    for arg in node.args:
        if isinstance(arg, ast.Starred):
            raise refusal(arg, text)
    least, most = arity[name]
    n = len(node.args)
    if n < least or (most is not None and n > most):
        if most == least:
            wanted = f"exactly {least} argument{'s' if least != 1 else ''}"
        elif most is None:
            wanted = f"at least {least} arguments"
        else:
            wanted = f"{least} to {most} argument{'s' if most != 1 else ''}"
        raise ExpressionError(f"{name}() takes {wanted}, got {n}: {quote_source(text, node)}")
    return name


# --------------------------------------------------------------------------- model expressions

def _whitelisted_names(tree: ast.expr, text: str) -> set[str]:
    """Check every node of a model expression; return the identifiers it uses."""
    found: set[str] = set()
    min_max_arguments = 0
    stack = [(tree, False)]  # (node, whether it stands where a condition is expected)
    while stack:
        node, condition = stack.pop()
        if condition:
            stack.extend(_condition_parts(node, text))
        elif isinstance(node, ast.Constant):
            literal_number(node, text)
        elif isinstance(node, ast.Name):
            found.add(check_name(node, text))
        elif isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.UAdd, ast.USub)):
            stack.append((node.operand, False))
        elif isinstance(node, ast.BinOp) and isinstance(
                node.op, (ast.Add, ast.Sub, ast.Mult, ast.Div, ast.Pow)):
            stack.extend(((node.left, False), (node.right, False)))
        elif isinstance(node, ast.Call):
            name = check_call(node, _ARITY, text)
            if name in ("min", "max"):
                min_max_arguments += len(node.args)
                if min_max_arguments > MAX_MIN_MAX_ARGUMENTS:
                    raise ExpressionError(
                        f"min() and max() take at most {MAX_MIN_MAX_ARGUMENTS} arguments "
                        f"in all in one expression")
            # piecewise: odd positions are conditions (a last, unpaired value is the otherwise)
            stack.extend((arg, name == "piecewise" and i % 2 == 1) for i, arg in enumerate(node.args))
        else:
            raise refusal(node, text)
    return found


def _condition_parts(node: ast.expr, text: str) -> list[tuple[ast.expr, bool]]:
    """The parts of a piecewise condition, each marked as a condition or a value."""
    if isinstance(node, ast.Compare):
        for op in node.ops:
            if type(op) not in _COMPARISONS:
                raise ExpressionError(f"only <, <=, >, >=, == and != compare values in a "
                                      f"condition: {quote_source(text, node)}")
        return [(node.left, False)] + [(c, False) for c in node.comparators]
    if isinstance(node, ast.BoolOp):
        return [(v, True) for v in node.values]
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.Not):
        return [(node.operand, True)]
    raise ExpressionError(f"a condition of piecewise() must be a comparison (joined by and, "
                          f"or, not), not {quote_source(text, node)}")


def referenced_names(text: str) -> set[str]:
    """Identifiers used in `text`, not counting function names.

    Parameters
    ----------
    text : str
        One model expression in study-file syntax.

    Returns
    -------
    set of str

    Raises
    ------
    ExpressionError
        The same checks as :func:`parse_expression`, except that unknown names are
        not an error here.
    """
    tree = syntax_tree(text)
    return _whitelisted_names(tree, text)


def _log10_magnitude(number: sympy.Number) -> float:
    """log10 |number| without computing anything large; -inf for zero."""
    if number.is_zero:
        return -math.inf
    if isinstance(number, sympy.Rational):
        return math.log10(abs(number.p)) - math.log10(number.q)
    if isinstance(number, sympy.Float):
        _sign, mantissa, exponent, _bits = number._mpf_
        if not mantissa:  # inf / nan are stored with a zero mantissa
            return math.inf
        return math.log10(mantissa) + exponent * math.log10(2)
    return math.inf  # anything else numeric is treated as unbounded


def _power(base: sympy.Expr, exponent: sympy.Expr) -> sympy.Expr:
    """``base ** exponent``, refused before sympy would compute something huge."""
    if exponent.is_Number:
        if not exponent.is_finite or abs(exponent) > MAX_EXPONENT:
            raise ExpressionError(
                f"the exponent {exponent} is too large (limit {MAX_EXPONENT})")
        # sympy distributes a numeric power over the factors of a product and
        # multiplies nested numeric exponents, so check what it is about to compute.
        for factor in sympy.Mul.make_args(base):
            if factor.is_Number and not factor.is_zero and not (
                    factor.is_Rational and abs(factor) == 1):
                size = abs(float(exponent)) * abs(_log10_magnitude(factor))
                if size > MAX_MAGNITUDE_LOG10:
                    raise ExpressionError(
                        f"({factor})**({exponent}) is a number beyond 1e{MAX_MAGNITUDE_LOG10}")
            elif factor.is_Pow and factor.exp.is_Number:
                combined = abs(factor.exp * exponent)
                if combined > MAX_EXPONENT:
                    raise ExpressionError(
                        f"the combined exponent {factor.exp}*{exponent} is too large "
                        f"(limit {MAX_EXPONENT})")
    return sympy.Pow(base, exponent)


def _hill(x: sympy.Expr, k: sympy.Expr, n: sympy.Expr) -> sympy.Expr:
    xn = _power(x, n)
    return xn * _power(_power(k, n) + xn, sympy.Integer(-1))


def _float_hill(x: float, k: float, n: float) -> float:
    xn = math.pow(x, n)
    return xn / (math.pow(k, n) + xn)


_FLOAT_FUNCTIONS = {"exp": math.exp, "log": math.log, "sqrt": math.sqrt, "sin": math.sin,
                    "cos": math.cos, "tan": math.tan, "tanh": math.tanh, "abs": abs,
                    "min": min, "max": max, "hill": _float_hill}


def _float_product(*values: float) -> float:
    return math.prod(values)


def _float_power(base: float, exponent: float) -> float:
    return math.pow(base, exponent)


class _Builder:
    """Builds sympy objects from a whitelisted tree.

    Each part made only of numbers is also evaluated in floating point alongside,
    before sympy sees it: sympy would otherwise try to compare or evaluate numbers
    such as ``exp(exp(exp(100)))`` and never finish. A constant part that does not
    fit in a float is refused.
    """

    def __init__(self, text: str, names: Mapping[str, sympy.Basic]):
        self.text = text
        self.names = names

    def _shadow(self, function, values, node: ast.AST) -> float | None:
        """Float value of a constant part; None when not constant or not real."""
        if any(value is None for value in values):
            return None
        try:
            result = function(*values)
        except OverflowError:
            result = math.inf
        except (ValueError, ZeroDivisionError):
            return None  # undefined or complex; the sympy result is judged at the end
        if isinstance(result, complex):
            return None
        if not math.isfinite(result):
            raise ExpressionError(
                f"the constant part {quote_source(self.text, node)} is too large "
                f"for a floating-point number")
        return float(result)

    def build(self, node: ast.expr) -> tuple[sympy.Expr, float | None]:
        """The sympy object for `node` and its float value if it is a constant."""
        if isinstance(node, ast.Constant):
            value = literal_number(node, self.text)
            if isinstance(value, int):
                return sympy.Integer(value), float(value)
            return sympy.Float(value), value
        if isinstance(node, ast.Name):
            value = self.names[node.id]
            if isinstance(value, bool) or not isinstance(value, (sympy.Basic, int, float)):
                raise TypeError(f"names['{node.id}'] must be a sympy object, "
                                f"not {type(value).__name__}")
            if isinstance(value, int):
                value = sympy.Integer(value)
            elif isinstance(value, float):
                value = sympy.Float(value)
            return value, None
        if isinstance(node, ast.UnaryOp):
            operand, value = self.build(node.operand)
            if isinstance(node.op, ast.USub):
                return -operand, None if value is None else -value
            return operand, value
        if isinstance(node, ast.BinOp):
            if isinstance(node.op, _ADDITIVE):
                return self._sum(node)
            if isinstance(node.op, _MULTIPLICATIVE):
                return self._product(node)
            if isinstance(node.op, ast.Pow):
                base, base_value = self.build(node.left)
                exponent, exponent_value = self.build(node.right)
                power = _power(base, exponent)  # its own checks name the exponent
                value = self._shadow(_float_power, (base_value, exponent_value), node)
                return power, value
        if isinstance(node, ast.Call) and node.func.id == "piecewise":
            return self._piecewise(node.args), None
        if isinstance(node, ast.Call):
            name = node.func.id
            built = [self.build(arg) for arg in node.args]
            args = [expr for expr, _ in built]
            value = self._shadow(_FLOAT_FUNCTIONS[name], [v for _, v in built], node)
            if name == "hill":
                return _hill(*args), value
            return _SYMPY_FUNCTIONS[name](*args), value
        raise refusal(node, self.text)  # unreachable after the whitelist; kept as a guard

    def _piecewise(self, args: list[ast.expr]) -> sympy.Expr:
        pieces = [(self.build(args[i])[0], self._condition(args[i + 1]))
                  for i in range(0, len(args) - 1, 2)]
        if len(args) % 2:
            pieces.append((self.build(args[-1])[0], sympy.true))
        return sympy.Piecewise(*pieces)

    def _condition(self, node: ast.expr) -> sympy.Basic:
        if isinstance(node, ast.Compare):
            values = [self.build(v)[0] for v in (node.left, *node.comparators)]
            links = [_COMPARISONS[type(op)](a, b) for op, a, b in zip(node.ops, values, values[1:])]
            return sympy.And(*links)
        if isinstance(node, ast.BoolOp):
            parts = [self._condition(v) for v in node.values]
            return sympy.And(*parts) if isinstance(node.op, ast.And) else sympy.Or(*parts)
        return sympy.Not(self._condition(node.operand))  # the whitelist allows only `not` here

    def _sum(self, top: ast.BinOp) -> tuple[sympy.Expr, float | None]:
        # Walk the left-leaning chain iteratively so long sums need no recursion.
        terms, values = [], []
        node = top
        while isinstance(node, ast.BinOp) and isinstance(node.op, _ADDITIVE):
            term, value = self.build(node.right)
            if isinstance(node.op, ast.Sub):
                term, value = -term, None if value is None else -value
            terms.append(term)
            values.append(value)
            node = node.left
        term, value = self.build(node)
        terms.append(term)
        values.append(value)
        total = self._shadow(lambda *v: math.fsum(v), values, top)
        return sympy.Add(*reversed(terms)), total

    def _product(self, top: ast.BinOp) -> tuple[sympy.Expr, float | None]:
        factors, values = [], []
        node = top
        while isinstance(node, ast.BinOp) and isinstance(node.op, _MULTIPLICATIVE):
            factor, value = self.build(node.right)
            if isinstance(node.op, ast.Div):
                value = self._shadow(lambda v: 1.0 / v, (value,), node.right)
                factor = _power(factor, sympy.Integer(-1))
            factors.append(factor)
            values.append(value)
            node = node.left
        factor, value = self.build(node)
        factors.append(factor)
        values.append(value)
        total = self._shadow(_float_product, values, top)
        return sympy.Mul(*reversed(factors)), total


def _check_result(expr: sympy.Expr) -> None:
    """Refuse results that are undefined, complex or absurdly large."""
    if expr.has(sympy.zoo, sympy.oo, -sympy.oo, sympy.nan):
        raise ExpressionError(
            "the expression is undefined or infinite (division by zero or log(0)?)")
    if expr.has(sympy.I):
        raise ExpressionError(
            "the expression has a complex value (square root or log of a negative number?)")
    for power in expr.atoms(sympy.Pow):
        if power.exp.is_Number:
            if abs(power.exp) > MAX_EXPONENT:
                raise ExpressionError(
                    f"the exponent {power.exp} is too large (limit {MAX_EXPONENT})")
            if power.base.is_Number and power.base.is_negative and not power.exp.is_integer:
                raise ExpressionError(
                    f"({power.base})**({power.exp}) has a complex value")
    for number in expr.atoms(sympy.Number):
        if _log10_magnitude(number) > MAX_MAGNITUDE_LOG10:
            raise ExpressionError(f"a number in the expression is beyond 1e{MAX_MAGNITUDE_LOG10}")


def parse_expression(text: str, names: Mapping[str, sympy.Basic]) -> sympy.Expr:
    """Parse a model expression in study-file syntax into a sympy expression.

    Parameters
    ----------
    text : str
        The expression, e.g. ``"r*A*(1 - A/K)"``. Allowed: numbers (``2``, ``0.5``,
        ``1e-3``), names, unary ``+``/``-``, binary ``+ - * / **``, parentheses and
        calls of :data:`FUNCTIONS` (``hill(x, K, n) = x**n/(K**n + x**n)``;
        ``piecewise(v1, c1, v2, c2, ..., otherwise)`` is v1 where the condition c1
        holds, else v2 where c2 holds, ..., else the otherwise value (undefined when
        it is left out); conditions compare values with ``< <= > >= == !=`` joined
        by ``and``, ``or``, ``not``).
    names : mapping of str to sympy.Basic
        What each allowed identifier stands for: a Symbol, a number, or a whole expression
        (for named sub-expressions).

    Returns
    -------
    sympy.Expr
        Built directly from the checked syntax tree; integer literals stay
        ``sympy.Integer`` so polynomial structure survives.

    Raises
    ------
    ExpressionError
        For anything outside the whitelist, absurd sizes, or names missing from
        `names`; in the last case the error carries ``unknown_names``, a sorted
        list of all of them.
    """
    tree = syntax_tree(text)
    used = _whitelisted_names(tree, text)
    unknown = sorted(used - set(names))
    if unknown:
        listed = ", ".join(f"'{name}'" for name in unknown)
        error = ExpressionError(f"unknown name{'s' if len(unknown) > 1 else ''} {listed}")
        error.unknown_names = unknown
        raise error
    try:
        expr, _value = _Builder(text, names).build(tree)
    except ExpressionError:
        raise
    except (RecursionError, MemoryError, OverflowError, ValueError,
            ZeroDivisionError) as exc:
        detail = " ".join(str(exc).split())[:120] or type(exc).__name__
        raise ExpressionError(f"the expression cannot be built: {detail}") from None
    _check_result(expr)
    return expr


# --------------------------------------------------------------------------- back to text

_PRINTABLE_FUNCTIONS = {sympy.exp: "exp", sympy.log: "log", sympy.sin: "sin",
                        sympy.cos: "cos", sympy.tan: "tan", sympy.tanh: "tanh",
                        sympy.Abs: "abs", sympy.Min: "min", sympy.Max: "max"}


class _StudyPrinter(StrPrinter):
    """sympy's plain-text printer, speaking the study-file dialect."""

    def _print_Function(self, expr):
        name = _PRINTABLE_FUNCTIONS.get(expr.func)
        if name is None:
            raise ExpressionError(
                f"{expr.func.__name__}() cannot be written in study-file syntax")
        return f"{name}({', '.join(self._print(arg) for arg in expr.args)})"

    _print_Abs = _print_Min = _print_Max = _print_exp = _print_log = _print_Function

    def _print_Exp1(self, expr):
        return "exp(1)"

    def _print_Piecewise(self, expr):
        parts = []
        for value, condition in expr.args:
            parts.append(self._print(value))
            if condition is not sympy.true:  # sympy keeps an always-true branch last
                parts.append(self._print_condition(condition))
        return f"piecewise({', '.join(parts)})"

    _RELATIONS = {"<": "<", "<=": "<=", ">": ">", ">=": ">=", "==": "==", "!=": "!="}

    def _print_condition(self, condition) -> str:
        if isinstance(condition, sympy.core.relational.Relational) and condition.rel_op in self._RELATIONS:
            return f"{self._print(condition.lhs)} {condition.rel_op} {self._print(condition.rhs)}"
        if isinstance(condition, (sympy.And, sympy.Or)):
            joint = " and " if isinstance(condition, sympy.And) else " or "
            return joint.join(f"({self._print_condition(arg)})" for arg in condition.args)
        if isinstance(condition, sympy.Not):
            return f"not ({self._print_condition(condition.args[0])})"
        raise ExpressionError(f"the condition {condition} cannot be written in study-file syntax")

    def _print_Float(self, expr):
        value = float(expr)
        if not math.isfinite(value):
            raise ExpressionError(f"the number {expr} cannot be written in study-file syntax")
        return repr(value)

    def _print_Symbol(self, expr):
        if not expr.name.isidentifier() or keyword.iskeyword(expr.name):
            raise ExpressionError(f"the name {expr.name!r} cannot be written in study-file syntax")
        return expr.name

    def emptyPrinter(self, expr):
        raise ExpressionError(
            f"{type(expr).__name__} cannot be written in study-file syntax")


_PRINTABLE_ATOMS = (sympy.Symbol, sympy.Rational, sympy.Float)
# piecewise and what its conditions are made of
_PRINTABLE_LOGIC = (sympy.Piecewise, sympy.functions.elementary.piecewise.ExprCondPair,
                    sympy.core.relational.Relational, sympy.And, sympy.Or, sympy.Not,
                    sympy.logic.boolalg.BooleanTrue)


def to_text(expr: sympy.Expr) -> str:
    """Write a sympy expression in study-file syntax.

    Python operators with ``**`` for powers and the study-file function names
    (``abs``, ``min``, ``max``, ``piecewise``...), so that
    ``parse_expression(to_text(e), names)`` equals ``e`` mathematically.

    Raises
    ------
    ExpressionError
        If `expr` uses something the study-file syntax lacks (e.g. ``pi``,
        ``floor``, infinities or complex numbers).
    """
    for node in sympy.preorder_traversal(expr):
        if isinstance(node, (sympy.Add, sympy.Mul, sympy.Pow, *_PRINTABLE_LOGIC)):
            continue
        if isinstance(node, (sympy.Function, sympy.Min, sympy.Max)):
            if node.func not in _PRINTABLE_FUNCTIONS:
                raise ExpressionError(
                    f"{node.func.__name__}() cannot be written in study-file syntax")
        elif isinstance(node, _PRINTABLE_ATOMS):
            if isinstance(node, sympy.Float) and not node.is_finite:
                raise ExpressionError(f"{node} cannot be written in study-file syntax")
        elif node is not sympy.E:
            raise ExpressionError(f"{node} cannot be written in study-file syntax")
    return _StudyPrinter().doprint(expr)
