"""The model: states, parameters, equations, and what is known in closed form."""

from __future__ import annotations

import hashlib
import json
import math
import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import sympy as sp

from ..errors import ModelError
from .delays import LagTable, lag_symbol, replace_delayed
from .expr_parser import (
    MAX_NAME_LENGTH,
    check_expression,
    is_valid_name,
    parse_expression,
    quote,
    quote_name,
)

MAX_STATES = 100
"""Dense per-sample work arrays live on the (thread) stack; this keeps them small."""


def _as_float(value: Any, where: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ModelError(f"{where}: expected a number, got {repr(value)[:60]}")
    value = float(value)
    if not math.isfinite(value):
        raise ModelError(f"{where}: expected a finite number, got {repr(value)[:60]}")
    return value


DIRECTIONS = {"up": 1, "down": -1}
"""The words of [bifurcation] direction and the sign of the parameter's move."""


def search_direction(direction: str | None, guess: float, operating: float) -> int | None:
    """+1 or -1 from a direction word, else toward ``guess``; None when undecidable."""
    if direction is not None:
        return DIRECTIONS[direction]
    if guess == operating:
        return None
    return 1 if guess > operating else -1


@dataclass(frozen=True)
class SymbolicModel:
    """The model as sympy objects, definitions substituted (``rhs``) and kept (``chain_rhs``).

    Symbols carry the user's names verbatim (they may be ``lambda`` or ``E``);
    lambdify with ``dummify=True``.
    """

    states: tuple[sp.Symbol, ...]
    parameters: tuple[sp.Symbol, ...]
    rhs: tuple[sp.Expr, ...]
    bifurcation: sp.Symbol | None
    critical_value: sp.Expr | None
    equilibrium: tuple[sp.Expr, ...] | None
    delays: tuple[sp.Expr, ...] = ()
    """The distinct delays ``tau_k`` (expressions of the parameters), empty for an ODE."""
    lagged: tuple[tuple[sp.Symbol, ...], ...] = ()
    """``lagged[k][j]`` is the symbol in ``rhs`` that stands for state j at ``t - tau_k``."""
    definitions: tuple[tuple[sp.Symbol, sp.Expr], ...] = ()
    """``(symbol, expression)`` per definition in dependency order; an expression uses
    states, lagged states, parameters and the symbols of earlier definitions (the symbol
    of definition ``d`` is named ``"d(definition)"``, so it never meets a user name).
    The derivation differentiates through them by the chain rule (``derive/chain.py``)."""
    chain_rhs: tuple[sp.Expr, ...] = ()
    """The equations over the definition symbols (empty for a model without definitions);
    substituting the definitions gives ``rhs``."""


@dataclass(frozen=True, eq=False)
class Model:
    """A model ``x' = F(x, params)``.

    ``states`` maps each state name to its starting guess for the equilibrium,
    ``parameters`` each parameter name to its nominal value, ``equations`` each
    state name to its time derivative (a string or a sympy expression over
    ``sympy.Symbol(name)``). ``bifurcation`` names the parameter solved for at onset,
    ``guess`` its starting value (default: nominal). ``critical_value`` (an expression
    in the other parameters) and ``equilibrium`` (state -> expression in the
    parameters) are optional closed forms that replace the numeric solve.
    ``uncertainty`` is kept as given for the studies. ``operating`` is a value of the
    bifurcation parameter where the equilibrium is stable (the state guesses are the
    equilibrium there); the operating-point search follows the equilibrium from it,
    ``direction`` ``"up"`` or ``"down"`` (default: toward ``guess``), to the first loss
    of stability.
    """

    name: str
    states: Mapping[str, float]
    parameters: Mapping[str, float]
    equations: Mapping[str, Any]
    definitions: Mapping[str, Any] | None = None
    bifurcation: str | None = None
    guess: float | None = None
    critical_value: Any = None
    equilibrium: Mapping[str, Any] | None = None
    uncertainty: Mapping[str, Any] | None = None
    source: str = "<python>"
    operating: float | None = None
    direction: str | None = None
    _symbolic: SymbolicModel = field(init=False, repr=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "states", self._names_to_floats(self.states, "states"))
        object.__setattr__(self, "parameters", self._names_to_floats(self.parameters, "parameters"))
        object.__setattr__(self, "definitions", dict(self.definitions or {}))
        object.__setattr__(self, "uncertainty", dict(self.uncertainty or {}))
        if not isinstance(self.name, str) or not self.name.strip():
            raise ModelError(f"{self.source}: the model needs a non-empty 'name'")
        self._check_names()
        object.__setattr__(self, "_symbolic", self._build_symbolic())
        if len(self.states) < 2 and not self._symbolic.delays:
            raise ModelError(
                f"{self.source}: a Hopf bifurcation needs at least 2 states, got "
                f"{len(self.states)} (one state suffices only with a delayed term x(t - tau))"
            )

    # -- validation -------------------------------------------------------------------
    def _names_to_floats(self, table: Mapping[str, Any], key: str) -> dict[str, float]:
        if not isinstance(table, Mapping):
            raise ModelError(f"{self.source}: [{key}] must be a table of name = number")
        out = {}
        for name, value in table.items():
            out[name] = _as_float(value, f"{self.source}: [{key}] {quote_name(name)}")
        return out

    def _check_names(self) -> None:
        src = self.source
        if not self.states:
            raise ModelError(f"{src}: a Hopf bifurcation needs at least 2 states, got 0")
        if len(self.states) > MAX_STATES:
            raise ModelError(
                f"{src}: {len(self.states)} states; lyacomp's dense kernels handle at most "
                f"{MAX_STATES} (reduce the model, e.g. by eliminating fast states)"
            )
        seen: dict[str, str] = {}
        for table, names in (
            ("states", self.states),
            ("parameters", self.parameters),
            ("definitions", self.definitions),
        ):
            for name in names:
                if not is_valid_name(name):
                    raise ModelError(
                        f"{src}: [{table}] {quote_name(name)} is not a valid name (letters, "
                        f"digits and underscores, starting with a letter, at most "
                        f"{MAX_NAME_LENGTH} characters)"
                    )
                if name in seen:
                    raise ModelError(
                        f"{src}: {quote_name(name)} is declared in both [{seen[name]}] "
                        f"and [{table}]; names must be unique"
                    )
                seen[name] = table
                if name == "pi":
                    warnings.warn(
                        f"{src}: [{table}] declares 'pi', which now means your "
                        "symbol, not the constant 3.14159...",
                        stacklevel=4,
                    )
        if not isinstance(self.equations, Mapping):
            raise ModelError(f"{src}: [equations] must be a table of state = expression")
        for state in self.states:
            if state not in self.equations:
                raise ModelError(
                    f"{src}: [equations] has no equation for state {quote_name(state)}"
                )
        for key in self.equations:
            if key not in self.states:
                raise ModelError(f"{src}: [equations] {quote_name(key)} is not a declared state")
        if self.bifurcation is not None and self.bifurcation not in self.parameters:
            raise ModelError(
                f"{src}: [bifurcation] parameter {quote_name(self.bifurcation)} "
                "is not a declared parameter"
            )
        if self.bifurcation is None and (self.guess is not None or self.critical_value is not None):
            raise ModelError(f"{src}: [bifurcation] guess/critical_value need a 'parameter'")
        if self.guess is not None:
            object.__setattr__(self, "guess", _as_float(self.guess, f"{src}: [bifurcation] guess"))
        self._check_operating()
        if self.equilibrium is not None:
            for key in self.equilibrium:
                if key not in self.states:
                    raise ModelError(
                        f"{src}: [equilibrium] {quote_name(key)} is not a declared state"
                    )
            for state in self.states:
                if state not in self.equilibrium:
                    raise ModelError(
                        f"{src}: [equilibrium] has no expression for {quote_name(state)}"
                    )

    def _check_operating(self) -> None:
        src = self.source
        if self.operating is None:
            if self.direction is not None:
                raise ModelError(
                    f"{src}: [bifurcation] direction needs an operating value "
                    "('operating = VALUE', where the equilibrium is stable)"
                )
            return
        if self.bifurcation is None:
            raise ModelError(f"{src}: [bifurcation] operating needs a 'parameter'")
        if self.critical_value is not None:
            raise ModelError(
                f"{src}: [bifurcation] operating and critical_value exclude each other: the "
                "closed form already gives the Hopf point; drop one of them"
            )
        operating = _as_float(self.operating, f"{src}: [bifurcation] operating")
        object.__setattr__(self, "operating", operating)
        if self.direction is not None and (
            not isinstance(self.direction, str) or self.direction not in DIRECTIONS
        ):
            raise ModelError(
                f'{src}: [bifurcation] direction must be "up" or "down", got '
                f"{repr(self.direction)[:40]}"
            )
        if self.direction is None and self.nominal[self.bifurcation] == operating:
            raise ModelError(
                f"{src}: [bifurcation] cannot tell which way to move "
                f"{quote_name(self.bifurcation)} from operating = {operating:g}: its guess "
                'is the same value; add direction = "up" or "down" (or a guess on '
                "the side where stability is lost)"
            )

    @property
    def operating_direction(self) -> int | None:
        """+1 (up) or -1 (down): where the operating-point search moves the parameter."""
        if self.operating is None:
            return None
        return search_direction(self.direction, self.nominal[self.bifurcation], self.operating)

    # -- symbolic form ----------------------------------------------------------------
    def _parse(
        self,
        value: Any,
        symbols: Mapping[str, sp.Expr],
        where: str,
        lags: LagTable | None = None,
    ) -> sp.Expr:
        if isinstance(value, sp.Basic):
            expr = value  # already a sympy object: no text is parsed here
            made: set[str] = set()
            if lags is not None:
                expr, made = replace_delayed(expr, lags, symbols, where)
            check_expression(expr, where)
            unknown = {str(s) for s in expr.free_symbols} - set(symbols) - made
            if unknown:
                shown = ", ".join(quote(u) for u in sorted(unknown)[:5])
                raise ModelError(f"{where}: unknown symbol(s) {shown}")
            # Map the caller's symbols (possibly with assumptions) onto ours.
            expr = expr.xreplace(
                {s: symbols[str(s)] for s in expr.free_symbols if str(s) in symbols}
            )
        else:
            expr = parse_expression(value, symbols, where, lags.at(where) if lags else None)
        return check_expression(expr, where)

    def _build_symbolic(self) -> SymbolicModel:
        src = self.source
        states = {n: sp.Symbol(n, real=True) for n in self.states}
        params = {n: sp.Symbol(n, real=True) for n in self.parameters}
        defs = {n: sp.Dummy(n) for n in self.definitions}
        base = {**states, **params}
        names = {**base, **defs}
        lags = LagTable(states)
        raw_defs = {
            n: self._parse(v, names, f"{src}: [definitions] {n}", lags)
            for n, v in self.definitions.items()
        }
        resolved = _resolve_definitions(raw_defs, defs, src)
        # The resolved table is in dependency order; the kept definitions follow it.
        named = {d: sp.Symbol(f"{n}(definition)", real=True) for n, d in defs.items()}
        name_of = {d: n for n, d in defs.items()}

        def subst(expr: sp.Expr) -> sp.Expr:
            return expr.xreplace(resolved) if resolved else expr

        raw_rhs = tuple(
            self._parse(self.equations[n], names, f"{src}: [equations] {n}", lags)
            for n in self.states
        )
        rhs = tuple(subst(e) for e in raw_rhs)
        delays, placeholders = lags.finish(subst, params, self.nominal, src)
        rhs = tuple(e.xreplace(placeholders) for e in rhs)
        kept = {**named, **placeholders}
        definitions = tuple((named[d], raw_defs[name_of[d]].xreplace(kept)) for d in resolved)
        chain_rhs = tuple(e.xreplace(kept) for e in raw_rhs) if definitions else ()
        lagged = tuple(tuple(lag_symbol(n, k) for n in self.states) for k in range(len(delays)))
        bif = params[self.bifurcation] if self.bifurcation else None
        crit = None
        if self.critical_value is not None:
            allowed = {k: v for k, v in names.items() if k != self.bifurcation and k not in states}
            crit = subst(
                self._parse(self.critical_value, allowed, f"{src}: [bifurcation] critical_value")
            )
            if any(s in crit.free_symbols for s in states.values()):
                raise ModelError(f"{src}: [bifurcation] critical_value may not use states")
        eq = None
        if self.equilibrium is not None:
            allowed = {k: v for k, v in names.items() if k not in states}
            eq = tuple(
                subst(self._parse(self.equilibrium[n], allowed, f"{src}: [equilibrium] {n}"))
                for n in self.states
            )
        for expr, where in [(e, f"[equations] {n}") for n, e in zip(self.states, rhs)]:
            if expr.has(sp.zoo, sp.nan, sp.oo, -sp.oo):
                raise ModelError(f"{src}: {where} simplifies to an infinite or undefined value")
        return SymbolicModel(
            tuple(states.values()),
            tuple(params.values()),
            rhs,
            bif,
            crit,
            eq,
            delays,
            lagged,
            definitions,
            chain_rhs,
        )

    # -- public views -----------------------------------------------------------------
    def symbolic(self) -> SymbolicModel:
        """The model as sympy expressions (definitions substituted)."""
        return self._symbolic

    @property
    def delays(self) -> tuple[sp.Expr, ...]:
        """The distinct delays ``tau_k`` as sympy expressions of the parameter symbols
        (empty for an ODE model); see :attr:`SymbolicModel.lagged` for the delayed states."""
        return self._symbolic.delays

    @property
    def state_names(self) -> tuple[str, ...]:
        return tuple(self.states)

    @property
    def parameter_names(self) -> tuple[str, ...]:
        return tuple(self.parameters)

    @property
    def nominal(self) -> dict[str, float]:
        """Nominal parameter values; the bifurcation parameter holds its starting guess."""
        values = dict(self.parameters)
        if self.bifurcation is not None and self.guess is not None:
            values[self.bifurcation] = self.guess
        return values

    @property
    def state_guess(self) -> dict[str, float]:
        return dict(self.states)

    def canonical(self) -> str:
        """A stable text of everything that shapes the generated code (for cache keys)."""
        sym = self._symbolic
        doc = {
            "name": self.name,
            "states": list(self.states.items()),
            "parameters": list(self.nominal.items()),
            "rhs": [sp.srepr(e) for e in sym.chain_rhs or sym.rhs],
            "bifurcation": self.bifurcation,
            "critical_value": sp.srepr(sym.critical_value)
            if sym.critical_value is not None
            else None,
            "equilibrium": [sp.srepr(e) for e in sym.equilibrium] if sym.equilibrium else None,
        }
        if sym.definitions:  # kept, not substituted: the substituted text can be huge
            doc["definitions"] = [[str(s), sp.srepr(e)] for s, e in sym.definitions]
        if sym.delays:  # absent for ODE models, whose keys stay as they were
            doc["delays"] = [sp.srepr(d) for d in sym.delays]
        return json.dumps(doc, sort_keys=True)

    def fingerprint(self) -> str:
        return hashlib.sha256(self.canonical().encode()).hexdigest()

    def __reduce__(self):
        return (_rebuild_model, (self._init_kwargs(),))

    def _init_kwargs(self) -> dict[str, Any]:
        return {
            "name": self.name,
            "states": dict(self.states),
            "parameters": dict(self.parameters),
            "equations": dict(self.equations),
            "definitions": dict(self.definitions),
            "bifurcation": self.bifurcation,
            "guess": self.guess,
            "critical_value": self.critical_value,
            "equilibrium": None if self.equilibrium is None else dict(self.equilibrium),
            "uncertainty": dict(self.uncertainty),
            "source": self.source,
            "operating": self.operating,
            "direction": self.direction,
        }

    def replace(self, **changes: Any) -> Model:
        """A copy with some constructor arguments changed."""
        kwargs = self._init_kwargs()
        kwargs.update(changes)
        return Model(**kwargs)


def _rebuild_model(kwargs: dict[str, Any]) -> Model:
    return Model(**kwargs)


def _resolve_definitions(
    raw: dict[str, sp.Expr], dummies: dict[str, sp.Dummy], src: str
) -> dict[sp.Dummy, sp.Expr]:
    """Substitute definitions into each other in dependency order; reject cycles."""
    by_dummy = {dummies[n]: n for n in raw}
    resolved: dict[sp.Dummy, sp.Expr] = {}
    state: dict[str, int] = {}  # 1 = in progress, 2 = done

    def visit(name: str, chain: list[str]) -> sp.Expr:
        if state.get(name) == 2:
            return resolved[dummies[name]]
        if state.get(name) == 1:
            cycle = " -> ".join(chain[chain.index(name) :] + [name])
            raise ModelError(f"{src}: [definitions] are cyclic: {cycle}")
        state[name] = 1
        expr = raw[name]
        deps = [d for d in expr.free_symbols if d in by_dummy]
        expr = expr.xreplace({d: visit(by_dummy[d], chain + [name]) for d in deps})
        state[name] = 2
        resolved[dummies[name]] = expr
        return expr

    for name in raw:
        visit(name, [])
    return resolved
