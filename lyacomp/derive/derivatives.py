"""Stage 2: symbolic derivatives, kept sparse.

Only non-zero entries are formed; second and third derivatives are stored once per
sorted index tuple (they are symmetric), so a model with many states but local
coupling never builds a dense n^4 tensor.
"""

from __future__ import annotations

from dataclasses import dataclass

import sympy as sp

from ..errors import DerivationError
from ..model import SymbolicModel
from ..model.expr_parser import quote
from .chain import DefinitionChain

Index2 = tuple[int, int]
Index3 = tuple[int, int, int]
Index4 = tuple[int, int, int, int]


@dataclass(frozen=True)
class Derivatives:
    """Non-zero derivative entries of F at a generic point (x, params).

    ``second[(i, j, k)]`` holds d^2 F_i / dx_j dx_k for j <= k and
    ``third[(i, j, k, l)]`` holds d^3 F_i / dx_j dx_k dx_l for j <= k <= l.
    ``f_mu`` and ``j_mu`` are empty without a bifurcation parameter.

    For a delay model the variables are stacked, ``(x(t), x(t - tau_1), ...)``: index
    ``k * n + j`` is state j delayed by tau_k (k = 0 undelayed), so ``jacobian[(i, j)]``
    holds the entries of ``[A0 A1 ... Am]``. ``delays`` holds the tau_k and
    ``delays_mu`` their mu-derivatives (empty for an ODE model).

    With definitions, the entries are expressions over the intermediate values of
    ``chain`` (the definitions and their partial derivatives, see ``derive/chain.py``);
    ``chain.needed`` lists those an entry uses. Without definitions ``chain`` is None.
    """

    model: SymbolicModel
    jacobian: dict[Index2, sp.Expr]
    f_mu: dict[int, sp.Expr]
    j_mu: dict[Index2, sp.Expr]
    second: dict[Index3, sp.Expr]
    third: dict[Index4, sp.Expr]
    delays: tuple[sp.Expr, ...] = ()
    delays_mu: tuple[sp.Expr, ...] = ()
    chain: DefinitionChain | None = None

    @property
    def equations(self) -> tuple[sp.Expr, ...]:
        """F itself, over the same intermediates as the entries."""
        return self.model.chain_rhs if self.chain is not None else self.model.rhs


def _diff(
    expr: sp.Expr, var: sp.Symbol, what: str, chain: DefinitionChain | None = None
) -> sp.Expr:
    try:
        return sp.diff(expr, var) if chain is None else chain.diff(expr, var)
    except Exception as exc:  # sympy raises many types on exotic input
        raise DerivationError(
            f"cannot differentiate {what} with respect to {var}: {quote(str(exc))}"
        ) from exc


def _depends(expr: sp.Expr, var: sp.Symbol, chain: DefinitionChain | None) -> bool:
    """Whether ``expr`` may depend on ``var`` (through the definitions too)."""
    return var in expr.free_symbols if chain is None else chain.depends(expr, var)


def derive(model: SymbolicModel) -> Derivatives:
    """Form the Jacobian, F_mu, J_mu and the second and third derivative entries.

    With definitions, through their chain rule (:class:`DefinitionChain`), unsubstituted.
    """
    xs = model.states + tuple(s for lagged in model.lagged for s in lagged)
    n = len(xs)
    chain = DefinitionChain(model) if model.definitions else None
    rhs = model.chain_rhs if chain is not None else model.rhs
    jac: dict[Index2, sp.Expr] = {}
    second: dict[Index3, sp.Expr] = {}
    third: dict[Index4, sp.Expr] = {}
    for i, f in enumerate(rhs):
        deps = [j for j in range(n) if _depends(f, xs[j], chain)]
        for j in deps:
            d1 = _diff(f, xs[j], f"equation {i}", chain)
            if d1 == 0:
                continue
            jac[(i, j)] = d1
            for k in range(j, n):
                if not _depends(d1, xs[k], chain):
                    continue
                d2 = _diff(d1, xs[k], f"equation {i}", chain)
                if d2 == 0:
                    continue
                second[(i, j, k)] = d2
                for m in range(k, n):
                    if not _depends(d2, xs[m], chain):
                        continue
                    d3 = _diff(d2, xs[m], f"equation {i}", chain)
                    if d3 != 0:
                        third[(i, j, k, m)] = d3
    f_mu: dict[int, sp.Expr] = {}
    j_mu: dict[Index2, sp.Expr] = {}
    mu = model.bifurcation
    if mu is not None:
        for i, f in enumerate(rhs):
            if _depends(f, mu, chain):
                f_mu[i] = _diff(f, mu, f"equation {i}", chain)
        for (i, j), a in jac.items():
            if _depends(a, mu, chain):
                d = _diff(a, mu, f"Jacobian entry ({i}, {j})", chain)
                if d != 0:
                    j_mu[(i, j)] = d
    delays_mu = tuple(
        _diff(tau, mu, "a delay") if mu is not None else sp.Integer(0) for tau in model.delays
    )
    return Derivatives(model, jac, f_mu, j_mu, second, third, model.delays, delays_mu, chain)
