"""The safe expression parser: hostile input is refused, valid input becomes the right sympy.

Correct parses are checked against sympy expressions built by hand in this file
(reference library: sympy) and against Python's own operator semantics written as
plain Python arithmetic (reference: the Python language reference, "Operator
precedence").
"""

from __future__ import annotations

import time

import numpy as np
import pytest
import sympy

from poise.errors import ExpressionError
from poise.study.expressions import (FUNCTIONS, parse_expression, referenced_names,
                                     to_text)

x, y, z, K, n, r, A, G, c, s = sympy.symbols("x y z K n r A G c s")
NAMES = {str(sym): sym for sym in (x, y, z, K, n, r, A, G, c, s)}

HANG_GUARD_SECONDS = 30  # a hang guard, not a timing test


def _hostile_cases(marker: str) -> list[tuple[str, str]]:
    """(text, a word the refusal message must contain)."""
    return [
        (f"__import__('os').system('touch {marker}')", "not a known function"),
        (f"open('{marker}', 'w').write('x')", "not a known function"),
        ("().__class__.__bases__", "attribute"),
        ("x.__class__", "attribute"),
        ("__builtins__", "__"),
        ("__import__", "__"),
        ("x.real", "attribute"),
        ("x[0]", "indexing"),
        ("x[::1]", "indexing"),
        ("9**9**9**9", "exponent"),
        ("10**10**10", "exponent"),
        ("2**100000", "exponent"),
        ("10**400", "beyond"),
        ("(x**1000)**1000", "exponent"),
        ("((10**30*x)**1000)**1000", "beyond"),
        ("(" * 5000 + "x" + ")" * 5000, "brackets"),
        ("exp(" * 1000 + "x" + ")" * 1000, "brackets"),
        ("+".join(["x"] * 200_000), "limit is 20,000"),       # a 400 kB sum
        ("+".join(["x"] * 9_000), "names and numbers"),        # under the length limit
        ("-(" + "-x" * 2_500 + ")", "names and numbers"),
        ("-" * 6_000 + "(" + "-" * 6_000 + "x)", "nested"),     # no operand, no bracket excess
        ("+".join(["-(-(-(-x)))"] * 600), "parts"),
        ("max(" + ",".join(f"{i}*x" for i in range(1, 500)) + ")", "at most 20"),
        ("max(max(x, y, z, x+1, y+1), max(x, y, z, x+2, y+2), "
         "max(x, y, z, x+3, y+3), max(x, y, z, x+4, y+4))", "at most 20"),
        ("min(" + ",".join(f"exp({i})" for i in range(300)) + ")", "at most 20"),
        ("min(exp(exp(exp(100))), exp(exp(exp(99))))", "constant part"),
        ("exp(1e10)", "constant part"),
        ("1e300*1e300", "constant part"),
        ("-" * 19_999 + "x", "nested"),                        # CPython's parser gives up
        ("x**" * 6_000 + "x", "names and numbers"),
        ("x**" * 900 + "x", "deep"),
        ("-" * 150 + "x", "levels deep"),
        ("9" * 5000, "digits"),                                # a 5,000-digit integer
        ("1" * 31, "too large"),
        ("1e400", "too large"),
        ("lambda: 1", "lambda"),
        ("[x for x in ()]", "comprehension"),
        ("(x for x in ())", "generator"),
        ("'a'*10", "string"),
        ("b'x'", "string"),
        ("f'{x}'", "f-string"),
        ("(y:=1)", ":="),
        ("exp(x, y)", "exactly 1"),
        ("hill(x, K)", "exactly 3"),
        ("min(x)", "at least 2"),
        ("getattr(x, 'y')", "not a known function"),
        ("globals()", "not a known function"),
        ("eval('1')", "not a known function"),
        ("exp(x)(y)", "not a known function"),
        ("x(y)", "not a known function"),
        ("1 if x else 2", "conditional"),
        ("x // 2", "floor division"),
        ("x % 2", "remainder"),
        ("x @ y", "matrix"),
        ("x ^ 2", "bit"),
        ("x << 1", "shift"),
        ("~x", "bit"),
        ("exp(x=1)", "keyword"),
        ("exp(*x)", "starred"),
        ("x < 1", "comparison"),
        ("x and y", "'and'"),
        ("not x", "'not'"),
        ("(x, y)", "tuple"),
        ("[x]", "list"),
        ("{x}", "set"),
        ("{x: 1}", "dict"),
        ("1j", "complex"),
        ("True", "True"),
        ("None", "None"),
        ("...", "Ellipsis"),
        ("\uff45\uff58\uff50(\uff58)", "U+FF45"),              # fullwidth "exp(x)"
        ("x\x00", "not a valid expression"),
        ("x; import os", "not a valid expression"),
        ("x\nimport os", "not a valid expression"),
        ("1 +", "not a valid expression"),
        ("", "empty"),
        ("   ", "empty"),
        ("1/0", "undefined"),
        ("log(0)", "undefined"),
        ("sqrt(-1)", "complex"),
        ("(-8)**(1/3)", "complex"),
    ]


# refusals that need the sympy result, so referenced_names() cannot see them
_FOUND_WHILE_BUILDING = {"exponent", "beyond", "undefined", "complex", "constant part"}


def test_at_least_25_distinct_hostile_inputs_are_listed(tmp_path):
    assert len({text for text, _ in _hostile_cases(str(tmp_path / "m"))}) >= 25


def test_hostile_inputs_are_refused_quickly_and_run_nothing(tmp_path):
    marker = tmp_path / "pwned_poise"
    # Even a caller that wrongly allows dunder names must not open the door.
    names = dict(NAMES, __import__=sympy.Symbol("imp"), __builtins__=sympy.Symbol("b"))
    for text, expected in _hostile_cases(str(marker)):
        start = time.perf_counter()
        with pytest.raises(ExpressionError) as caught:
            parse_expression(text, names)
            pytest.fail(f"accepted: {text[:60]!r}")
        elapsed = time.perf_counter() - start
        message = str(caught.value)
        assert expected.lower() in message.lower(), (text[:60], message)
        assert elapsed < HANG_GUARD_SECONDS, text[:60]
        if expected not in _FOUND_WHILE_BUILDING:
            with pytest.raises(ExpressionError):
                referenced_names(text)
        assert not marker.exists(), text[:60]


def test_syntax_errors_report_the_column():
    with pytest.raises(ExpressionError, match=r"not a valid expression \(column \d+\)"):
        parse_expression("x + * y", NAMES)


def test_non_text_is_refused():
    with pytest.raises(ExpressionError, match="must be text"):
        parse_expression(3, NAMES)  # type: ignore[arg-type]


def test_unknown_names_are_all_reported_sorted():
    with pytest.raises(ExpressionError, match="unknown names 'q', 'w'") as caught:
        parse_expression("w*x + q", NAMES)
    assert caught.value.unknown_names == ["q", "w"]
    with pytest.raises(ExpressionError, match="unknown name 'q'$"):
        parse_expression("q", NAMES)


def test_function_names_are_not_referenced_names():
    assert referenced_names("r*A*(1 - A/K) + exp(x) + hill(y, K, n)") == {
        "r", "A", "K", "x", "y", "n"}
    assert FUNCTIONS == {"exp", "log", "sqrt", "sin", "cos", "tan", "tanh",
                         "abs", "min", "max", "hill", "piecewise"}


# --------------------------------------------------------------------------- correct parses

@pytest.mark.parametrize("text, expected", [
    # reference library: sympy (each right-hand side is built by hand with sympy operators)
    ("r*A*(1 - A/K)", r * A * (1 - A / K)),
    ("hill(x, K, n)", x**n / (K**n + x**n)),
    ("1e-3*x", sympy.Float(0.001) * x),
    ("-x**2", -(x**2)),
    ("x - y - z", x - y - z),
    ("x/y/z", x / (y * z)),
    ("x/2", x * sympy.Rational(1, 2)),
    ("r*A*(1 - A/K) - c*A*G/(s + A)", r * A * (1 - A / K) - c * A * G / (s + A)),
    ("exp(-x) + log(y) + sqrt(z)", sympy.exp(-x) + sympy.log(y) + sympy.sqrt(z)),
    ("sin(x)*cos(y) - tan(z) + tanh(x)",
     sympy.sin(x) * sympy.cos(y) - sympy.tan(z) + sympy.tanh(x)),
    ("abs(x) + min(x, y) + max(x, y, z)", sympy.Abs(x) + sympy.Min(x, y) + sympy.Max(x, y, z)),
    ("+x", x),
    ("((x))", x),
    ("x**-1", 1 / x),
    ("x**0.5", x**sympy.Float(0.5)),
])
def test_parses_match_hand_built_sympy(text, expected):
    parsed = parse_expression(text, NAMES)
    assert parsed == expected
    assert sympy.simplify(parsed - expected) == 0


@pytest.mark.parametrize("text, python_value", [
    # reference: the Python language reference, "Operator precedence" — the right-hand
    # sides are evaluated by Python itself from the same characters written as code.
    ("2**-1", 2**-1),
    ("-2**2", -2**2),
    ("2**3**2", 2**3**2),
    ("2*3**2", 2 * 3**2),
    ("(1 + 2)*3", (1 + 2) * 3),
    ("10 - 4 - 3", 10 - 4 - 3),
    ("48/4/2", 48 / 4 / 2),
    ("-3**-2", -3**-2),
    ("1e-3*2", 1e-3 * 2),
])
def test_numeric_results_follow_python_semantics(text, python_value):
    assert float(parse_expression(text, {})) == pytest.approx(python_value, rel=1e-15)


def test_integer_powers_stay_integral_for_polynomial_detection():
    parsed = parse_expression("x**2 + 3*x*y", NAMES)
    assert parsed.is_polynomial(x, y)
    # reference library: sympy.Poly gives the total degree
    assert sympy.Poly(parsed, x, y).total_degree() == 2
    assert isinstance(parse_expression("x**2", NAMES).exp, sympy.Integer)


def test_names_may_stand_for_whole_sub_expressions():
    uptake = c * A / (s + A)
    parsed = parse_expression("uptake*G - r*G", {"uptake": uptake, "G": G, "r": r})
    assert parsed == uptake * G - r * G  # reference library: sympy


def test_large_but_reasonable_expressions_are_accepted():
    terms = " + ".join(f"{i}*x**{i % 7}" for i in range(1, 300))
    parsed = parse_expression(terms, NAMES)
    expected = sum((i * x**(i % 7) for i in range(1, 300)), sympy.Integer(0))
    assert sympy.expand(parsed - expected) == 0  # reference library: sympy
    assert parse_expression("x**1000", NAMES) == x**1000


# --------------------------------------------------------------------------- to_text

def test_to_text_uses_study_file_names():
    assert to_text(sympy.Abs(x)) == "abs(x)"
    assert to_text(sympy.Min(x, y)) in ("min(x, y)", "min(y, x)")
    assert to_text(sympy.Max(x, y)) in ("max(x, y)", "max(y, x)")
    assert to_text(x**2) == "x**2"
    assert to_text(sympy.E * x) in ("exp(1)*x", "x*exp(1)")


@pytest.mark.parametrize("expr", [sympy.pi * x, sympy.I * x, sympy.sinh(x),
                                  sympy.floor(x), sympy.oo * x,
                                  sympy.Symbol("not a name")])
def test_to_text_refuses_what_the_syntax_lacks(expr):
    with pytest.raises(ExpressionError, match="cannot be written"):
        to_text(expr)


def _random_expression(rng: np.random.Generator, depth: int) -> sympy.Expr:
    """A random expression over x, y, z, K built with sympy operations."""
    if depth == 0 or rng.random() < 0.2:
        kind = rng.integers(4)
        if kind == 0:
            return (x, y, z, K)[rng.integers(4)]
        if kind == 1:
            return sympy.Integer(int(rng.integers(-5, 6)))
        if kind == 2:
            return sympy.Rational(int(rng.integers(1, 9)), int(rng.integers(1, 9)))
        return sympy.Float(float(rng.uniform(-3, 3)))
    a = _random_expression(rng, depth - 1)
    b = _random_expression(rng, depth - 1)
    op = rng.integers(13)
    positive = (x, y, z, K)[rng.integers(4)]
    if op == 0:
        return a + b
    if op == 1:
        return a - b
    if op == 2:
        return a * b
    if op == 3:
        return a / (positive + 1)
    if op == 4:
        return a ** int(rng.integers(-3, 4))
    if op == 5:
        return positive ** sympy.Rational(int(rng.integers(1, 5)), int(rng.integers(2, 5)))
    if op == 6:
        return sympy.exp(a / 10)
    if op == 7:
        return sympy.log(positive + 2) * a
    if op == 8:
        return sympy.sqrt(positive) + sympy.sin(a) - sympy.cos(b)
    if op == 9:
        return sympy.tanh(a) + sympy.tan(b / 10)
    if op == 10:
        return sympy.Abs(a - b)
    if op == 11:
        return sympy.Min(a, b) + sympy.Max(a, positive)
    return positive ** sympy.Float(float(rng.uniform(0.1, 3)))


def test_to_text_round_trips_random_expressions():
    rng = np.random.default_rng(20240601)
    points = rng.uniform(0.5, 2.0, size=(5, 4))
    checked = 0
    for _ in range(40):
        expr = _random_expression(rng, 3)
        if expr.has(sympy.zoo, sympy.nan, sympy.oo, sympy.I):
            continue  # e.g. 0**-1 built by chance; not an expression a study can hold
        text = to_text(expr)
        back = parse_expression(text, NAMES)
        # reference library: sympy (numerical evaluation of both at random points)
        for point in points:
            subs = dict(zip((x, y, z, K), point))
            want = complex(expr.evalf(30, subs=subs))
            got = complex(back.evalf(30, subs=subs))
            assert abs(got - want) <= 1e-9 * (1 + abs(want)), (expr, text, back)
        checked += 1
    assert checked >= 30
