"""Tests for netprobe.model.expr, the safe parser of coupling expressions.

References are Python's own arithmetic, :mod:`math` and :mod:`cmath` on the same formulas,
written as Python source in this file (never produced by handing text to Python's compiler).
"""

import cmath
import dataclasses
import math
import sys
from datetime import timedelta

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from conftest import tol

from netprobe.errors import ExpressionError
from netprobe.model.expr import (
    CONSTANTS,
    FUNCTION_NAMES,
    MAX_DEPTH,
    MAX_LENGTH,
    RESERVED_NAMES,
    Expression,
    check_parameter_name,
    evaluate,
    parse,
    parse_value,
)

EPS = sys.float_info.epsilon
# Both sides round each of a handful of operations once; integer-exact Python references
# (3**40) are rounded only at the end, so allow a few units in the last place.
REL_TOL = 8 * EPS

ENV = {"t": 0.7, "t2": -1.25, "phi": 0.4, "z": 0.5 - 1.5j, "n": 3}


def _close(value, expected):
    return abs(value - expected) <= REL_TOL * abs(expected)


def _expected_type(expected):
    return complex if isinstance(expected, complex) and expected.imag != 0.0 else float


# (text, reference by Python's arithmetic on the same formula): operator precedence,
# associativity and signs follow Python's grammar (common practice, the Python language reference).
CASES = [
    pytest.param("2+3*4", 2 + 3 * 4, id="product-before-sum"),
    pytest.param("(2+3)*4", (2 + 3) * 4, id="parentheses"),
    pytest.param("1-2-3", 1 - 2 - 3, id="minus-left-assoc"),
    pytest.param("8/4/2", 8 / 4 / 2, id="divide-left-assoc"),
    pytest.param("7/2*3", 7 / 2 * 3, id="divide-times-left-assoc"),
    pytest.param("2*3**2", 2 * 3**2, id="power-before-product"),
    pytest.param("2**3**2", 2**3**2, id="power-right-assoc"),
    pytest.param("-2**2", -(2**2), id="power-before-left-sign"),
    pytest.param("(-2)**2", (-2) ** 2, id="signed-base"),
    pytest.param("2**-1", 2**-1, id="signed-exponent"),
    pytest.param("-2**-2", -(2**-2), id="both-signs"),
    pytest.param("2**-1**2", 2 ** -(1**2), id="signed-exponent-power"),
    pytest.param("2*-3", 2 * -3, id="sign-after-times"),
    pytest.param("--3", -(-3), id="double-minus"),
    pytest.param("-+-3", -(+(-3)), id="mixed-signs"),
    pytest.param("1 - -2", 1 - (-2), id="minus-minus"),
    pytest.param("3**40", 3**40, id="large-integer-power"),
    pytest.param("1e-3*1E3", 1e-3 * 1e3, id="exponent-literals"),
    pytest.param(".5 + 1. + 2.5e+1", 0.5 + 1.0 + 2.5e1, id="dot-literals"),
    pytest.param("  \t2\n* 3 ", 2 * 3, id="whitespace"),
    pytest.param("3.j*2j", 3j * 2j, id="imaginary-product-real"),
    pytest.param("1j**2", 1j**2, id="imaginary-square"),
    pytest.param("1.5J - 2", 1.5j - 2, id="capital-j"),
    pytest.param("(1+2j)/(3-4j)", (1 + 2j) / (3 - 4j), id="complex-division"),
    pytest.param("(-8)**(1/3)", (-8) ** (1 / 3), id="negative-base-fractional-power"),
    pytest.param("sqrt(2)", math.sqrt(2), id="sqrt"),
    pytest.param("sqrt(-4)", cmath.sqrt(-4), id="sqrt-negative"),
    pytest.param("sqrt(3-4j)", cmath.sqrt(3 - 4j), id="sqrt-complex"),
    pytest.param("exp(1.5)", math.exp(1.5), id="exp"),
    pytest.param("exp(1j*pi/3)", cmath.exp(1j * math.pi / 3), id="exp-imaginary"),
    pytest.param("sin(pi/6)", math.sin(math.pi / 6), id="sin"),
    pytest.param("cos(0.3)", math.cos(0.3), id="cos"),
    pytest.param("tan(1)", math.tan(1), id="tan"),
    pytest.param("sin(1+1j)", cmath.sin(1 + 1j), id="sin-complex"),
    pytest.param("log(e)", math.log(math.e), id="log-e"),
    pytest.param("log(10)", math.log(10), id="log"),
    pytest.param("log(-1)", cmath.log(-1), id="log-negative"),
    pytest.param("abs(3+4j)", abs(3 + 4j), id="abs-complex"),
    pytest.param("abs(-2.5)", abs(-2.5), id="abs-real"),
    pytest.param("conj(1+2j)", (1 + 2j).conjugate(), id="conj"),
    pytest.param("real(2-3j)", (2 - 3j).real, id="real"),
    pytest.param("imag(2-3j)", (2 - 3j).imag, id="imag"),
    pytest.param("imag(5)", 0.0, id="imag-of-real"),
    pytest.param("atan2(1, -1)", math.atan2(1, -1), id="atan2"),
    pytest.param("atan2(-0.5, 2)", math.atan2(-0.5, 2), id="atan2-negative"),
    pytest.param("2*pi*e", 2 * math.pi * math.e, id="constants"),
    pytest.param("sqrt(abs(-16))**3", math.sqrt(abs(-16)) ** 3, id="nested-calls"),
    pytest.param("-t2 * exp(1j*phi)", -ENV["t2"] * cmath.exp(1j * ENV["phi"]), id="chiral-hopping"),
    pytest.param("t**n / (1 + t)", ENV["t"] ** ENV["n"] / (1 + ENV["t"]), id="parameters"),
    pytest.param("conj(z)*z", (ENV["z"].conjugate() * ENV["z"]), id="modulus-square"),
]


@pytest.mark.parametrize(("text", "expected"), CASES)
def test_matches_python_arithmetic(text, expected):
    value = evaluate(text, ENV)
    assert type(value) is _expected_type(expected)
    assert _close(value, expected)


def test_euler_identity():
    # exp(i*pi) = -1 (Euler, Introductio in analysin infinitorum, 1748). pi is rounded to a double,
    # so sin(pi) is about 1.2e-16, the rounding error of pi; 4.5 ulps (1e-15) allow that and no more.
    value = evaluate("exp(1j*pi)")
    assert abs(value + 1) < tol(factor=4.5)


def test_real_value_rule():
    # A zero imaginary part makes a value real, so the branch cut of sqrt sees -1 and not -1-0j.
    assert evaluate("sqrt(conj(1j*1j))") == 1j
    assert type(evaluate("(1+1j)*(1-1j)")) is float
    assert type(evaluate("1j*0")) is float


def test_names_and_identity():
    expression = parse("-t2 * exp(1j*phi) + pi*e + sqrt(j)", context="coupling")
    assert expression.names == frozenset({"t2", "phi", "j"})
    assert expression.text == "-t2 * exp(1j*phi) + pi*e + sqrt(j)"
    assert expression == Expression("-t2 * exp(1j*phi) + pi*e + sqrt(j)")
    assert hash(expression) == hash(Expression(expression.text))
    assert repr(expression) == "Expression(text='-t2 * exp(1j*phi) + pi*e + sqrt(j)')"
    with pytest.raises(dataclasses.FrozenInstanceError):
        expression.text = "1"
    assert parse("2*pi").names == frozenset()


def test_expression_is_reusable():
    expression = parse("a*x + b")
    assert expression.evaluate({"a": 2, "x": 3, "b": 1}) == 2 * 3 + 1
    assert expression.evaluate({"a": 0.5, "x": -4, "b": 0.25}) == 0.5 * -4 + 0.25
    # Parameters the expression does not use are ignored.
    assert parse("x").evaluate({"x": 1.5, "unused": 9}) == 1.5


def test_numpy_scalars_are_numbers():
    env = {"a": np.float64(0.5), "b": np.int64(3), "c": np.complex128(1 + 1j)}
    value = evaluate("a*b*c", env)
    assert type(value) is complex
    assert value == 0.5 * 3 * (1 + 1j)


def test_reserved_names_are_documented_constants_and_functions():
    assert RESERVED_NAMES == frozenset(CONSTANTS) | frozenset(FUNCTION_NAMES)
    assert set(FUNCTION_NAMES) == {
        "sqrt", "exp", "sin", "cos", "tan", "log", "abs", "conj", "real", "imag", "atan2",
    }  # fmt: skip
    # pi and e are the values from the math module (common practice).
    assert CONSTANTS["pi"] == math.pi and CONSTANTS["e"] == math.e


PARSE_ERRORS = [
    pytest.param("", "empty", id="empty"),
    pytest.param("   ", "empty", id="blank"),
    pytest.param("exq(1)", r"unknown function 'exq' at column 1 \(allowed: sqrt, exp", id="unknown-function"),
    pytest.param("2 +", "ends too early after '\\+'", id="dangling-operator"),
    pytest.param("(1+2", r"missing '\)' to close '\(' at column 1", id="unclosed"),
    pytest.param("sqrt(1", r"missing '\)' to close 'sqrt\('", id="unclosed-call"),
    pytest.param("1+2)", r"unmatched '\)' at column 4", id="unmatched"),
    pytest.param("2^3", r"'\^' at column 2; write '\*\*'", id="caret"),
    pytest.param("2 % 3", r"'%' at column 3", id="percent"),
    pytest.param("2t", "malformed number '2t' at column 1.*write '2\\*t'", id="juxtaposition"),
    pytest.param("1e", "malformed number '1e'", id="bare-exponent"),
    pytest.param("1.2.3", "malformed number '1.2.3'", id="two-dots"),
    pytest.param("1jj", "malformed number '1jj'", id="double-j"),
    pytest.param("sqrt + 1", r"function 'sqrt' at column 1 needs parentheses: sqrt\(x\)", id="bare-function"),
    pytest.param("pi(2)", "'pi' at column 1 is a constant, not a function", id="called-constant"),
    pytest.param("atan2(1)", r"atan2\(y, x\) at column 1 takes 2 arguments, got 1", id="atan2-arity"),
    pytest.param("sqrt(1, 2)", r"sqrt\(x\) at column 1 takes 1 argument, got 2", id="sqrt-arity"),
    pytest.param("exp()", "takes 1 argument, got 0", id="no-arguments"),
    pytest.param("1, 2", "',' at column 2 outside a function call", id="stray-comma"),
    pytest.param("2 3", "unexpected '3' at column 3; expected an operator", id="missing-operator"),
    pytest.param("1 +* 2", r"unexpected '\*' at column 4; expected a number", id="double-operator"),
    pytest.param("()", r"unexpected '\)' at column 2", id="empty-parentheses"),
    pytest.param("1e400", "number '1e400' at column 1 is too large", id="huge-literal"),
    pytest.param("x\u00b2", r"unexpected character '²' at column 2 \(allowed: numbers", id="unicode"),
    pytest.param("1+\n$", r"'1\+\\n\$': unexpected character '\$' at column 4", id="newline-quoted"),
    pytest.param(
        "x" * (MAX_LENGTH + 1), f"{MAX_LENGTH + 1} characters long; the limit is {MAX_LENGTH}", id="too-long"
    ),
    pytest.param(
        "(" * 150 + "1" + ")" * 150, f"nesting is deeper than the limit of {MAX_DEPTH}", id="deep-parens"
    ),
    pytest.param("-" * 200 + "1", "nesting is deeper", id="deep-signs"),
    pytest.param("2**" * 300 + "2", "nesting is deeper", id="deep-powers"),
    pytest.param("sqrt(" * 120 + "1" + ")" * 120, "nesting is deeper", id="deep-calls"),
]


@pytest.mark.parametrize(("text", "match"), PARSE_ERRORS)
def test_parse_errors(text, match):
    with pytest.raises(ExpressionError, match=match) as caught:
        parse(text)
    message = str(caught.value)
    assert "\n" not in message
    assert message.startswith("expression ")


def test_error_names_the_context():
    with pytest.raises(ExpressionError, match=r"^coupling '-t2 \* exq\(1j\*phi\)': unknown function 'exq'"):
        parse("-t2 * exq(1j*phi)", context="coupling")


def test_nesting_at_the_limit_is_accepted():
    assert evaluate("(" * (MAX_DEPTH - 1) + "1" + ")" * (MAX_DEPTH - 1)) == 1.0
    assert evaluate("-" * (MAX_DEPTH - 1) + "1") == (-1.0) ** (MAX_DEPTH - 1)
    # A long flat sum is not nesting and evaluates without recursion.
    assert evaluate("+".join(["1"] * 400)) == 400.0


def test_parse_rejects_non_strings():
    with pytest.raises(ExpressionError, match="expression must be a string, got int 3"):
        parse(3)


EVALUATION_ERRORS = [
    pytest.param("1/0", {}, "division by zero at '/' at column 2", id="divide-by-zero"),
    pytest.param("1/(x-x)", {"x": 1}, "division by zero", id="divide-by-computed-zero"),
    pytest.param("1/(0j)", {}, "division by zero", id="divide-by-complex-zero"),
    pytest.param("0**-1", {}, "zero raised to a negative or complex power", id="zero-power"),
    pytest.param("exp(1000)", {}, r"exp\(1000.0\) at column 1 overflows", id="exp-overflow"),
    pytest.param("exp(1000+1j)", {}, "overflows", id="complex-exp-overflow"),
    pytest.param("1e200*1e200", {}, r"result of '\*' at column 6 overflows", id="product-overflow"),
    pytest.param("10.0**400", {}, r"result of '\*\*' at column 5 overflows", id="power-overflow"),
    pytest.param("(1e200+1j)**3", {}, "overflows", id="complex-power-overflow"),
    pytest.param("1/(1e-200*1e-200) - 1", {}, "division by zero", id="underflow-to-zero"),
    pytest.param("log(0)", {}, r"log\(0.0\) at column 1 is undefined", id="log-zero"),
    pytest.param("atan2(1j, 1)", {}, "needs real arguments", id="atan2-complex"),
    pytest.param("x+y", {"x": 1}, r"unknown name 'y' \(available parameters: x\)", id="unknown-name"),
    pytest.param("x*y", {}, r"unknown names 'x', 'y' \(no parameters are defined\)", id="no-parameters"),
    pytest.param("1", {"pi": 3}, "parameter 'pi' clashes with a built-in constant", id="constant-clash"),
    pytest.param("1", {"sqrt": 1}, "parameter 'sqrt' clashes.*rename it", id="function-clash"),
    pytest.param("x", {"x": True}, "parameter 'x' = True is a boolean", id="boolean-parameter"),
    pytest.param("x", {"x": "1"}, r"parameter 'x' = '1' is not a number \(got str\)", id="string-parameter"),
    pytest.param("x", {"x": float("nan")}, "parameter 'x' = nan is not finite", id="nan-parameter"),
    pytest.param("x", {"x": complex(1, math.inf)}, "is not finite", id="infinite-parameter"),
    pytest.param("x", {"x": 10**400}, r"= 1000.*\.\.\. is too large", id="huge-int-parameter"),
    pytest.param("x", [("x", 1)], "parameters must be a mapping", id="not-a-mapping"),
]


@pytest.mark.parametrize(("text", "env", "match"), EVALUATION_ERRORS)
def test_evaluation_errors(text, env, match):
    expression = parse(text)
    with pytest.raises(ExpressionError, match=match) as caught:
        expression.evaluate(env)
    assert "\n" not in str(caught.value)


def test_parse_value():
    assert parse_value(2) == 2.0 and type(parse_value(2)) is float
    assert parse_value(-1.5) == -1.5
    assert parse_value(1 + 2j) == 1 + 2j
    assert type(parse_value(2 + 0j)) is float
    assert parse_value(np.float32(0.5)) == 0.5
    assert parse_value("t/2", {"t": 1}) == 0.5
    assert parse_value("sqrt(-1)") == 1j


@pytest.mark.parametrize(
    ("value", "match"),
    [
        pytest.param(True, "coupling 't' True is a boolean, not a number; write a finite number", id="true"),
        pytest.param(False, "is a boolean", id="false"),
        pytest.param([1], r"is not a number \(got list\)", id="list"),
        pytest.param(None, r"is not a number \(got NoneType\)", id="none"),
        pytest.param(math.inf, "inf is not finite", id="inf"),
        pytest.param(10**400, "is too large for double precision", id="huge-int"),
        pytest.param("2*", "coupling 't' '2\\*': the expression ends too early", id="bad-string"),
    ],
)
def test_parse_value_errors(value, match):
    with pytest.raises(ExpressionError, match=match):
        parse_value(value, {}, context="coupling 't'")


def test_check_parameter_name():
    assert check_parameter_name("J_perp2") == "J_perp2"
    with pytest.raises(ExpressionError, match="parameter name 'pi' is reserved for the built-in constant"):
        check_parameter_name("pi")
    with pytest.raises(ExpressionError, match="'exp' is reserved for the built-in function"):
        check_parameter_name("exp")
    for bad in ["2t", "", "t-2", "t\u00e9", 7]:
        with pytest.raises(ExpressionError, match="is not a valid name"):
            check_parameter_name(bad)


# ---- property tests -------------------------------------------------------------------------

_TOKENS = [
    "1", "2.5", ".5", "1e-3", "1E+2", "3j", "0j", "x", "t", "pi", "e", "j",
    "sqrt", "exp", "log", "atan2", "conj", "(", ")", ",", "+", "-", "*", "/", "**", " ", ".", "^",
]  # fmt: skip
_TOKEN_SOUP = st.lists(st.sampled_from(_TOKENS), max_size=40).map("".join)
_CHARACTER_SOUP = st.text(alphabet="0123456789.eEjJ+-*/() ,_xtpisqrlogan\t\n", max_size=60)
_HOSTILE = st.builds(
    lambda opening, closing, middle: opening + middle + closing,
    st.sampled_from(["(", "-", "2**", "sqrt(", "+("]).flatmap(
        lambda unit: st.integers(0, 200).map(lambda n: unit * n)
    ),
    st.integers(0, 200).map(lambda n: ")" * n),
    st.sampled_from(["1", "x", "", "1)"]),
)

# A generous per-example deadline: a hang or runaway recursion would blow far past it.
_PROPERTY = settings(max_examples=300, deadline=timedelta(seconds=2))


@_PROPERTY
@given(st.one_of(_TOKEN_SOUP, _CHARACTER_SOUP, _HOSTILE, st.text(max_size=80)))
def test_arbitrary_text_parses_or_raises_expression_error(text):
    try:
        expression = parse(text)
    except ExpressionError as error:
        assert "\n" not in str(error)
        return
    assert isinstance(expression, Expression)
    try:
        value = expression.evaluate({name: 0.75 for name in expression.names})
    except ExpressionError:
        return
    assert type(value) in (float, complex)
    assert cmath.isfinite(value)


# Reference evaluation for generated formulas: Python's operators, math and cmath, with the
# documented rules (a zero imaginary part makes a value real; math inside the real domain,
# cmath outside it; non-finite values and Python's arithmetic errors mean "undefined").
class _Undefined(Exception):
    """The reference computation has no finite value."""


def _settle(value):
    if isinstance(value, complex) and value.imag == 0.0:
        value = value.real
    if not cmath.isfinite(value):
        raise _Undefined
    return value


def _real_or_complex(real, general, domain=lambda x: True):
    return lambda x: real(x) if isinstance(x, float) and domain(x) else general(x)


def _atan2(y, x):
    if not (isinstance(y, float) and isinstance(x, float)):
        raise _Undefined
    return math.atan2(y, x)


_REFERENCE_FUNCTIONS = {
    "sqrt": _real_or_complex(math.sqrt, cmath.sqrt, lambda x: x >= 0),
    "exp": _real_or_complex(math.exp, cmath.exp),
    "sin": _real_or_complex(math.sin, cmath.sin),
    "cos": _real_or_complex(math.cos, cmath.cos),
    "tan": _real_or_complex(math.tan, cmath.tan),
    "log": _real_or_complex(math.log, cmath.log, lambda x: x > 0),
    "abs": abs,
    "conj": lambda x: x.conjugate(),
    "real": lambda x: float(x.real),
    "imag": lambda x: float(x.imag),
    "atan2": _atan2,
}
_REFERENCE_OPERATORS = {
    "+": lambda a, b: a + b,
    "-": lambda a, b: a - b,
    "*": lambda a, b: a * b,
    "/": lambda a, b: a / b,
    "**": lambda a, b: a**b,
}
_GRAMMAR_ENV = {"t": 1.0, "u": -2.5, "phi": 0.3, "z": 0.5 - 1.5j}
# Binding strength of a node's outermost construct, as in Python's grammar.
_SUM, _PRODUCT, _SIGNED, _POWER, _ATOM = 1, 2, 3, 4, 5


def _apply(function, *values):
    """Reference value of one node; ``None`` when undefined."""
    if any(value is None for value in values):
        return None
    try:
        return _settle(function(*values))
    except (_Undefined, ZeroDivisionError, OverflowError, ValueError):
        return None


def _leaf(text, value):
    return (text, _ATOM, _apply(lambda v: v, value))


_nonnegative = st.floats(min_value=0.0, max_value=1e6, allow_nan=False, allow_infinity=False)
_LEAVES = st.one_of(
    st.integers(0, 20).map(lambda n: _leaf(str(n), float(n))),
    _nonnegative.map(lambda x: _leaf(repr(x), x)),
    _nonnegative.map(lambda x: _leaf(repr(x) + "j", complex(0.0, x))),
    st.integers(0, 999).map(lambda n: _leaf(f".{n:03d}", n / 1000)),
    st.sampled_from(sorted(_GRAMMAR_ENV)).map(lambda name: _leaf(name, _GRAMMAR_ENV[name])),
    st.sampled_from(sorted(CONSTANTS)).map(lambda name: _leaf(name, CONSTANTS[name])),
)


@st.composite
def _operand(draw, node, binds_at_least):
    """Text of a child node, in parentheses where Python's precedence needs them (or by chance)."""
    text, strength, _ = node
    if strength < binds_at_least or draw(st.integers(0, 5)) == 0:
        return f"({text})"
    return text


def _extend(children):
    space = st.sampled_from(["", " "])

    @st.composite
    def binary(draw):
        operator = draw(st.sampled_from(sorted(_REFERENCE_OPERATORS)))
        left, right = draw(children), draw(children)
        strength = {"+": _SUM, "-": _SUM, "*": _PRODUCT, "/": _PRODUCT, "**": _POWER}[operator]
        if operator == "**":
            # Only an atom may stand bare as a base; the exponent may carry a sign.
            left_text = draw(_operand(left, _ATOM))
            right_text = draw(_operand(right, _SIGNED))
        else:
            left_text = draw(_operand(left, strength))
            right_text = draw(_operand(right, strength + 1))
        gap = draw(space)
        value = _apply(_REFERENCE_OPERATORS[operator], left[2], right[2])
        return (f"{left_text}{gap}{operator}{gap}{right_text}", strength, value)

    @st.composite
    def signed(draw):
        sign = draw(st.sampled_from("+-"))
        operand = draw(children)
        value = operand[2] if sign == "+" else _apply(lambda v: -v, operand[2])
        return (f"{sign}{draw(_operand(operand, _SIGNED))}", _SIGNED, value)

    @st.composite
    def call(draw):
        name = draw(st.sampled_from(sorted(_REFERENCE_FUNCTIONS)))
        arguments = [draw(children) for _ in range(2 if name == "atan2" else 1)]
        text = ", ".join(argument[0] for argument in arguments)
        value = _apply(_REFERENCE_FUNCTIONS[name], *(argument[2] for argument in arguments))
        return (f"{name}({text})", _ATOM, value)

    return st.one_of(binary(), signed(), call())


_FORMULAS = st.recursive(_LEAVES, _extend, max_leaves=12)


@settings(
    max_examples=300, deadline=timedelta(seconds=2), suppress_health_check=[HealthCheck.too_slow]
)
@given(_FORMULAS)
def test_generated_formulas_match_reference(formula):
    text, _, expected = formula
    expression = parse(text)
    if expected is None:
        with pytest.raises(ExpressionError):
            expression.evaluate(_GRAMMAR_ENV)
        return
    value = expression.evaluate(_GRAMMAR_ENV)
    # Same operations in the same order on the same doubles: the results agree bit for bit.
    assert type(value) is type(expected)
    assert value == expected
