"""Symbolic derivatives shared by the two baselines (B1 vectorized, B2 per-sample loop).

Both baselines start from the same sympy right-hand side that lyacomp compiles
(``model.symbolic()``), so they differ from lyacomp only in how the numbers are computed.
The multilinear forms B and C of docs/mathematics.md are built as directional expressions from the
non-zero second and third derivative entries only, as a careful user would.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import sympy


@dataclass(frozen=True)
class HopfSymbols:
    """Everything the baselines lambdify, as sympy expressions in x (states) and p (parameters).

    ``u``, ``v``, ``w`` are direction vectors for the forms B(u, v) and C(u, v, w);
    ``jv_x`` is d(J v)/dx, the block of the augmented Newton matrix that couples x and v.
    ``hopf_condition`` is trace J (n = 2) or the Routh-Hurwitz c1*c2 - c0 (n = 3), else None.
    """

    x: tuple[sympy.Symbol, ...]
    p: tuple[sympy.Symbol, ...]
    mu: sympy.Symbol
    mu_index: int
    u: tuple[sympy.Symbol, ...]
    v: tuple[sympy.Symbol, ...]
    w: tuple[sympy.Symbol, ...]
    F: sympy.Matrix
    J: sympy.Matrix
    F_mu: sympy.Matrix
    J_mu: sympy.Matrix
    B: tuple[sympy.Expr, ...]
    C: tuple[sympy.Expr, ...]
    jv_x: sympy.Matrix
    hopf_condition: sympy.Expr | None

    @property
    def n(self) -> int:
        return len(self.x)


def _forms(F: sympy.Matrix, x, u, v, w) -> tuple[tuple, tuple]:
    """B(u, v) and C(u, v, w) built from the non-zero derivative entries only."""
    n = len(x)
    b_terms: list[list[sympy.Expr]] = [[] for _ in range(n)]
    c_terms: list[list[sympy.Expr]] = [[] for _ in range(n)]
    for i in range(n):
        fi = F[i]
        deps = sorted(x.index(s) for s in fi.free_symbols if s in x)
        for a, j in enumerate(deps):
            dj = sympy.diff(fi, x[j])
            for b_pos, k in enumerate(deps[a:], start=a):
                djk = sympy.diff(dj, x[k])
                if djk == 0:
                    continue
                pairs = {(j, k), (k, j)}
                b_terms[i].append(djk * sum(u[r] * v[s] for r, s in pairs))
                for l_idx in deps[b_pos:]:
                    djkl = sympy.diff(djk, x[l_idx])
                    if djkl == 0:
                        continue
                    triples = set(itertools.permutations((j, k, l_idx)))
                    c_terms[i].append(djkl * sum(u[r] * v[s] * w[t] for r, s, t in triples))
    return tuple(sympy.Add(*t) for t in b_terms), tuple(sympy.Add(*t) for t in c_terms)


def _routh_hurwitz_3(J: sympy.Matrix) -> sympy.Expr:
    """c1*c2 - c0 for the characteristic polynomial s^3 + c2 s^2 + c1 s + c0 of a 3x3 J."""
    c2 = -J.trace()
    c1 = sum(J[i, i] * J[k, k] - J[i, k] * J[k, i] for i in range(3) for k in range(i + 1, 3))
    c0 = -J.det(method="berkowitz")
    return c1 * c2 - c0


def derive(states, parameters, rhs, bifurcation: str) -> HopfSymbols:
    """Derive the symbolic pieces of docs/mathematics.md for a model with a bifurcation
    parameter."""
    x = tuple(states)
    p = tuple(parameters)
    names = [str(s) for s in p]
    mu_index = names.index(bifurcation)
    mu = p[mu_index]
    n = len(x)
    u = tuple(sympy.Symbol(f"bench_u{i}") for i in range(n))
    v = tuple(sympy.Symbol(f"bench_v{i}") for i in range(n))
    w = tuple(sympy.Symbol(f"bench_w{i}") for i in range(n))
    F = sympy.Matrix(list(rhs))
    J = F.jacobian(x)
    F_mu = F.diff(mu)
    J_mu = J.diff(mu)
    B, C = _forms(F, x, u, v, w)
    jv_x = (J * sympy.Matrix(v)).jacobian(x)
    if n == 2:
        condition = J.trace()
    elif n == 3:
        condition = _routh_hurwitz_3(J)
    else:
        condition = None
    return HopfSymbols(x, p, mu, mu_index, u, v, w, F, J, F_mu, J_mu, B, C, jv_x, condition)
