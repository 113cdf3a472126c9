"""Printing sympy expressions as C99 (strict: anything unprintable is an error)."""

from __future__ import annotations

import sympy as sp
from sympy.printing.c import C99CodePrinter
from sympy.printing.precedence import PRECEDENCE

from ..errors import CodegenError
from ..model.expr_parser import quote

# Integer powers up to this size are written as products, which is exact and much
# faster than a libm call.
_MAX_UNROLLED_POWER = 8


class LyacompCPrinter(C99CodePrinter):
    """C99 printer with exact constants and no libm call for small integer powers."""

    def __init__(self) -> None:
        super().__init__({"strict": True, "precision": 17})

    def _print_Pow(self, expr: sp.Pow) -> str:
        base, exp = expr.as_base_exp()
        if exp.is_Integer and 0 < abs(int(exp)) <= _MAX_UNROLLED_POWER:
            b = self.parenthesize(base, PRECEDENCE["Mul"] + 1)
            product = "*".join([b] * abs(int(exp)))
            return f"({product})" if exp > 0 else f"(1.0/({product}))"
        if exp == sp.Rational(1, 2):
            return f"sqrt({self._print(base)})"
        if exp == sp.Rational(-1, 2):
            return f"(1.0/sqrt({self._print(base)}))"
        if exp.is_Rational and exp.q == 2 and abs(exp.p) <= 2 * _MAX_UNROLLED_POWER + 1:
            # x**(k/2) = x**floor(k/2) * sqrt(x): one sqrt, no pow.
            whole = sp.Pow(base, sp.Integer(exp.p // 2), evaluate=False)
            return f"({self._print(whole)}*sqrt({self._print(base)}))"
        power = repr(float(exp)) if exp.is_Number else self._print(exp)
        return f"pow({self._print(base)}, {power})"

    def _print_Pi(self, expr: sp.Expr) -> str:
        return "3.141592653589793"

    def _print_Exp1(self, expr: sp.Expr) -> str:
        return "2.718281828459045"

    def _print_Rational(self, expr: sp.Rational) -> str:
        return f"({expr.p}.0/{expr.q}.0)"

    def _print_Integer(self, expr: sp.Integer) -> str:
        return f"{int(expr)}.0"

    def _print_Float(self, expr: sp.Float) -> str:
        return repr(float(expr))


_PRINTER = LyacompCPrinter()


def ccode(expr: sp.Expr) -> str:
    """C text of ``expr``; raises :class:`CodegenError` for unprintable parts."""
    try:
        return _PRINTER.doprint(expr)
    except Exception as exc:  # the strict printer raises plain ValueError/TypeError
        # Formatting a huge expression (or its message) can fail again: keep it short.
        try:
            why = str(exc)
        except Exception:
            why = type(exc).__name__
        raise CodegenError(f"cannot write an expression as C: {quote(why)}") from exc
