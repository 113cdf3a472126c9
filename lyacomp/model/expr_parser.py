"""Safe translation of expression strings into sympy, without eval or sympify.

A small parser of our own (tokens, then recursive descent whose depth is bounded by
nesting) builds sympy directly from a whitelist of names and operators.
Declared names always mean the user's symbols, so engineers can call a parameter
``E``, ``I``, ``S``, ``beta`` or even ``lambda``.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Collection, Mapping
from typing import Protocol

import sympy as sp

from ..errors import DelayError, ModelError

# Smooth elementary functions: name -> (arity, builder).
_SMOOTH: dict[str, tuple[int, Callable[..., sp.Expr]]] = {
    "exp": (1, sp.exp),
    "log": (1, sp.log),
    "ln": (1, sp.log),
    "log10": (1, lambda a: sp.log(a) / sp.log(10)),
    "log2": (1, lambda a: sp.log(a) / sp.log(2)),
    "sqrt": (1, sp.sqrt),
    "pow": (2, lambda a, b: a**b),
    "hypot": (2, lambda a, b: sp.sqrt(a**2 + b**2)),
    "sin": (1, sp.sin),
    "cos": (1, sp.cos),
    "tan": (1, sp.tan),
    "asin": (1, sp.asin),
    "acos": (1, sp.acos),
    "atan": (1, sp.atan),
    "atan2": (2, sp.atan2),
    "sinh": (1, sp.sinh),
    "cosh": (1, sp.cosh),
    "tanh": (1, sp.tanh),
    "asinh": (1, sp.asinh),
    "acosh": (1, sp.acosh),
    "atanh": (1, sp.atanh),
    "erf": (1, sp.erf),
    "erfc": (1, sp.erfc),
}

# Functions users reach for that have a kink or jump somewhere.
_NON_SMOOTH = {
    "abs",
    "Abs",
    "fabs",
    "sign",
    "sgn",
    "signum",
    "min",
    "max",
    "Min",
    "Max",
    "floor",
    "ceiling",
    "ceil",
    "round",
    "trunc",
    "mod",
    "fmod",
    "Heaviside",
    "heaviside",
    "step",
    "Piecewise",
    "piecewise",
    "where",
    "ifelse",
    "clip",
    "relu",
    "sat",
    "saturate",
}

_SMOOTHNESS_NOTE = (
    "the first Lyapunov coefficient uses derivatives of the vector field up to third order "
    "at the equilibrium, so the model must be smooth (three times differentiable); replace it "
    "by a smooth approximation such as sqrt(x**2 + eps**2) for |x| or tanh(x/eps) for sign(x)"
)

MAX_NESTING = 60
"""Parentheses, unary signs, powers and calls nested deeper than this are refused; the
parser recurses only on nesting, so its depth is bounded by this, not by the input size."""

MAX_EXPONENT = 1000
"""Integer exponents above this (in absolute value) are refused before sympy sees them."""

MAX_TREE_DEPTH = 250
"""Deepest sympy expression accepted (sympy's own algorithms recurse over the tree)."""

_FLOAT_MAX = 1.7976931348623157e308
_QUOTE = 120

_TOKEN = re.compile(
    r"""(?P<ws>[ \t\r\n]+)
    |(?P<num>(?:\d(?:_?\d)*(?:\.(?:\d(?:_?\d)*)?)?|\.\d(?:_?\d)*)(?:[eE][+-]?\d(?:_?\d)*)?)
    |(?P<name>[A-Za-z_][A-Za-z0-9_]*)
    |(?P<op>\*\*|//|==|!=|<=|>=|[-+*/^%(),<>=.\[\]'"])
    """,
    re.VERBOSE,
)
_CONDITIONAL_WORDS = {"if", "else", "and", "or", "not", "is", "in"}


def quote(text: str, pos: int = 0) -> str:
    """At most ~120 characters of ``text`` around ``pos``, for error messages."""
    if len(text) <= _QUOTE:
        return repr(text)
    lo = max(0, min(pos - _QUOTE // 2, len(text) - _QUOTE))
    piece = text[lo : lo + _QUOTE]
    return ("..." if lo > 0 else "") + repr(piece) + ("..." if lo + _QUOTE < len(text) else "")


def quote_name(name: object) -> str:
    """A name for a message, cut to 60 characters."""
    text = str(name)
    return repr(text) if len(text) <= 60 else repr(text[:60]) + "..."


def _short(expr: object) -> str:
    """A short text of a sympy expression that cannot fail on huge ones."""
    try:
        text = sp.sstr(expr) if sp.count_ops(expr, visual=False) < 200 else type(expr).__name__
    except Exception:  # printing huge numbers can fail (int digit limits)
        text = type(expr).__name__
    return quote(text)


def check_power(base: sp.Expr, exponent: sp.Expr, fail: Callable[[str], ModelError]) -> None:
    """Refuse powers that would make sympy do unbounded exact work or leave float range."""
    if not exponent.is_Number:
        return
    if exponent.is_Integer and abs(int(exponent)) > MAX_EXPONENT:
        raise fail(
            f"integer exponent beyond {MAX_EXPONENT} is not allowed (it would overflow or "
            "make exact arithmetic explode)"
        )
    if base.is_Number and base != 0:
        magnitude = float(exponent) * math.log10(abs(float(base))) if base.is_finite else 0.0
        if magnitude > 308.25:
            raise fail("the value is beyond the range of double precision")


def _check_number(value: sp.Expr, fail: Callable[[str], ModelError]) -> sp.Expr:
    if value.is_Number and value.is_finite:
        big = value.p if value.is_Rational else value
        if abs(big) > 10**309 or abs(float(value)) > _FLOAT_MAX:
            raise fail("the value is beyond the range of double precision")
    return value


TIME = "t"
"""The reserved name of time: it may appear only in a delayed state ``x(t - tau)``."""

_TIME_SYMBOL = sp.Symbol("t(time)", real=True)  # no user name can contain parentheses


class LagSink(Protocol):
    """Where the parser sends delayed states ``x(t - tau)`` (see :mod:`.delays`)."""

    states: Collection[str]

    def lag(self, state: str, tau: sp.Expr) -> sp.Expr:
        """The symbol standing for ``state(t - tau)``."""
        ...


class _Parser:
    """Recursive descent over tokens; loops for sums and products, recursion only on nesting."""

    def __init__(
        self, symbols: Mapping[str, sp.Expr], where: str, text: str, lags: LagSink | None = None
    ):
        self.symbols = symbols
        self.where = where
        self.text = text
        self.lags = lags
        self.in_lag = 0  # > 0 while parsing the argument of a delayed state
        self.tokens = self._tokenize()
        self.i = 0
        self.depth = 0

    def fail(self, pos: int | None, why: str, kind: type[ModelError] = ModelError) -> ModelError:
        at = f" (at column {pos + 1})" if pos is not None else ""
        return kind(f"{self.where}: {why}{at} in {quote(self.text, pos or 0)}")

    def _tokenize(self) -> list[tuple[str, str, int]]:
        tokens = []
        pos, text = 0, self.text
        while pos < len(text):
            m = _TOKEN.match(text, pos)
            if m is None:
                raise self.fail(pos, f"syntax error: unexpected character {text[pos]!r}")
            kind = m.lastgroup
            if kind == "num" and m.end() < len(text) and (text[m.end()].isalnum()):
                if text[m.end()] in "jJ":
                    raise self.fail(pos, "only real numbers are allowed as constants, not complex")
                raise self.fail(m.end(), "syntax error: a number runs into a name")
            if kind != "ws":
                tokens.append((kind, m.group(), pos))
            pos = m.end()
        tokens.append(("end", "", len(text)))
        return tokens

    # -- token helpers ------------------------------------------------------------------
    def peek(self) -> tuple[str, str, int]:
        return self.tokens[self.i]

    def take(self) -> tuple[str, str, int]:
        tok = self.tokens[self.i]
        self.i += 1
        return tok

    def expect(self, value: str) -> None:
        kind, val, pos = self.take()
        if val != value or kind != "op":
            shown = "the end" if kind == "end" else repr(val)
            raise self.fail(pos, f"syntax error: expected {value!r}, found {shown}")

    def nest(self, pos: int) -> None:
        self.depth += 1
        if self.depth > MAX_NESTING:
            raise self.fail(pos, f"nested more than {MAX_NESTING} levels deep")

    # -- grammar (Python's precedence: sums < products < unary signs < powers) -------------
    def parse(self) -> sp.Expr:
        value = self.sum()
        kind, val, pos = self.peek()
        if kind != "end":
            raise self.fail(pos, self._unexpected(kind, val))
        return value

    def _unexpected(self, kind: str, val: str) -> str:
        if val in ("<", ">", "<=", ">=", "==", "!=") or val in _CONDITIONAL_WORDS:
            return "comparisons and conditionals are not allowed: " + _SMOOTHNESS_NOTE
        if val in (".", "["):
            return "attribute access and indexing are not allowed"
        if val == "%":
            return "'%' (modulo) is not allowed: " + _SMOOTHNESS_NOTE
        if val == "^":
            return "'^' is not a power here; write x**2"
        if val == "//":
            return "'//' (floor division) is not allowed: " + _SMOOTHNESS_NOTE
        if val == "=":
            return "syntax error: '=' is not allowed in an expression (keyword arguments?)"
        if kind == "name" and val == "lambda" and val not in self.symbols:
            return "lambda expressions are not allowed"
        return f"syntax error: unexpected {val!r}"

    def sum(self) -> sp.Expr:
        terms = [self.product()]
        while self.peek()[1] in ("+", "-") and self.peek()[0] == "op":
            _, op, _ = self.take()
            term = self.product()
            terms.append(term if op == "+" else -term)
        if len(terms) == 1:
            return terms[0]
        pos = self.peek()[2]
        return _check_number(sp.Add(*terms), lambda why: self.fail(pos, why))

    def product(self) -> sp.Expr:
        factors = [self.unary()]
        while self.peek()[1] in ("*", "/") and self.peek()[0] == "op":
            _, op, pos = self.take()
            factor = self.unary()
            if op == "/":
                if factor == 0:
                    raise self.fail(pos, "division by zero")
                factor = sp.Pow(factor, -1)
            factors.append(factor)
        if len(factors) == 1:
            return factors[0]
        pos = self.peek()[2]
        return _check_number(sp.Mul(*factors), lambda why: self.fail(pos, why))

    def unary(self) -> sp.Expr:
        kind, val, pos = self.peek()
        if kind == "op" and val in ("+", "-"):
            self.take()
            self.nest(pos)
            operand = self.unary()
            self.depth -= 1
            return -operand if val == "-" else operand
        if kind == "name" and val == "not" and val not in self.symbols:
            raise self.fail(pos, self._unexpected(kind, val))
        return self.power()

    def power(self) -> sp.Expr:
        start = self.peek()[2]
        base = self.atom()
        if not (self.peek()[0] == "op" and self.peek()[1] == "**"):
            return base
        _, _, pos = self.take()
        self.nest(pos)
        exponent = self.unary()  # right-associative, and 2**-1 is allowed
        self.depth -= 1

        def fail(why: str) -> ModelError:
            return self.fail(start, why)

        check_power(base, exponent, fail)
        return _check_number(sp.Pow(base, exponent), fail)

    def atom(self) -> sp.Expr:
        kind, val, pos = self.take()
        if kind == "num":
            return self.number(val, pos)
        if kind == "name":
            if self.peek()[1] == "(" and self.peek()[0] == "op":
                return self.call(val, pos)
            return self.name(val, pos)
        if kind == "op" and val == "(":
            self.nest(pos)
            inner = self.sum()
            self.expect(")")
            self.depth -= 1
            return inner
        if kind == "op" and val in ("'", '"'):
            raise self.fail(pos, "only real numbers are allowed as constants, not strings")
        if kind == "end":
            raise self.fail(pos, "syntax error: the expression ends too early")
        raise self.fail(pos, self._unexpected(kind, val))

    def number(self, text: str, pos: int) -> sp.Expr:
        digits = text.replace("_", "")
        value = float(digits)
        if not math.isfinite(value):
            raise self.fail(pos, "the constant is beyond the range of double precision")
        if digits.isdigit():
            return sp.Integer(int(digits))  # at most 309 digits here
        # The shortest round-trip decimal keeps derivatives exact (0.1 -> 1/10).
        return sp.Rational(repr(value))

    def name(self, name: str, pos: int) -> sp.Expr:
        if name in self.symbols:
            return self.symbols[name]
        if name == "pi":
            return sp.pi
        if name == TIME:
            if self.in_lag:
                return _TIME_SYMBOL
            raise self.fail(
                pos,
                "'t' is time: it may appear only in a delayed state such as x(t - tau), "
                "where tau is a constant delay",
                DelayError,
            )
        if name in _SMOOTH or name in _NON_SMOOTH:
            raise self.fail(pos, f"{quote_name(name)} is a function; call it with parentheses")
        if name in _CONDITIONAL_WORDS or name == "lambda":
            raise self.fail(pos, self._unexpected("name", name))
        raise self.fail(
            pos, f"unknown name {quote_name(name)} (declare it as a state, parameter or definition)"
        )

    def call(self, name: str, pos: int) -> sp.Expr:
        if self.lags is not None and name in self.lags.states:
            return self.delayed_state(name, pos)
        if name in self.symbols:
            if self.lags is not None:
                raise self.fail(
                    pos,
                    f"{quote_name(name)} is a declared symbol, not a function (only states "
                    "can be delayed, as x(t - tau))",
                    DelayError,
                )
            raise self.fail(pos, f"{quote_name(name)} is a declared symbol, not a function")
        if name in _NON_SMOOTH:
            raise self.fail(pos, f"{name}() is not smooth: " + _SMOOTHNESS_NOTE)
        if name not in _SMOOTH:
            allowed = ", ".join(sorted(_SMOOTH))
            raise self.fail(pos, f"unknown function {quote_name(name)}; allowed: {allowed}")
        self.expect("(")
        self.nest(pos)
        args = []
        if not (self.peek()[0] == "op" and self.peek()[1] == ")"):
            while True:
                args.append(self.sum())
                if self.peek()[0] == "op" and self.peek()[1] == "=":
                    raise self.fail(self.peek()[2], f"{name}() takes no keyword arguments")
                if not (self.peek()[0] == "op" and self.peek()[1] == ","):
                    break
                self.take()
        self.expect(")")
        self.depth -= 1
        arity, build = _SMOOTH[name]
        if len(args) != arity:
            raise self.fail(pos, f"{name}() takes {arity} argument(s), got {len(args)}")
        if name == "pow":
            check_power(args[0], args[1], lambda why: self.fail(pos, why))
        return _check_number(build(*args), lambda why: self.fail(pos, why))

    def delayed_state(self, name: str, pos: int) -> sp.Expr:
        """``x(t - tau)``: the state ``name`` delayed by ``tau``, which must not contain t."""
        assert self.lags is not None
        if TIME in self.symbols:
            raise self.fail(
                pos,
                f"{quote_name(name)}(...) is a delayed state, but 't' is declared as a name of "
                "the model; rename that symbol ('t' is reserved for time in x(t - tau))",
                DelayError,
            )
        self.expect("(")
        self.nest(pos)
        self.in_lag += 1
        argument = self.sum()
        self.in_lag -= 1
        self.expect(")")
        self.depth -= 1
        tau = _TIME_SYMBOL - argument
        if _TIME_SYMBOL in tau.free_symbols:
            tau = sp.expand(tau)  # e.g. 2*(t/2 - a): the time terms cancel only expanded
        if _TIME_SYMBOL in tau.free_symbols or _TIME_SYMBOL not in argument.free_symbols:
            raise self.fail(
                pos,
                f"the argument of the delayed state {quote_name(name)} must be t - DELAY, "
                "with a delay that does not depend on time",
                DelayError,
            )
        if tau == 0:
            return self.symbols[name]  # x(t) is the state itself
        return self.lags.lag(name, tau)


_SMOOTH_CLASSES: tuple[type, ...] = (
    sp.exp,
    sp.log,
    sp.sin,
    sp.cos,
    sp.tan,
    sp.asin,
    sp.acos,
    sp.atan,
    sp.atan2,
    sp.sinh,
    sp.cosh,
    sp.tanh,
    sp.asinh,
    sp.acosh,
    sp.atanh,
    sp.erf,
    sp.erfc,
)


def _is_complex_constant(node: sp.Expr) -> bool:
    if node.is_real is not None:
        return node.is_real is False
    try:
        value = complex(node.evalf(30))
    except (TypeError, ValueError, ArithmeticError):
        return False
    return value.imag != 0 and abs(value.imag) > 1e-25 * max(1.0, abs(value.real))


def check_expression(expr: sp.Expr, where: str) -> sp.Expr:
    """Apply the rules of the text parser to a finished sympy expression.

    Smooth whitelisted functions only, real constants only (complex constant parts are
    refused after sympy's automatic simplification), numbers within double range and a
    bounded tree depth. The walk is iterative.
    """

    def fail(why: str) -> ModelError:
        return ModelError(f"{where}: {why}")

    stack: list[tuple[sp.Basic, int]] = [(expr, 0)]
    while stack:
        node, depth = stack.pop()
        if depth > MAX_TREE_DEPTH:
            raise fail(f"the expression is nested more than {MAX_TREE_DEPTH} levels deep")
        if isinstance(node, sp.Symbol):
            continue
        if isinstance(node, (sp.logic.boolalg.Boolean, sp.core.relational.Relational)):
            raise fail("comparisons and conditionals are not allowed: " + _SMOOTHNESS_NOTE)
        name = type(node).__name__
        if name in _NON_SMOOTH or isinstance(node, (sp.Piecewise, sp.Abs, sp.sign, sp.Min, sp.Max)):
            raise fail(f"{name}() is not smooth: " + _SMOOTHNESS_NOTE)
        if isinstance(node, sp.Function) and not isinstance(node, _SMOOTH_CLASSES):
            allowed = ", ".join(sorted(_SMOOTH))
            raise fail(f"unknown function {quote_name(name)}; allowed: {allowed}")
        if isinstance(node, sp.Expr) and not node.free_symbols:
            if node.has(sp.zoo, sp.nan, sp.oo, -sp.oo):
                raise fail(f"{_short(node)} is infinite or undefined")
            if node.has(sp.I) or _is_complex_constant(node):
                raise fail(f"the constant {_short(node)} is complex; the model must be real-valued")
        if isinstance(node, sp.Number):
            _check_number(node, lambda why, n=node: fail(f"{_short(n)}: {why}"))
            continue
        if isinstance(node, (sp.NumberSymbol, sp.core.numbers.ImaginaryUnit)):
            if node.is_real is False:
                raise fail("complex constants are not allowed; the model must be real-valued")
            continue
        if isinstance(node, sp.Pow):
            check_power(*node.args, lambda why, n=node: fail(f"{_short(n)}: {why}"))
        elif not isinstance(node, (sp.Add, sp.Mul, sp.Pow, sp.Function)):
            raise fail(f"unsupported sympy object {type(node).__name__}")
        stack.extend((arg, depth + 1) for arg in node.args)
    return expr


def parse_expression(
    text: str | int | float,
    symbols: Mapping[str, sp.Expr],
    where: str,
    lags: LagSink | None = None,
) -> sp.Expr:
    """Translate one expression string into sympy, using only the given names.

    ``where`` names the key the expression came from and starts every error message.
    With ``lags``, a state called with a time argument, ``x(t - tau)``, is a delayed
    state and becomes the symbol ``lags.lag`` returns.
    """
    if isinstance(text, bool):
        raise ModelError(f"{where}: expected an expression or a number, got {text!r}")
    if isinstance(text, (int, float)):
        if isinstance(text, float) and not math.isfinite(text):
            raise ModelError(f"{where}: non-finite constant {text!r}")
        text = repr(text) if isinstance(text, float) or abs(text) < 10**300 else "1e400"
    if not isinstance(text, str):
        raise ModelError(f"{where}: expected an expression string, got {type(text).__name__}")
    if not text.strip():
        raise ModelError(f"{where}: empty expression")
    return _Parser(symbols, where, text, lags).parse()


MAX_NAME_LENGTH = 63
"""C99 guarantees 63 significant characters of an internal identifier."""

_NAME = re.compile(r"[A-Za-z][A-Za-z0-9_]*")


def is_valid_name(name: object) -> bool:
    """The one whitelist for user text that reaches generated C (names, prefixes, files).

    ASCII letters, digits and underscores, starting with a letter (underscores first are
    ours), at most ``MAX_NAME_LENGTH`` characters.
    """
    return (
        isinstance(name, str)
        and 0 < len(name) <= MAX_NAME_LENGTH
        and _NAME.fullmatch(name) is not None
    )
