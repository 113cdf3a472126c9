"""High-precision reference for Hopf points of delay equations (sympy and mpmath only).

Shares no code with lyacomp and takes a different route from its kernel:

- derivatives: ``sympy.diff`` over the stacked arguments (x(t), x(t - tau_1), ...);
- the Hopf point: ``mpmath.findroot`` on ``F(x, ..., x, mu) = 0`` and
  ``det Delta(i w) = 0`` (real and imaginary parts) in ``(x, mu, w)``, at 40 digits;
- vectors: the singular value decomposition of ``Delta(i w)``;
- ``l1``: the algorithm of Hassard, Kazarinoff & Wan (Theory and Applications of Hopf
  Bifurcation, Cambridge 1981, the retarded functional differential equation case), with
  the adjoint eigenfunction normalized by Hale's bilinear form, the coefficients
  ``g20, g11, g02, g21`` of the reduced equation and the center-manifold functions
  ``w20(theta), w11(theta)`` written out on ``[-tau, 0]``, then
  ``c1 = i/(2w) (g20 g11 - 2|g11|^2 - |g02|^2/3) + g21/2`` and ``l1 = Re c1 / w``;
- transversality: ``Re dlambda/dmu`` by a central difference of the root
  ``lambda(mu)`` (each one solved by ``findroot``), not by the root-derivative formula.
"""

from __future__ import annotations

import itertools
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import mpmath
import sympy as sp

mp = mpmath.mp


@dataclass(frozen=True)
class DelayReference:
    """Hopf quantities at high precision."""

    l1: mpmath.mpf
    omega: mpmath.mpf
    mu: mpmath.mpf
    equilibrium: tuple
    transversality: mpmath.mpf | None
    amplitude: tuple | None


class MpDelay:
    """A delay model in the reference's own notation.

    ``rhs`` are sympy-readable strings over the states, the parameters and the delayed
    states written ``<state>__<k>`` (state at ``t - tau_k``, k = 1..m); ``delays`` the
    tau_k as strings over the parameters.
    """

    def __init__(
        self,
        states: Sequence[str],
        params: Mapping[str, float],
        rhs: Sequence[str],
        delays: Sequence[str],
        dps: int = 40,
    ):
        self.dps = dps
        self.x = [sp.Symbol(s) for s in states]
        self.n = len(states)
        self.m = len(delays)
        self.lag = [[sp.Symbol(f"{s}__{k + 1}") for s in states] for k in range(self.m)]
        self.stacked = self.x + [s for row in self.lag for s in row]
        self.psyms = {name: sp.Symbol(name) for name in params}
        self.params = dict(params)
        names = {**{str(s): s for s in self.stacked}, **self.psyms}
        self.f = [sp.sympify(e, locals=names) for e in rhs]
        self.tau = [sp.sympify(e, locals=names) for e in delays]
        v = self.stacked
        self.jac = [[sp.diff(fi, a) for a in v] for fi in self.f]
        self.d2 = [[[sp.diff(fi, a, b) for b in v] for a in v] for fi in self.f]
        self.d3 = [[[[sp.diff(fi, a, b, c) for c in v] for b in v] for a in v] for fi in self.f]

    # -- evaluation helpers ----------------------------------------------------------
    def _subs(self, x, values):
        table = {self.psyms[k]: mpmath.mpf(v) for k, v in values.items()}
        for k in range(self.m + 1):
            for j in range(self.n):
                table[self.stacked[k * self.n + j]] = x[j]
        return table

    def _num(self, expr, table):
        return mpmath.mpmathify(sp.N(expr.xreplace(table), self.dps + 10))

    def _taus(self, values):
        table = {self.psyms[k]: mpmath.mpf(v) for k, v in values.items()}
        return [mpmath.mpf(sp.N(t.xreplace(table), self.dps + 10)) for t in self.tau]

    def _blocks(self, x, values):
        table = self._subs(x, values)
        full = [[self._num(e, table) for e in row] for row in self.jac]
        n = self.n
        return [
            mpmath.matrix([[full[i][k * n + j] for j in range(n)] for i in range(n)])
            for k in range(self.m + 1)
        ]

    def _delta(self, lam, blocks, taus):
        out = lam * mpmath.eye(self.n) - blocks[0]
        for k in range(self.m):
            out -= blocks[k + 1] * mpmath.exp(-lam * taus[k])
        return out

    def _equilibrium(self, values, x_guess):
        n = self.n

        def eqs(*x):
            table = self._subs(list(x), values)
            return [self._num(fi, table) for fi in self.f]

        root = mpmath.findroot(eqs, [mpmath.mpf(v) for v in x_guess])
        return [root[j] for j in range(n)] if isinstance(root, mpmath.matrix) else [root]

    def _root(self, values, x_guess, lam_guess):
        x = self._equilibrium(values, x_guess)
        blocks, taus = self._blocks(x, values), self._taus(values)
        return mpmath.findroot(lambda lam: mpmath.det(self._delta(lam, blocks, taus)), lam_guess)

    # -- the reference computation --------------------------------------------------
    def solve(
        self,
        mu: str | None,
        guess: Mapping[str, float],
        x_guess: Sequence[float],
        omega_guess: float,
    ) -> DelayReference:
        """The Hopf point near the guesses, l1 by the HKW algorithm, d by differences."""
        with mpmath.workdps(self.dps):
            values = dict(self.params)
            if mu is not None:
                n = self.n

                def eqs(*z):
                    vals = {**values, mu: z[n]}
                    x = list(z[:n])
                    table = self._subs(x, vals)
                    res = [self._num(fi, table) for fi in self.f]
                    det = mpmath.det(
                        self._delta(1j * z[n + 1], self._blocks(x, vals), self._taus(vals))
                    )
                    return res + [mpmath.re(det), mpmath.im(det)]

                start = [mpmath.mpf(v) for v in x_guess] + [guess[mu], omega_guess]
                z = mpmath.findroot(eqs, start)
                values[mu] = z[n]
                x = [z[j] for j in range(n)]
                omega = z[n + 1]
            else:
                x = self._equilibrium(values, x_guess)
                lam = self._root(values, x, 1j * omega_guess)
                omega = mpmath.im(lam)
            omega = abs(omega)
            l1, q = self._l1(x, values, omega)
            d = amp = None
            if mu is not None:
                h = mpmath.mpf(10) ** (-12)
                up = self._root({**values, mu: values[mu] + h}, x, 1j * omega)
                down = self._root({**values, mu: values[mu] - h}, x, 1j * omega)
                d = mpmath.re(up - down) / (2 * h)
                amp = tuple(2 * abs(qj) * mpmath.sqrt(abs(d / (omega * l1))) for qj in q)
            return DelayReference(l1, omega, values.get(mu), tuple(x), d, amp)

    def _l1(self, x, values, omega):
        n, m = self.n, self.m
        blocks, taus = self._blocks(x, values), self._taus(values)
        lam = 1j * omega
        u, _s, vh = mpmath.svd_c(self._delta(lam, blocks, taus))
        q = [mpmath.conj(vh[n - 1, j]) for j in range(n)]
        scale = mpmath.sqrt(sum(abs(c) ** 2 for c in q))
        q = [c / scale for c in q]
        left = [mpmath.conj(u[i, n - 1]) for i in range(n)]  # row d with d Delta(i w) = 0
        # Hale's bilinear form (psi, phi) = psi(0) phi(0) + sum_k int_{-tau_k}^0
        # psi(xi + tau_k) A_k phi(xi) dxi with psi(s) = d e^{-i w s}, phi(xi) = q e^{i w xi}.
        form = sum(left[i] * q[i] for i in range(n))
        for k in range(m):
            a_k = blocks[k + 1]
            integrand = lambda xi, k=k, a_k=a_k: sum(  # noqa: E731
                left[i]
                * mpmath.exp(-lam * (xi + taus[k]))
                * a_k[i, j]
                * q[j]
                * mpmath.exp(lam * xi)
                for i in range(n)
                for j in range(n)
            )
            form += mpmath.quad(integrand, [-taus[k], 0])
        d = [c / form for c in left]
        table = self._subs(x, values)
        d2 = [[[self._num(e, table) for e in row] for row in fi] for fi in self.d2]
        d3 = [[[[self._num(e, table) for e in r2] for r2 in r1] for r1 in fi] for fi in self.d3]
        ns = n * (m + 1)

        def stack(vec_of_theta):
            return [vec_of_theta(0)[j] for j in range(n)] + [
                vec_of_theta(-taus[k])[j] for k in range(m) for j in range(n)
            ]

        def bform(a, b):
            return [
                sum(d2[i][s][t] * a[s] * b[t] for s in range(ns) for t in range(ns))
                for i in range(n)
            ]

        def cform(a, b, c):
            return [
                sum(
                    d3[i][s][t][r] * a[s] * b[t] * c[r]
                    for s, t, r in itertools.product(range(ns), repeat=3)
                )
                for i in range(n)
            ]

        def proj(vec):
            return sum(d[i] * vec[i] for i in range(n))

        qt = lambda th: [c * mpmath.exp(lam * th) for c in q]  # noqa: E731
        qbt = lambda th: [mpmath.conj(c) * mpmath.exp(-lam * th) for c in q]  # noqa: E731
        big_q, big_qb = stack(qt), stack(qbt)
        g20 = proj(bform(big_q, big_q))
        g11 = proj(bform(big_q, big_qb))
        g02 = proj(bform(big_qb, big_qb))
        e1 = mpmath.lu_solve(self._delta(2 * lam, blocks, taus), mpmath.matrix(bform(big_q, big_q)))
        e2 = mpmath.lu_solve(self._delta(0, blocks, taus), mpmath.matrix(bform(big_q, big_qb)))
        i = mpmath.mpc(0, 1)

        def w20(th):
            return [
                i * g20 / omega * qt(th)[j]
                + i * mpmath.conj(g02) / (3 * omega) * qbt(th)[j]
                + e1[j] * mpmath.exp(2 * lam * th)
                for j in range(n)
            ]

        def w11(th):
            return [
                -i * g11 / omega * qt(th)[j] + i * mpmath.conj(g11) / omega * qbt(th)[j] + e2[j]
                for j in range(n)
            ]

        g21 = proj(
            [
                a + 2 * b + c
                for a, b, c in zip(
                    cform(big_q, big_q, big_qb),
                    bform(big_q, stack(w11)),
                    bform(big_qb, stack(w20)),
                )
            ]
        )
        c1 = i / (2 * omega) * (g20 * g11 - 2 * abs(g11) ** 2 - abs(g02) ** 2 / 3) + g21 / 2
        return mpmath.re(c1) / omega, q


def collocation_roots(blocks, taus, points: int):
    """Eigenvalues of the Chebyshev collocation of the infinitesimal generator of the
    solution semigroup on [-tau_max, 0] (Breda, Maset & Vermiglio, SIAM J. Sci. Comput. 27,
    2005; the differentiation matrix of Trefethen, Spectral Methods in MATLAB, SIAM 2000,
    cheb.m), for real matrices ``blocks = [A0, A1, ...]`` (numpy) and delays ``taus``.
    Rows 1..M: d/dtheta at the nodes; row 0: the equation A0 u(0) + sum_k A_k u(-tau_k),
    u(-tau_k) by barycentric interpolation when -tau_k is not a node."""
    import numpy as np

    n, tau_max = blocks[0].shape[0], max(taus)
    k = np.arange(points + 1)
    nodes = np.cos(np.pi * k / points)  # x_0 = 1 (theta = 0) ... x_M = -1 (theta = -tau_max)
    c = np.where((k == 0) | (k == points), 2.0, 1.0) * (-1.0) ** k
    dmat = np.outer(c, 1.0 / c) / (nodes[:, None] - nodes[None, :] + np.eye(points + 1))
    dmat -= np.diag(dmat.sum(axis=1))
    dmat *= 2.0 / tau_max
    weights = (-1.0) ** k * np.where((k == 0) | (k == points), 0.5, 1.0)
    gen = np.zeros((n * (points + 1), n * (points + 1)))
    gen[:n, :n] += blocks[0]
    for a_k, tau in zip(blocks[1:], taus, strict=True):
        x = 2.0 * (-tau) / tau_max + 1.0
        hit = np.abs(x - nodes) < 1e-14
        if hit.any():
            row = hit.astype(float)
        else:
            w = weights / (x - nodes)
            row = w / w.sum()
        gen[:n, :] += np.kron(row[None, :], a_k)
    gen[n:, :] = np.kron(dmat[1:, :], np.eye(n))
    return np.linalg.eigvals(gen)


def chebyshev_unstable_count(blocks, taus, points: int = 60, threshold: float = 1e-6) -> int:
    """Eigenvalues with Re > threshold of the collocation above (``collocation_roots``).
    The critical pair (Re ~ 0) is not counted."""
    import numpy as np

    return int(np.sum(collocation_roots(blocks, taus, points).real > threshold))
