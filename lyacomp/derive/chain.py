"""Stage 2, through the definitions: derivatives by the chain rule over their graph.

A model's definitions ``d_1 .. d_K`` (in dependency order) form a directed acyclic graph:
``d_k = g_k(v, d_1, ..., d_{k-1})`` with ``v`` the variables (stacked states and
parameters). Substituting them before differentiating makes the derivatives of a long
chain explode (a 30-level chain gave a second derivative of about 890k operations).
Instead each definition and each of its partial derivatives stays a named intermediate
value, computed once:

    D_(a, m) d_k = dD_a d_k / dv_m
                 = (explicit d/dv_m of the expression of D_a d_k)
                   + sum over intermediates s = D_b d_j in it of  (d expr / d s) * D_(b, m) d_j,

where ``a`` is a multi-index (a sorted tuple of variables) and ``D_(b, m) d_j`` is again an
intermediate value, made on first use. This is nested forward differentiation (the
forward mode of Griewank and Walther, *Evaluating Derivatives*, 2nd ed., SIAM 2008,
Ch. 3, applied once per derivative order, which is how their Ch. 13 builds higher
derivative tensors; chapter numbers from memory); unrolled it is the multivariate
Faa di Bruno formula, but no term of that formula is written out by hand. Every
intermediate's expression only involves the intermediates of the definitions it uses
directly, so the work and the code grow linearly with the length of a chain.

Multi-indices are sorted, so each mixed partial is made once whatever the order of
differentiation; a partial whose multi-index names a variable the definition does not
reach (directly or through earlier definitions) is zero and never made, and so is any
whose expression differentiates to zero.
"""

from __future__ import annotations

import sympy as sp

from ..model import SymbolicModel

Multi = tuple[sp.Symbol, ...]


class DefinitionChain:
    """The intermediate values of a model's definitions and of their partial derivatives.

    ``diff`` is the total derivative of an expression over variables and intermediates;
    ``needed`` lists the intermediates some expressions use, in an order where each comes
    after those its expression uses. Intermediates are made on first use (so the plain
    kernel never makes the fourth and fifth derivatives that only ``l2`` needs).
    """

    def __init__(self, model: SymbolicModel) -> None:
        states = model.states + tuple(s for lagged in model.lagged for s in lagged)
        variables = states + model.parameters
        self._rank_of = {v: r for r, v in enumerate(variables)}
        self._label = {s: f"x{j}" for j, s in enumerate(states)}
        self._label.update({s: f"p{k}" for k, s in enumerate(model.parameters)})
        self._names = {
            sym: sp.Symbol(f"q{k}", real=True) for k, (sym, _) in enumerate(model.definitions)
        }
        self._value: dict[sp.Symbol, sp.Expr] = {}
        self._origin: dict[sp.Symbol, tuple[int, Multi]] = {}
        self._made: dict[tuple[int, Multi], sp.Expr] = {}
        self._reach: list[frozenset[sp.Symbol]] = []
        for k, (sym, expr) in enumerate(model.definitions):
            reach = {s for s in expr.free_symbols if s in self._rank_of}
            for s in expr.free_symbols:
                if s in self._origin:
                    reach |= self._reach[self._origin[s][0]]
            self._reach.append(frozenset(reach))
            self._value[sym] = expr
            self._origin[sym] = (k, ())
            self._made[(k, ())] = sym

    @property
    def c_names(self) -> dict[sp.Symbol, sp.Symbol]:
        """The C name ``q{k}`` of each definition's value (derivatives are ``q{k}_x0_p1``)."""
        return dict(self._names)

    def depends(self, expr: sp.Expr, var: sp.Symbol) -> bool:
        """Whether ``expr`` may depend on ``var``, directly or through intermediates."""
        for s in expr.free_symbols:
            if s == var or (s in self._origin and var in self._reach[self._origin[s][0]]):
                return True
        return False

    def diff(self, expr: sp.Expr, var: sp.Symbol) -> sp.Expr:
        """Total derivative of ``expr`` with respect to the variable ``var`` (see module)."""
        out = sp.diff(expr, var) if var in expr.free_symbols else sp.Integer(0)
        for s in sorted(expr.free_symbols & self._origin.keys(), key=self._rank):
            k, multi = self._origin[s]
            ds = self._partial(k, multi + (var,))
            if ds != 0:
                out += sp.diff(expr, s) * ds
        return out

    def needed(self, exprs: list[sp.Expr]) -> list[tuple[sp.Symbol, sp.Expr]]:
        """The intermediates ``exprs`` use, directly or not, each after its own inputs."""
        seen: set[sp.Symbol] = set()
        stack = [s for e in exprs for s in e.free_symbols if s in self._origin]
        while stack:
            s = stack.pop()
            if s not in seen:
                seen.add(s)
                stack.extend(t for t in self._value[s].free_symbols if t in self._origin)
        return [(s, self._value[s]) for s in sorted(seen, key=self._rank)]

    def _rank(self, s: sp.Symbol) -> tuple:
        # D_a d_k uses intermediates of earlier definitions only, so ordering by k first
        # is an order of evaluation.
        k, multi = self._origin[s]
        return (k, len(multi), tuple(self._rank_of[v] for v in multi))

    def _partial(self, k: int, multi: Multi) -> sp.Expr:
        """D_multi d_k: an intermediate symbol, or a plain expression when it is trivial."""
        multi = tuple(sorted(multi, key=self._rank_of.__getitem__))
        done = self._made.get((k, multi))
        if done is not None:
            return done
        if any(v not in self._reach[k] for v in multi):
            return sp.Integer(0)
        # Peel off the last variable: D_(a, m) = d/dv_m D_a (a sorted, m its largest entry).
        parent = self._partial(k, multi[:-1])
        parent_expr = self._value.get(parent, parent)
        expr = self.diff(parent_expr, multi[-1])
        if expr.is_Number or expr in self._rank_of or expr in self._origin:
            result = expr  # zero, a constant, a variable or another intermediate: no new name
        else:
            base = self._names[self._symbol_of(k)].name
            result = sp.Symbol("_".join([base] + [self._label[v] for v in multi]), real=True)
            self._value[result] = expr
            self._origin[result] = (k, multi)
        self._made[(k, multi)] = result
        return result

    def _symbol_of(self, k: int) -> sp.Symbol:
        return self._made[(k, ())]  # type: ignore[return-value]
