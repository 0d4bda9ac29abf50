"""Safe arithmetic for the coupling expressions written in model files.

A model file may give a coupling as a number or as a short formula in its parameters,
for example ``"-t2 * exp(1j*phi)"``. This module reads such formulas with its own tokenizer
and precedence-climbing parser; nothing read from a file is ever handed to Python's
compiler. Parsing produces an :class:`Expression`, a frozen object that holds the text, the
free parameter names it uses and a postfix program that is evaluated on an explicit stack.

Grammar (EBNF, whitespace between tokens is ignored)::

    expression = sum ;
    sum        = product , { ( "+" | "-" ) , product } ;
    product    = unary , { ( "*" | "/" ) , unary } ;
    unary      = ( "+" | "-" ) , unary | power ;
    power      = atom , [ "**" , unary ] ;
    atom       = number | name | call | "(" , expression , ")" ;
    call       = function , "(" , [ expression , { "," , expression } ] , ")" ;
    number     = ( digits , [ "." , [ digits ] ] | "." , digits ) ,
                 [ ( "e" | "E" ) , [ "+" | "-" ] , digits ] , [ "j" | "J" ] ;
    name       = ( letter | "_" ) , { letter | digit | "_" } ;      (ASCII only)

This is Python's precedence: ``**`` is right-associative and binds tighter than a sign on its
left but accepts a sign on its right, so ``-2**2 == -4`` and ``2**-1 == 0.5``.
"""

from __future__ import annotations

import cmath
import math
import numbers
import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from types import MappingProxyType

from netprobe.errors import ExpressionError

__all__ = [
    "CONSTANTS",
    "FUNCTION_NAMES",
    "RESERVED_NAMES",
    "MAX_LENGTH",
    "MAX_DEPTH",
    "Expression",
    "parse",
    "evaluate",
    "parse_value",
    "check_parameter_name",
]

#: Longest expression text accepted, in characters.
MAX_LENGTH = 1000
#: Deepest nesting accepted; each parenthesis, sign, power exponent and call argument nests one level.
MAX_DEPTH = 100

#: Named constants; parameters may not take these names.
CONSTANTS: Mapping[str, float] = MappingProxyType({"pi": math.pi, "e": math.e})

Number = float | complex


@dataclass(frozen=True)
class _Function:
    """One whitelisted function: its call signature, arity and implementation."""

    signature: str
    arity: int
    apply: Callable[..., Number]
    real_only: bool = False


def _real_when_possible(real: Callable, general: Callable, domain: Callable | None = None) -> Callable:
    # math keeps real results exactly real; cmath takes over outside the real domain.
    def apply(x: Number) -> Number:
        if isinstance(x, float) and (domain is None or domain(x)):
            return real(x)
        return general(x)

    return apply


_FUNCTIONS: Mapping[str, _Function] = MappingProxyType(
    {
        "sqrt": _Function("sqrt(x)", 1, _real_when_possible(math.sqrt, cmath.sqrt, lambda x: x >= 0.0)),
        "exp": _Function("exp(x)", 1, _real_when_possible(math.exp, cmath.exp)),
        "sin": _Function("sin(x)", 1, _real_when_possible(math.sin, cmath.sin)),
        "cos": _Function("cos(x)", 1, _real_when_possible(math.cos, cmath.cos)),
        "tan": _Function("tan(x)", 1, _real_when_possible(math.tan, cmath.tan)),
        "log": _Function("log(x)", 1, _real_when_possible(math.log, cmath.log, lambda x: x > 0.0)),
        "abs": _Function("abs(x)", 1, abs),
        "conj": _Function("conj(x)", 1, lambda x: x.conjugate()),
        "real": _Function("real(x)", 1, lambda x: float(x.real)),
        "imag": _Function("imag(x)", 1, lambda x: float(x.imag)),
        "atan2": _Function("atan2(y, x)", 2, math.atan2, real_only=True),
    }
)

#: Names of the whitelisted functions, in the order error messages list them.
FUNCTION_NAMES: tuple[str, ...] = tuple(_FUNCTIONS)
#: Names a parameter may not take: the constants and the functions.
RESERVED_NAMES: frozenset[str] = frozenset(CONSTANTS) | frozenset(_FUNCTIONS)

_ALLOWED_FUNCTIONS = ", ".join(FUNCTION_NAMES)
_ALLOWED_CHARACTERS = "numbers, names, + - * / ** ( ) , and spaces"
_EXPECTED_OPERAND = "expected a number, a name, '(' or a sign"
_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")
_TOKEN = re.compile(
    r"""
    (?P<space>[ \t\r\n]+)
    |(?P<number>(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?[jJ]?)
    |(?P<name>[A-Za-z_][A-Za-z0-9_]*)
    |(?P<op>\*\*|[-+*/(),])
    """,
    re.VERBOSE,
)
_NUMBER_TAIL = re.compile(r"[A-Za-z0-9_.]*")
_CHARACTER_HINTS = {
    "^": "; write '**' for powers",
    "[": "; use '(' and ')' for grouping",
    "]": "; use '(' and ')' for grouping",
    "{": "; use '(' and ')' for grouping",
    "}": "; use '(' and ')' for grouping",
    "%": "; only + - * / ** are operators",
}
# Precedence of the left-associative binary operators; signs and ** are grammar rules of their own.
_BINARY = {"+": 1, "-": 1, "*": 2, "/": 2}


@dataclass(frozen=True)
class _Token:
    kind: str  # "number", "name", "op" or "end"
    text: str
    column: int  # 1-based position in the expression text

    def describe(self) -> str:
        if self.kind == "end":
            return "the end of the expression"
        return f"'{self.text}' at column {self.column}"


def _show(text: str) -> str:
    """Quote an expression for a one-line message, shortening long text."""
    if len(text) > 60:
        text = text[:57] + "..."
    return repr(text)


def _brief(value: object) -> str:
    """Repr of a value for a one-line message, shortened if long."""
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def _settle(value: Number) -> Number | None:
    """Apply the real-value rule to one intermediate result; ``None`` means not finite."""
    if isinstance(value, complex) and value.imag == 0.0:
        value = value.real
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    return value if cmath.isfinite(value) else None


def _as_number(value: object) -> Number:
    """Convert a parameter or a literal value from a file to float or complex.

    Raises
    ------
    TypeError
        For booleans and non-numbers; the message is a fragment for the caller to complete.
    OverflowError
        For values that are not finite doubles; the message is a fragment likewise.
    """
    if isinstance(value, bool):
        raise TypeError("is a boolean, not a number")
    if isinstance(value, numbers.Real):
        try:
            number: Number = float(value)
        except OverflowError:
            raise OverflowError("is too large for double precision") from None
    elif isinstance(value, numbers.Complex):
        number = complex(value)
    else:
        raise TypeError(f"is not a number (got {type(value).__name__})")
    settled = _settle(number)
    if settled is None:
        raise OverflowError("is not finite")
    return settled


class _Parser:
    """Turn expression text into a postfix program in one left-to-right pass."""

    def __init__(self, text: str, context: str):
        self.text = text
        self.context = context
        self.tokens = self._tokenize()
        self.position = 0
        self.depth = 0
        self.program: list[tuple[str, object, int]] = []
        self.names: set[str] = set()

    def fail(self, problem: str) -> ExpressionError:
        return ExpressionError(f"{self.context} {_show(self.text)}: {problem}")

    def _tokenize(self) -> list[_Token]:
        text, tokens, start = self.text, [], 0
        while start < len(text):
            match = _TOKEN.match(text, start)
            if match is None:
                character = text[start]
                hint = _CHARACTER_HINTS.get(character, f" (allowed: {_ALLOWED_CHARACTERS})")
                raise self.fail(f"unexpected character {character!r} at column {start + 1}{hint}")
            kind, end = match.lastgroup, match.end()
            if kind == "number":
                # "2t", "1e" and "1.2.3" would otherwise split into tokens and give a baffling message.
                tail = _NUMBER_TAIL.match(text, end).end()
                if tail > end:
                    raise self.fail(
                        f"malformed number '{text[start:tail]}' at column {start + 1} (numbers look like "
                        "2, 0.5, .5, 1e-3, 2.5j; write '2*t' for a product)"
                    )
            if kind != "space":
                tokens.append(_Token(kind, match.group(), start + 1))
            start = end
        tokens.append(_Token("end", "", len(text) + 1))
        return tokens

    def peek(self) -> _Token:
        return self.tokens[self.position]

    def advance(self) -> _Token:
        token = self.tokens[self.position]
        if token.kind != "end":
            self.position += 1
        return token

    def is_op(self, *texts: str) -> bool:
        token = self.peek()
        return token.kind == "op" and token.text in texts

    def parse(self) -> tuple[tuple[tuple[str, object, int], ...], frozenset[str]]:
        if self.peek().kind == "end":
            raise self.fail("the expression is empty; write a number or a formula such as '2*t'")
        self.binary(1)
        token = self.peek()
        if token.kind != "end":
            if token.text == ")":
                raise self.fail(f"unmatched ')' at column {token.column}")
            if token.text == ",":
                raise self.fail(f"',' at column {token.column} outside a function call")
            raise self.fail(f"unexpected {token.describe()}; expected an operator (+ - * / **) or the end")
        return tuple(self.program), frozenset(self.names)

    def binary(self, min_precedence: int) -> None:
        """Precedence climbing over the left-associative operators + - * /."""
        self.unary()
        while self.peek().kind == "op" and _BINARY.get(self.peek().text, 0) >= min_precedence:
            token = self.advance()
            self.binary(_BINARY[token.text] + 1)
            self.program.append(("binary", token.text, token.column))

    def unary(self) -> None:
        # Every recursive path passes through here, so this one counter bounds the stack.
        self.depth += 1
        if self.depth > MAX_DEPTH:
            raise self.fail(
                f"nesting is deeper than the limit of {MAX_DEPTH} levels at {self.peek().describe()} "
                "(parentheses, signs and powers each nest one level); simplify the expression"
            )
        if self.is_op("+", "-"):
            sign = self.advance()
            self.unary()
            if sign.text == "-":
                self.program.append(("negate", None, sign.column))
        else:
            self.atom()
            if self.is_op("**"):
                # Right-associative, and the exponent may carry a sign: 2**-1, 2**3**2.
                token = self.advance()
                self.unary()
                self.program.append(("binary", "**", token.column))
        self.depth -= 1

    def atom(self) -> None:
        token = self.advance()
        if token.kind == "number":
            self.number(token)
        elif token.kind == "name":
            if self.is_op("("):
                self.call(token)
            elif token.text in CONSTANTS:
                self.program.append(("push", CONSTANTS[token.text], token.column))
            elif token.text in _FUNCTIONS:
                raise self.fail(
                    f"function '{token.text}' at column {token.column} needs parentheses: "
                    f"{_FUNCTIONS[token.text].signature}"
                )
            else:
                self.names.add(token.text)
                self.program.append(("load", token.text, token.column))
        elif token.kind == "op" and token.text == "(":
            self.binary(1)
            if not self.is_op(")"):
                raise self.fail(
                    f"missing ')' to close '(' at column {token.column}; found {self.peek().describe()}"
                )
            self.advance()
        elif token.kind == "end":
            after = f" after '{self.tokens[self.position - 1].text}'" if self.position else ""
            raise self.fail(f"the expression ends too early{after}; {_EXPECTED_OPERAND}")
        else:
            raise self.fail(f"unexpected {token.describe()}; {_EXPECTED_OPERAND}")

    def number(self, token: _Token) -> None:
        text = token.text
        value: Number = complex(0.0, float(text[:-1])) if text[-1] in "jJ" else float(text)
        settled = _settle(value)
        if settled is None:
            raise self.fail(f"number '{text}' at column {token.column} is too large for double precision")
        self.program.append(("push", settled, token.column))

    def call(self, name: _Token) -> None:
        function = _FUNCTIONS.get(name.text)
        if function is None:
            if name.text in CONSTANTS:
                raise self.fail(f"'{name.text}' at column {name.column} is a constant, not a function")
            raise self.fail(
                f"unknown function '{name.text}' at column {name.column} (allowed: {_ALLOWED_FUNCTIONS})"
            )
        self.advance()  # the "("
        count = 0
        if not self.is_op(")"):
            self.binary(1)
            count = 1
            while self.is_op(","):
                self.advance()
                self.binary(1)
                count += 1
        if not self.is_op(")"):
            raise self.fail(
                f"missing ')' to close '{name.text}(' at column {name.column}; found {self.peek().describe()}"
            )
        self.advance()
        if count != function.arity:
            plural = "argument" if function.arity == 1 else "arguments"
            raise self.fail(
                f"{function.signature} at column {name.column} takes {function.arity} {plural}, got {count}"
            )
        self.program.append(("call", name.text, name.column))


@dataclass(frozen=True)
class Expression:
    """A parsed coupling expression, ready to evaluate for any set of parameter values.

    Parameters
    ----------
    text : str
        The expression, at most :data:`MAX_LENGTH` characters.
    context : str, optional
        What the text is, for messages: ``"coupling"`` gives ``coupling '...': ...``.
        Not part of equality.

    Attributes
    ----------
    text : str
        The expression as given.
    names : frozenset of str
        The free parameter names it uses; constants and functions are not included.

    Raises
    ------
    ExpressionError
        If the text is not a string, too long, too deeply nested or not well formed.

    Notes
    -----
    Arithmetic is Python's on floats and complex numbers, in IEEE double precision. After every
    step a complex value whose imaginary part is exactly zero becomes a real float, so the
    branch cuts of ``sqrt`` and ``log`` never depend on the sign of a zero imaginary part, and
    the final result is a float exactly when it is real. Functions of a real argument in their
    real domain use :mod:`math`; otherwise :mod:`cmath`, so ``sqrt(-4) == 2j`` and
    ``log(-1) == pi*1j`` (principal branch). ``atan2(y, x)`` needs real arguments. Every
    intermediate value must be finite.

    The imaginary unit is written as a number with a ``j`` suffix (``1j``, ``2.5j``); a bare
    ``j`` is an ordinary parameter name. The names ``pi`` and ``e`` always mean the constants,
    and no parameter may be named like a constant or a function (see :data:`RESERVED_NAMES`),
    so a formula never silently means something other than what it says.

    Examples
    --------
    >>> hopping = Expression("-t2 * exp(1j*phi)", context="coupling")
    >>> sorted(hopping.names)
    ['phi', 't2']
    >>> hopping.evaluate({"t2": 0.5, "phi": 0.0})
    -0.5
    >>> Expression("-2**2").evaluate({})
    -4.0
    """

    text: str
    context: str = field(default="expression", kw_only=True, compare=False, repr=False)
    names: frozenset[str] = field(init=False, compare=False, repr=False)
    _program: tuple[tuple[str, object, int], ...] = field(init=False, compare=False, repr=False)

    def __post_init__(self) -> None:
        if not isinstance(self.text, str):
            raise ExpressionError(
                f"{self.context} must be a string, got {type(self.text).__name__} {_brief(self.text)}"
            )
        if len(self.text) > MAX_LENGTH:
            raise ExpressionError(
                f"{self.context} {_show(self.text)}: the text is {len(self.text)} characters long; "
                f"the limit is {MAX_LENGTH}; introduce parameters for repeated parts"
            )
        program, names = _Parser(self.text, self.context).parse()
        object.__setattr__(self, "names", names)
        object.__setattr__(self, "_program", program)

    def _fail(self, problem: str) -> ExpressionError:
        return ExpressionError(f"{self.context} {_show(self.text)}: {problem}")

    def _bind(self, env: Mapping[str, object] | None) -> dict[str, Number]:
        """Check the parameters against the names used and convert their values."""
        if env is None:
            env = {}
        if not isinstance(env, Mapping):
            raise self._fail(f"parameters must be a mapping of names to numbers, got {type(env).__name__}")
        clashes = sorted(name for name in env if isinstance(name, str) and name in RESERVED_NAMES)
        if clashes:
            listed = ", ".join(repr(name) for name in clashes)
            raise self._fail(
                f"parameter {listed} clashes with a built-in constant or function; rename it "
                f"(reserved: {', '.join(sorted(RESERVED_NAMES))})"
            )
        missing = sorted(self.names.difference(env))
        if missing:
            listed = ", ".join(repr(name) for name in missing)
            known = sorted(str(name) for name in env)
            available = f"available parameters: {', '.join(known)}" if known else "no parameters are defined"
            raise self._fail(f"unknown name{'s' if len(missing) > 1 else ''} {listed} ({available})")
        values = {}
        for name in sorted(self.names):
            try:
                values[name] = _as_number(env[name])
            except (TypeError, OverflowError) as problem:
                raise self._fail(
                    f"parameter '{name}' = {_brief(env[name])} {problem}; give every parameter a finite "
                    "int, float or complex value"
                ) from None
        return values

    def evaluate(self, env: Mapping[str, object] | None = None) -> Number:
        """Evaluate the expression for the given parameter values.

        Parameters
        ----------
        env : Mapping of str to int, float or complex, optional
            Parameter values; every name in :attr:`names` must be present, booleans are refused
            and values must be finite. Entries the expression does not use are ignored, but none
            may be named like a constant or function.

        Returns
        -------
        float or complex
            A float when the imaginary part is exactly zero, else a complex number; always finite.

        Raises
        ------
        ExpressionError
            For unknown or reserved names, bad parameter values, division by zero, a result that
            overflows or is undefined (``log(0)``), or complex arguments to ``atan2``.
        """
        values = self._bind(env)
        stack: list[Number] = []
        for kind, payload, column in self._program:
            if kind == "push":
                stack.append(payload)
            elif kind == "load":
                stack.append(values[payload])
            elif kind == "negate":
                stack[-1] = -stack[-1]
            elif kind == "binary":
                right = stack.pop()
                stack[-1] = self._binary(payload, stack[-1], right, column)
            else:
                function = _FUNCTIONS[payload]
                arguments = stack[len(stack) - function.arity :]
                del stack[len(stack) - function.arity :]
                stack.append(self._call(payload, function, arguments, column))
        return stack[0]

    def _binary(self, operator: str, left: Number, right: Number, column: int) -> Number:
        where = f"'{operator}' at column {column}"
        try:
            if operator == "+":
                result = left + right
            elif operator == "-":
                result = left - right
            elif operator == "*":
                result = left * right
            elif operator == "/":
                result = left / right
            else:
                result = left**right
        except ZeroDivisionError:
            if operator == "/":
                raise self._fail(f"division by zero at {where}") from None
            raise self._fail(f"zero raised to a negative or complex power at {where}") from None
        except OverflowError:
            result = None
        settled = _settle(result) if result is not None else None
        if settled is None:
            raise self._fail(f"the result of {where} overflows (is not finite)")
        return settled

    def _call(self, name: str, function: _Function, arguments: list[Number], column: int) -> Number:
        shown = ", ".join(repr(argument) for argument in arguments)
        if function.real_only and not all(isinstance(argument, float) for argument in arguments):
            raise self._fail(
                f"{function.signature} at column {column} needs real arguments, got {name}({shown})"
            )
        try:
            result = function.apply(*arguments)
        except OverflowError:
            result = None
        except (ValueError, ZeroDivisionError):
            raise self._fail(f"{name}({shown}) at column {column} is undefined") from None
        settled = _settle(result) if result is not None else None
        if settled is None:
            raise self._fail(f"{name}({shown}) at column {column} overflows (is not finite)")
        return settled


def parse(text: str, *, context: str = "expression") -> Expression:
    """Parse expression text without evaluating it.

    Parameters
    ----------
    text : str
        The expression; see the module docstring for the grammar.
    context : str, optional
        What the text is (``"coupling"``, ``"parameter 't2'"``), used to start error messages.

    Returns
    -------
    Expression
        The parsed expression; :attr:`Expression.names` lists the parameters it needs.

    Raises
    ------
    ExpressionError
        With the position and offending token, and what would be allowed there.

    Examples
    --------
    >>> sorted(parse("J1*cos(theta) + J2").names)
    ['J1', 'J2', 'theta']
    """
    return Expression(text, context=context)


def evaluate(text: str, env: Mapping[str, object] | None = None, *, context: str = "expression") -> Number:
    """Parse and evaluate expression text in one step.

    Parameters
    ----------
    text : str
        The expression.
    env : Mapping of str to int, float or complex, optional
        Parameter values, as for :meth:`Expression.evaluate`.
    context : str, optional
        What the text is, used to start error messages.

    Returns
    -------
    float or complex
        The value; a float when it is real.

    Raises
    ------
    ExpressionError
        If the text does not parse or cannot be evaluated with these parameters.

    Examples
    --------
    >>> evaluate("sqrt(-4)")
    2j
    >>> evaluate("2*t + 1", {"t": 0.25})
    1.5
    """
    return Expression(text, context=context).evaluate(env)


def parse_value(value: object, env: Mapping[str, object] | None = None, *, context: str = "value") -> Number:
    """Read a number from a model file: a plain number or an expression string.

    Parameters
    ----------
    value : int, float, complex or str
        As read from TOML. Booleans are refused: TOML ``true`` is not a number.
    env : Mapping of str to int, float or complex, optional
        Parameter values for an expression string.
    context : str, optional
        What the value is (``"coupling 't2'"``), used to start error messages.

    Returns
    -------
    float or complex
        The finite value; a float when it is real.

    Raises
    ------
    ExpressionError
        For booleans, other non-numbers, non-finite numbers, and expressions that fail.

    Examples
    --------
    >>> parse_value(2)
    2.0
    >>> parse_value("t/2", {"t": 1})
    0.5
    """
    if isinstance(value, str):
        return evaluate(value, env, context=context)
    try:
        return _as_number(value)
    except (TypeError, OverflowError) as problem:
        raise ExpressionError(
            f"{context} {_brief(value)} {problem}; write a finite number such as 1.0 or an expression "
            "string such as '2*t'"
        ) from None


def check_parameter_name(name: object, *, context: str = "parameter") -> str:
    """Check that a parameter name can be used in expressions.

    Parameters
    ----------
    name : str
        Proposed name: an ASCII identifier that is not a constant or function name.
    context : str, optional
        What the name belongs to, used to start error messages.

    Returns
    -------
    str
        The name, unchanged.

    Raises
    ------
    ExpressionError
        If the name is not an identifier or is reserved.

    Examples
    --------
    >>> check_parameter_name("t2")
    't2'
    """
    if not isinstance(name, str) or _NAME.match(name) is None:
        raise ExpressionError(
            f"{context} name {name!r} is not a valid name; use letters, digits and '_', "
            "not starting with a digit (for example t2 or J_perp)"
        )
    if name in RESERVED_NAMES:
        kind = "constant" if name in CONSTANTS else "function"
        raise ExpressionError(
            f"{context} name {name!r} is reserved for the built-in {kind}; choose another name "
            f"(reserved: {', '.join(sorted(RESERVED_NAMES))})"
        )
    return name
