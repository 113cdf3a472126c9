"""Property-based test of the expression parser (hypothesis): any text gives sympy or our error.

Common practice, no source: a parser of untrusted input must fail only in its own
documented way and in bounded time, whatever it is fed.
"""

from __future__ import annotations

import sympy as sp
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from lyacomp.errors import LyacompError
from lyacomp.model.expr_parser import _NON_SMOOTH, _SMOOTH, check_expression, parse_expression

SYMBOLS = {name: sp.Symbol(name, real=True) for name in ("x", "y", "mu", "lambda")}
ATOMS = st.sampled_from(
    ["x", "y", "mu", "lambda", "pi", "0", "1", "2", "10", "0.5", "1e308", "1e-5", "9", "1_0"]
)
FUNCTIONS = sorted(_SMOOTH) + sorted(_NON_SMOOTH)[:6] + ["foo"]
BINARY = ["+", "-", "*", "/", "**", "^", "%", "//", " < ", " if ", ",", "."]


def _combine(children: st.SearchStrategy[str]) -> st.SearchStrategy[str]:
    return st.one_of(
        st.tuples(children, st.sampled_from(BINARY), children).map("".join),
        st.tuples(st.sampled_from(["-", "+", "(", ""]), children).map(
            lambda t: t[0] + t[1] + (")" if t[0] == "(" else "")
        ),
        st.tuples(st.sampled_from(FUNCTIONS), st.lists(children, max_size=3)).map(
            lambda t: f"{t[0]}({', '.join(t[1])})"
        ),
    )


STRUCTURED = st.recursive(ATOMS, _combine, max_leaves=25)
NOISE = st.text(alphabet="xyu0123456789.eEj+-*/()^%,<=>!\\'\"_ \n\r\t?#abc", max_size=40)


@settings(
    max_examples=7_000,
    deadline=2000,
    suppress_health_check=[HealthCheck.too_slow],
    derandomize=True,
)
@given(STRUCTURED)
def test_structured_expressions_parse_or_fail_cleanly(text):
    try:
        check_expression(parse_expression(text, SYMBOLS, "prop"), "prop")
    except LyacompError as exc:
        assert len(str(exc)) < 1000


@settings(max_examples=3_000, deadline=2000, derandomize=True)
@given(NOISE)
def test_arbitrary_text_parses_or_fails_cleanly(text):
    try:
        check_expression(parse_expression(text, SYMBOLS, "prop"), "prop")
    except LyacompError as exc:
        assert len(str(exc)) < 1000
