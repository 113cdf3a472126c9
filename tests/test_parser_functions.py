"""Every function the text parser accepts, checked against mpmath (value, 1st and 3rd derivative).

The reference side is mpmath's own implementation of each elementary/special function
(mpmath documentation); derivatives by mpmath.diff (numerical, high precision). The parsed
side goes through lyacomp's text path and sympy differentiation, so a wrong mapping (say
log10 built as log2) changes the value and fails.
"""

from __future__ import annotations

import mpmath
import pytest
import sympy as sp

from lyacomp.model.expr_parser import _SMOOTH, parse_expression

A, B = sp.Symbol("a", real=True), sp.Symbol("b", real=True)
SYMBOLS = {"a": A, "b": B}

# name -> (mpmath reference of (a, b), points (a, b) inside the domain)
REFERENCE = {
    "exp": (lambda a, b: mpmath.exp(a), [(0.3, 0), (-1.2, 0)]),
    "log": (lambda a, b: mpmath.log(a), [(0.7, 0), (3.5, 0)]),
    "ln": (lambda a, b: mpmath.log(a), [(0.7, 0), (3.5, 0)]),
    "log10": (lambda a, b: mpmath.log10(a), [(0.7, 0), (3.5, 0)]),
    "log2": (lambda a, b: mpmath.log(a, 2), [(0.7, 0), (3.5, 0)]),
    "sqrt": (lambda a, b: mpmath.sqrt(a), [(0.7, 0), (3.5, 0)]),
    "pow": (lambda a, b: mpmath.power(a, b), [(1.3, 2.5), (0.6, -1.7)]),
    "hypot": (lambda a, b: mpmath.hypot(a, b), [(1.3, 2.5), (-0.6, 0.4)]),
    "sin": (lambda a, b: mpmath.sin(a), [(0.4, 0), (-2.1, 0)]),
    "cos": (lambda a, b: mpmath.cos(a), [(0.4, 0), (-2.1, 0)]),
    "tan": (lambda a, b: mpmath.tan(a), [(0.4, 0), (-1.1, 0)]),
    "asin": (lambda a, b: mpmath.asin(a), [(0.4, 0), (-0.7, 0)]),
    "acos": (lambda a, b: mpmath.acos(a), [(0.4, 0), (-0.7, 0)]),
    "atan": (lambda a, b: mpmath.atan(a), [(0.4, 0), (-2.7, 0)]),
    "atan2": (lambda a, b: mpmath.atan2(a, b), [(0.4, 1.3), (1.1, -0.5)]),
    "sinh": (lambda a, b: mpmath.sinh(a), [(0.4, 0), (-1.7, 0)]),
    "cosh": (lambda a, b: mpmath.cosh(a), [(0.4, 0), (-1.7, 0)]),
    "tanh": (lambda a, b: mpmath.tanh(a), [(0.4, 0), (-1.7, 0)]),
    "asinh": (lambda a, b: mpmath.asinh(a), [(0.4, 0), (-2.7, 0)]),
    "acosh": (lambda a, b: mpmath.acosh(a), [(1.4, 0), (3.7, 0)]),
    "atanh": (lambda a, b: mpmath.atanh(a), [(0.4, 0), (-0.7, 0)]),
    "erf": (lambda a, b: mpmath.erf(a), [(0.4, 0), (-1.3, 0)]),
    "erfc": (lambda a, b: mpmath.erfc(a), [(0.4, 0), (-1.3, 0)]),
}


def test_every_accepted_function_has_a_reference():
    assert set(REFERENCE) == set(_SMOOTH)


def _value(expr: sp.Expr, a: float, b: float) -> mpmath.mpf:
    with mpmath.workdps(30):
        return mpmath.mpf(sp.N(expr.subs({A: sp.Float(a, 30), B: sp.Float(b, 30)}), 30))


CASES = [(n, v) for n in sorted(REFERENCE) for v in "ab"[: _SMOOTH[n][0]]]


@pytest.mark.parametrize(("name", "variable"), CASES)
@pytest.mark.parametrize("order", [0, 1, 3])
def test_function_value_and_derivatives_match_mpmath(name, variable, order):
    arity = _SMOOTH[name][0]
    text = f"{name}(a)" if arity == 1 else f"{name}(a, b)"
    expr = parse_expression(text, SYMBOLS, "test")
    ref, points = REFERENCE[name]
    sym = A if variable == "a" else B
    derivative = sp.diff(expr, sym, order) if order else expr
    for a, b in points:
        with mpmath.workdps(30):
            if variable == "a":
                expected = mpmath.diff(lambda t, b=b: ref(t, mpmath.mpf(b)), mpmath.mpf(a), order)
            else:
                expected = mpmath.diff(lambda t, a=a: ref(mpmath.mpf(a), t), mpmath.mpf(b), order)
            got = _value(derivative, a, b)
            assert abs(got - expected) <= mpmath.mpf("1e-20") * max(1, abs(expected)), (
                name,
                order,
                a,
                b,
            )
