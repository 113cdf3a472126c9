"""Delayed states ``x(t - tau)``: collecting them while parsing, then naming the delays.

While the model's expressions are parsed, every ``x(t - tau)`` becomes a placeholder
symbol (one per state and delay text). Once the definitions are resolved, equal delays
are merged and each delay ``tau_k`` gets one symbol per state, ``x(t-tau{k})``, which
is what the equations of :class:`SymbolicModel` contain. The names hold parentheses,
so they can never meet a user's name.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping

import sympy as sp

from ..errors import DelayError
from .expr_parser import quote, quote_name


def lag_symbol(state: str, k: int) -> sp.Symbol:
    """The symbol standing for state ``state`` at time ``t - tau_k`` (k from 0)."""
    return sp.Symbol(f"{state}(t-tau{k})", real=True)


class LagTable:
    """Collects the delayed states the parser meets (the parser's ``LagSink``)."""

    def __init__(self, states: Mapping[str, sp.Symbol]):
        self.states = tuple(states)
        self._raw: list[tuple[str, sp.Expr, str]] = []  # (state, raw tau, where)
        self._where = ""

    def at(self, where: str) -> LagTable:
        """Remember which key is being parsed, for messages."""
        self._where = where
        return self

    def lag(self, state: str, tau: sp.Expr) -> sp.Expr:
        for i, (s, t, _) in enumerate(self._raw):
            if s == state and t == tau:
                return sp.Symbol(f"{state}(t-#{i})", real=True)
        self._raw.append((state, tau, self._where))
        return sp.Symbol(f"{state}(t-#{len(self._raw) - 1})", real=True)

    def finish(
        self,
        resolve: Callable[[sp.Expr], sp.Expr],
        parameters: Mapping[str, sp.Symbol],
        nominal: Mapping[str, float],
        src: str,
    ) -> tuple[tuple[sp.Expr, ...], dict[sp.Symbol, sp.Symbol]]:
        """The distinct delays (in order of appearance) and placeholder -> final symbol.

        Refuses delays that depend on states (or on other delayed states), and delays
        that are not positive at the nominal parameter values.
        """
        delays: list[sp.Expr] = []
        mapping: dict[sp.Symbol, sp.Symbol] = {}
        param_set = set(parameters.values())
        values = {parameters[n]: sp.Float(v) for n, v in nominal.items() if n in parameters}
        for i, (state, raw, where) in enumerate(self._raw):
            tau = resolve(raw)
            written = f"{where}: the delay {quote(str(tau))} of state {quote_name(state)}"
            foreign = tau.free_symbols - param_set
            if foreign:
                raise DelayError(
                    f"{written} depends on the state(s) or delayed state(s) "
                    f"{', '.join(sorted(quote(str(s)) for s in foreign)[:4])}; only constant "
                    "delays (expressions of parameters) are supported, not state-dependent ones"
                )
            try:
                value = float(tau.xreplace(values).evalf())
            except (TypeError, ValueError):
                value = math.nan
            if not math.isfinite(value):
                raise DelayError(f"{written} is not a finite number at the nominal values")
            if value < 0:
                raise DelayError(
                    f"{written} is negative ({value:g}) at the nominal values; a delay "
                    "looks into the past, x(t - tau) with tau > 0 (advanced arguments are "
                    "not supported)"
                )
            if value == 0:
                raise DelayError(
                    f"{written} is zero at the nominal values; write the state without "
                    "delay (x or x(t)) if that is meant, or give the delay a positive value"
                )
            k = next((k for k, d in enumerate(delays) if d == tau), None)
            if k is None:
                delays.append(tau)
                k = len(delays) - 1
            mapping[sp.Symbol(f"{state}(t-#{i})", real=True)] = lag_symbol(state, k)
        return tuple(delays), mapping


class delayed(sp.Function):  # noqa: N801 - reads as a function in sympy models
    """``delayed(x, tau)``: the state ``x`` at time ``t - tau``, for sympy-built models.

    ``x`` is the state's symbol, ``tau`` a positive expression of parameters. It is the
    sympy spelling of ``x(t - tau)`` in model files.
    """

    nargs = 2


def replace_delayed(
    expr: sp.Expr, lags: LagTable, symbols: Mapping[str, sp.Expr], where: str
) -> tuple[sp.Expr, set[str]]:
    """Replace every ``delayed(x, tau)`` in a sympy expression by the table's symbol;
    also return the names of the symbols put in."""
    calls = expr.atoms(delayed)
    if not calls:
        return expr, set()
    swap = {}
    for call in calls:
        state, tau = call.args
        if not isinstance(state, sp.Symbol) or str(state) not in lags.states:
            raise DelayError(
                f"{where}: delayed({quote(str(state))}, ...): only states can be delayed; "
                "the first argument must be a state's symbol"
            )
        unknown = {str(s) for s in tau.free_symbols} - set(symbols)
        if unknown:
            shown = ", ".join(quote(u) for u in sorted(unknown)[:5])
            raise DelayError(
                f"{where}: the delay of {quote_name(str(state))}: unknown symbol(s) {shown}"
            )
        tau = tau.xreplace({s: symbols[str(s)] for s in tau.free_symbols})
        swap[call] = symbols[str(state)] if tau == 0 else lags.at(where).lag(str(state), tau)
    return expr.xreplace(swap), {str(v) for v in swap.values()}
