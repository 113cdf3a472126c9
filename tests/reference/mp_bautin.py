"""High-precision reference for the first and second Lyapunov coefficients, by series.

An independent route to ``c1`` and ``c2`` of the normal form
``w' = i omega w + c1 w|w|^2 + c2 w|w|^4`` (the normalization of docs/mathematics.md:
``x = x0 + w q + conj(w q) + ...``, ``<q, q> = 1``, ``<p, q> = 1``, ``l1 = Re c1 / omega``,
``l2 = Re c2 / omega``). It uses no multilinear forms and no symbolic derivatives:
the right-hand side is evaluated *on truncated power series* in ``(w, conj w)`` and the
invariance equation of the center manifold,

    F(x0 + H(w, conj w)) = H_w g(w, conj w) + H_{conj w} conj(g)(w, conj w),

is solved coefficient by coefficient (own derivation from the chain rule; the method is
the one of Kuznetsov, Elements of Applied Bifurcation Theory, 3rd ed. 2004, Ch. 8, used
here in its series form). Coefficients ``w^j conj(w)^k`` with ``j <= 3`` and ``k <= 2``
suffice for ``c2`` and form a closed truncation (products never move an index down).
``h21`` is fixed by ``<p, h21> = 0`` as in docs/mathematics.md. The Hopf point itself (x0, mu0,
omega, q, p) comes from tests/reference/mp_hopf.py, which shares no code with lyacomp.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from math import factorial

import mpmath
import sympy as sp

J_MAX, K_MAX = 3, 2  # the truncation box of the series
BOX = [(j, k) for j in range(J_MAX + 1) for k in range(K_MAX + 1)]


class Series:
    """A truncated power series sum a_jk w^j conj(w)^k (j <= 3, k <= 2), mpmath entries."""

    __slots__ = ("c",)

    def __init__(self, coeffs: dict | None = None):
        self.c = {key: mpmath.mpc(0) for key in BOX}
        if coeffs:
            for key, value in coeffs.items():
                if key in self.c:
                    self.c[key] = mpmath.mpc(value)

    @staticmethod
    def constant(value) -> Series:
        return Series({(0, 0): value})

    def __add__(self, other):
        other = _lift(other)
        return Series({k: self.c[k] + other.c[k] for k in BOX})

    __radd__ = __add__

    def __neg__(self):
        return Series({k: -v for k, v in self.c.items()})

    def __sub__(self, other):
        return self + (-_lift(other))

    def __mul__(self, other):
        other = _lift(other)
        out = {k: mpmath.mpc(0) for k in BOX}
        for (a, b), u in self.c.items():
            if u == 0:
                continue
            for (d, e), v in other.c.items():
                if v != 0 and a + d <= J_MAX and b + e <= K_MAX:
                    out[(a + d, b + e)] += u * v
        return Series(out)

    __rmul__ = __mul__

    def power(self, k: int) -> Series:
        out = Series.constant(1)
        for _ in range(k):
            out = out * self
        return out

    def split(self):
        """(constant term, the rest)."""
        rest = Series(self.c)
        rest.c[(0, 0)] = mpmath.mpc(0)
        return self.c[(0, 0)], rest

    def d_w(self) -> Series:
        return Series({(j - 1, k): j * v for (j, k), v in self.c.items() if j > 0})

    def d_wbar(self) -> Series:
        return Series({(j, k - 1): k * v for (j, k), v in self.c.items() if k > 0})


def _lift(value) -> Series:
    return value if isinstance(value, Series) else Series.constant(value)


def _compose(derivs: Sequence, t: Series) -> Series:
    """sum_k derivs[k] t^k / k! for t without constant term (t^6 vanishes in the box)."""
    out = Series.constant(derivs[0])
    tk = Series.constant(1)
    for k in range(1, len(derivs)):
        tk = tk * t
        out = out + tk * (derivs[k] / factorial(k))
    return out


_ORDER = 6  # derivatives 0..5 of an elementary function


def _apply_function(name: str, s: Series) -> Series:
    a0, t = s.split()
    if name == "exp":
        derivs = [mpmath.exp(a0)] * _ORDER
    elif name == "sin":
        cyc = [mpmath.sin(a0), mpmath.cos(a0), -mpmath.sin(a0), -mpmath.cos(a0)]
        derivs = [cyc[k % 4] for k in range(_ORDER)]
    elif name == "cos":
        cyc = [mpmath.cos(a0), -mpmath.sin(a0), -mpmath.cos(a0), mpmath.sin(a0)]
        derivs = [cyc[k % 4] for k in range(_ORDER)]
    else:
        raise NotImplementedError(f"series of {name}")
    return _compose(derivs, t)


def _real_power(s: Series, alpha) -> Series:
    a0, t = s.split()
    derivs = []
    coeff = mpmath.mpf(1)
    for k in range(_ORDER):
        derivs.append(coeff * a0 ** (alpha - k))
        coeff *= alpha - k
    return _compose(derivs, t)


def evaluate(expr: sp.Expr, env: Mapping[sp.Symbol, Series]) -> Series:
    """The sympy expression evaluated on series (states) and numbers (parameters)."""
    if expr in env:
        return env[expr]
    if expr.is_Number:
        return Series.constant(mpmath.mpf(sp.Rational(expr).p) / sp.Rational(expr).q)
    if expr.is_Add:
        out = Series()
        for arg in expr.args:
            out = out + evaluate(arg, env)
        return out
    if expr.is_Mul:
        out = Series.constant(1)
        for arg in expr.args:
            out = out * evaluate(arg, env)
        return out
    if expr.is_Pow:
        base, exponent = expr.args
        b = evaluate(base, env)
        if exponent.is_Integer and int(exponent) >= 0:
            return b.power(int(exponent))
        return _real_power(b, mpmath.mpf(sp.Rational(exponent).p) / sp.Rational(exponent).q)
    if isinstance(expr, sp.Function) and len(expr.args) == 1:
        return _apply_function(type(expr).__name__, evaluate(expr.args[0], env))
    raise NotImplementedError(f"series evaluation of {expr!r}")


def _inner(u, v):
    return mpmath.fsum(mpmath.conj(a) * b for a, b in zip(u, v, strict=True))


def normal_form_coefficients(
    rhs: Sequence[sp.Expr],
    states: Sequence[sp.Symbol],
    parameter_values: Mapping[sp.Symbol, object],
    x0: Sequence,
    omega,
    q: Sequence,
    p: Sequence,
) -> tuple[mpmath.mpc, mpmath.mpc]:
    """(c1, c2) at the Hopf point (x0, omega, q, p), all at the current mpmath precision."""
    n = len(states)
    rhs = [
        sp.sympify(f).subs({k: sp.Float(str(v), 60) for k, v in parameter_values.items()})
        for f in rhs
    ]
    qb = [mpmath.conj(v) for v in q]
    pb = [mpmath.conj(v) for v in p]
    h = {(1, 0): list(q), (0, 1): qb}
    # The Jacobian from series too: the linear coefficient of F(x0 + e_j w).
    a = mpmath.matrix(n, n)
    for j in range(n):
        env = {s: Series({(0, 0): x0[i], (1, 0): 1 if i == j else 0}) for i, s in enumerate(states)}
        col = [evaluate(f, env).c[(1, 0)] for f in rhs]
        for i in range(n):
            a[i, j] = mpmath.re(col[i])
    c = {1: mpmath.mpc(0), 2: mpmath.mpc(0)}

    def residual(order: int) -> list[Series]:
        env = {
            s: Series({(0, 0): x0[i], **{key: vec[i] for key, vec in h.items()}})
            for i, s in enumerate(states)
        }
        g = Series({(1, 0): 1j * omega, (2, 1): c[1], (3, 2): c[2]})
        gb = Series({(0, 1): -1j * omega, (1, 2): mpmath.conj(c[1])})
        out = []
        for i, f in enumerate(rhs):
            hi = Series({key: vec[i] for key, vec in h.items()})
            out.append(evaluate(f, env) - (hi.d_w() * g + hi.d_wbar() * gb))
        return out

    for order in range(2, 6):
        r = residual(order)
        targets = [(j, k) for (j, k) in BOX if j + k == order]
        for j, k in targets:
            rhs_jk = [r[i].c[(j, k)] for i in range(n)]
            shift = 1j * omega * (j - k)
            m = mpmath.matrix(n, n)
            for i1 in range(n):
                for i2 in range(n):
                    m[i1, i2] = (shift if i1 == i2 else 0) - a[i1, i2]
            if j - k in (1, -1):
                vec, adj = (q, pb) if j - k == 1 else (qb, p)
                coeff = _inner([mpmath.conj(v) for v in adj], rhs_jk)  # <p, r> (or <conj p, r>)
                if (j, k) == (2, 1):
                    c[1] = coeff
                elif (j, k) == (3, 2):
                    c[2] = coeff
                rhs_jk = [rhs_jk[i] - coeff * vec[i] for i in range(n)]
                big = mpmath.matrix(n + 1, n + 1)
                for i1 in range(n):
                    for i2 in range(n):
                        big[i1, i2] = m[i1, i2]
                    big[i1, n] = vec[i1]
                    big[n, i1] = adj[i1]
                sol = mpmath.lu_solve(big, mpmath.matrix(rhs_jk + [0]))
                h[(j, k)] = [sol[i] for i in range(n)]
            else:
                sol = mpmath.lu_solve(m, mpmath.matrix(rhs_jk))
                h[(j, k)] = [sol[i] for i in range(n)]
    return c[1], c[2]
