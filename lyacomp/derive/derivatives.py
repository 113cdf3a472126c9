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
    """

    model: SymbolicModel
    jacobian: dict[Index2, sp.Expr]
    f_mu: dict[int, sp.Expr]
    j_mu: dict[Index2, sp.Expr]
    second: dict[Index3, sp.Expr]
    third: dict[Index4, sp.Expr]
    delays: tuple[sp.Expr, ...] = ()
    delays_mu: tuple[sp.Expr, ...] = ()


def _diff(expr: sp.Expr, var: sp.Symbol, what: str) -> sp.Expr:
    try:
        return sp.diff(expr, var)
    except Exception as exc:  # sympy raises many types on exotic input
        raise DerivationError(
            f"cannot differentiate {what} with respect to {var}: {quote(str(exc))}"
        ) from exc


def derive(model: SymbolicModel) -> Derivatives:
    """Form the Jacobian, F_mu, J_mu and the second and third derivative entries."""
    xs = model.states + tuple(s for lagged in model.lagged for s in lagged)
    n = len(xs)
    jac: dict[Index2, sp.Expr] = {}
    second: dict[Index3, sp.Expr] = {}
    third: dict[Index4, sp.Expr] = {}
    for i, f in enumerate(model.rhs):
        deps = [j for j in range(n) if xs[j] in f.free_symbols]
        for j in deps:
            d1 = _diff(f, xs[j], f"equation {i}")
            if d1 == 0:
                continue
            jac[(i, j)] = d1
            for k in range(j, n):
                if xs[k] not in d1.free_symbols:
                    continue
                d2 = _diff(d1, xs[k], f"equation {i}")
                if d2 == 0:
                    continue
                second[(i, j, k)] = d2
                for m in range(k, n):
                    if xs[m] not in d2.free_symbols:
                        continue
                    d3 = _diff(d2, xs[m], f"equation {i}")
                    if d3 != 0:
                        third[(i, j, k, m)] = d3
    f_mu: dict[int, sp.Expr] = {}
    j_mu: dict[Index2, sp.Expr] = {}
    mu = model.bifurcation
    if mu is not None:
        for i, f in enumerate(model.rhs):
            if mu in f.free_symbols:
                f_mu[i] = _diff(f, mu, f"equation {i}")
        for (i, j), a in jac.items():
            if mu in a.free_symbols:
                d = _diff(a, mu, f"Jacobian entry ({i}, {j})")
                if d != 0:
                    j_mu[(i, j)] = d
    delays_mu = tuple(
        _diff(tau, mu, "a delay") if mu is not None else sp.Integer(0) for tau in model.delays
    )
    return Derivatives(model, jac, f_mu, j_mu, second, third, model.delays, delays_mu)
