"""Baseline B1: the math of docs/mathematics.md written directly in numpy over arrays of samples.

This is what a skilled Python user would write: lambdified derivatives evaluated on whole
arrays, complex numpy arrays, batched ``numpy.linalg.solve``, and a batched Newton solve for
the Hopf point, warm-started from the nominal Hopf point (computed once, outside the timing).
The Hopf point uses closed forms when the model gives them; otherwise Newton on
(F = 0, trace J = 0) for n = 2, (F = 0, c1*c2 - c0 = 0) for n = 3 (Routh-Hurwitz), and the
augmented system (x, mu, v_r, v_i, omega) of docs/mathematics.md for larger n.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import sympy
from symbolic import HopfSymbols

NEWTON_MAX_STEPS = 40
NEWTON_TOL = 1e-13


class Packed:
    """Several sympy expressions lambdified into one numpy function; zero entries skipped."""

    def __init__(self, exprs, args, shape: tuple[int, ...], dtype=float):
        flat = list(exprs)
        self.shape = shape
        self.dtype = dtype
        self.index = [i for i, e in enumerate(flat) if e != 0]
        nonzero = [flat[i] for i in self.index]
        self.fn = sympy.lambdify(args, nonzero, modules="numpy", cse=True, dummify=True)

    def __call__(self, columns, size: int) -> np.ndarray:
        out = np.zeros((size, int(np.prod(self.shape))), dtype=self.dtype)
        for i, value in zip(self.index, self.fn(*columns)):
            out[:, i] = value
        return out.reshape((size, *self.shape))


@dataclass
class Start:
    """Nominal Hopf point that warm-starts the batched Newton solve."""

    x: np.ndarray
    mu: float
    v: np.ndarray | None = None
    omega: float | None = None


def _cols(a: np.ndarray) -> list[np.ndarray]:
    return [a[:, i] for i in range(a.shape[1])]


def _dot(p: np.ndarray, y: np.ndarray) -> np.ndarray:
    """<p, y> = sum conj(p_i) y_i per sample."""
    return np.einsum("ni,ni->n", p.conj(), y)


def _adjugate(M: np.ndarray) -> np.ndarray:
    """Adjugate of a batch of 2x2 or 3x3 complex matrices (rows: cross products of columns)."""
    if M.shape[1] == 2:
        adj = np.empty_like(M)
        adj[:, 0, 0] = M[:, 1, 1]
        adj[:, 0, 1] = -M[:, 0, 1]
        adj[:, 1, 0] = -M[:, 1, 0]
        adj[:, 1, 1] = M[:, 0, 0]
        return adj
    cols = [M[:, :, j] for j in range(3)]
    return np.stack([np.cross(cols[(i + 1) % 3], cols[(i + 2) % 3]) for i in range(3)], axis=1)


def _pick_largest(vectors: np.ndarray) -> np.ndarray:
    """From a batch of candidate vectors (N, k, n), the one of largest norm per sample."""
    best = np.argmax(np.sum(np.abs(vectors) ** 2, axis=2), axis=1)
    return vectors[np.arange(len(best)), best]


class VectorizedHopf:
    """B1 evaluator: ``solve(params)`` returns arrays of l1, omega, critical value, ...."""

    def __init__(self, hs: HopfSymbols, closed_forms: dict | None = None):
        self.hs = hs
        n = hs.n
        self.n = n
        xp = list(hs.x) + list(hs.p)
        self.F = Packed(hs.F, xp, (n,))
        self.J = Packed(hs.J, xp, (n, n))
        self.F_mu = Packed(hs.F_mu, xp, (n,))
        self.J_mu = Packed(hs.J_mu, xp, (n, n))
        self.B = Packed(hs.B, xp + list(hs.u) + list(hs.v), (n,), complex)
        self.C = Packed(hs.C, xp + list(hs.u) + list(hs.v) + list(hs.w), (n,), complex)
        self.closed = None
        if closed_forms is not None:
            exprs = list(closed_forms["equilibrium"]) + [closed_forms["critical_value"]]
            self.closed = Packed(exprs, list(hs.p), (n + 1,))
        elif hs.hopf_condition is not None:
            z = list(hs.x) + [hs.mu]
            g = sympy.Matrix([hs.hopf_condition])
            self.cond = Packed(g, xp, (1,))
            self.cond_grad = Packed(g.jacobian(z), xp, (n + 1,))
        else:
            self.jv_x = Packed(hs.jv_x, xp + list(hs.v), (n, n))
        self.start: Start | None = None
        self.c: np.ndarray | None = None

    # -- Hopf point -------------------------------------------------------------------------
    def prepare(self, nominal: np.ndarray, guess: np.ndarray, mu_guess: float) -> None:
        """Solve once at the nominal parameters from the model's guess (outside the timing)."""
        if self.closed is not None:
            return
        p = nominal[None, :].copy()
        p[:, self.hs.mu_index] = mu_guess
        x = guess[None, :].astype(float)
        start = Start(x=guess.astype(float), mu=float(mu_guess))
        if self.hs.hopf_condition is None:
            A = self.J(_cols(x) + _cols(p), 1)[0]
            lam, V = np.linalg.eig(A)
            k = np.argmin(np.where(lam.imag > 0, np.abs(lam.real), np.inf))
            v0 = V[:, k]
            self.c = v0.real / np.dot(v0.real, v0.real)
            start.v = v0 / np.dot(self.c, v0)
            start.omega = float(lam[k].imag)
        self.start = start
        ok, x0, mu0, extra = self._newton(p)
        if not ok[0]:
            raise RuntimeError("B1: Newton did not converge at the nominal parameters")
        self.start = Start(x=x0[0], mu=float(mu0[0]))
        if extra is not None:
            self.start.v, self.start.omega = extra[0][0], float(extra[1][0])

    def _newton(self, p: np.ndarray):
        n, N = self.n, len(p)
        s = self.start
        if self.hs.hopf_condition is not None:
            z = np.tile(np.concatenate([s.x, [s.mu]]), (N, 1))
        else:
            z = np.tile(np.concatenate([s.x, [s.mu], s.v.real, s.v.imag, [s.omega]]), (N, 1))
        p = p.copy()
        done = np.zeros(N, dtype=bool)
        for _ in range(NEWTON_MAX_STEPS):
            p[:, self.hs.mu_index] = z[:, n]
            G, DG = self._system(z, p)
            with np.errstate(all="ignore"):
                dz = np.linalg.solve(DG, -G[..., None])[..., 0]
            z += dz
            size = np.max(np.abs(dz) / (1.0 + np.abs(z)), axis=1)
            done = size < NEWTON_TOL
            if np.all(done | ~np.isfinite(size)):
                break
        ok = done & np.all(np.isfinite(z), axis=1)
        extra = None
        if self.hs.hopf_condition is None:
            extra = (z[:, n + 1 : 2 * n + 1] + 1j * z[:, 2 * n + 1 : 3 * n + 1], z[:, 3 * n + 1])
        return ok, z[:, :n], z[:, n], extra

    def _system(self, z: np.ndarray, p: np.ndarray):
        n, N = self.n, len(z)
        xp = _cols(z[:, :n]) + _cols(p)
        F = self.F(xp, N)
        if self.hs.hopf_condition is not None:
            G = np.concatenate([F, self.cond(xp, N)], axis=1)
            DG = np.empty((N, n + 1, n + 1))
            DG[:, :n, :n] = self.J(xp, N)
            DG[:, :n, n] = self.F_mu(xp, N)
            DG[:, n, :] = self.cond_grad(xp, N)
            return G, DG
        vr, vi, om = z[:, n + 1 : 2 * n + 1], z[:, 2 * n + 1 : 3 * n + 1], z[:, 3 * n + 1]
        A, A_mu = self.J(xp, N), self.J_mu(xp, N)
        eye = np.eye(n)
        m = 3 * n + 2
        G = np.empty((N, m))
        G[:, :n] = F
        G[:, n : 2 * n] = np.einsum("nij,nj->ni", A, vr) + om[:, None] * vi
        G[:, 2 * n : 3 * n] = np.einsum("nij,nj->ni", A, vi) - om[:, None] * vr
        G[:, 3 * n] = vr @ self.c - 1.0
        G[:, 3 * n + 1] = vi @ self.c
        DG = np.zeros((N, m, m))
        r0, r1, r2 = slice(0, n), slice(n, 2 * n), slice(2 * n, 3 * n)
        cr, ci = slice(n + 1, 2 * n + 1), slice(2 * n + 1, 3 * n + 1)
        DG[:, r0, :n] = A
        DG[:, r0, n] = self.F_mu(xp, N)
        DG[:, r1, :n] = self.jv_x(xp + _cols(vr), N)
        DG[:, r1, n] = np.einsum("nij,nj->ni", A_mu, vr)
        DG[:, r1, cr] = A
        DG[:, r1, ci] = om[:, None, None] * eye
        DG[:, r1, 3 * n + 1] = vi
        DG[:, r2, :n] = self.jv_x(xp + _cols(vi), N)
        DG[:, r2, n] = np.einsum("nij,nj->ni", A_mu, vi)
        DG[:, r2, cr] = -om[:, None, None] * eye
        DG[:, r2, ci] = A
        DG[:, r2, 3 * n + 1] = -vr
        DG[:, 3 * n, cr] = self.c
        DG[:, 3 * n + 1, ci] = self.c
        return G, DG

    # -- l1 and the derived quantities -----------------------------------------------------
    def solve(self, params: np.ndarray) -> dict[str, np.ndarray]:
        """Evaluate all samples; ``params`` is (N, m) in model order (mu column ignored)."""
        n, N = self.n, len(params)
        p = params.astype(float, copy=True)
        extra = None
        if self.closed is not None:
            cf = self.closed(_cols(p), N)
            x0, mu0 = cf[:, :n], cf[:, n]
            ok = np.ones(N, dtype=bool)
        else:
            ok, x0, mu0, extra = self._newton(p)
        p[:, self.hs.mu_index] = mu0
        xp = _cols(x0) + _cols(p)
        A = self.J(xp, N)
        if extra is None:
            if n == 2:
                omega2 = A[:, 0, 0] * A[:, 1, 1] - A[:, 0, 1] * A[:, 1, 0]
            else:
                omega2 = sum(
                    A[:, i, i] * A[:, k, k] - A[:, i, k] * A[:, k, i]
                    for i in range(3)
                    for k in range(i + 1, 3)
                )
            ok &= omega2 > 0
            omega = np.sqrt(np.where(omega2 > 0, omega2, np.nan))
            M = A - 1j * omega[:, None, None] * np.eye(n)
            adj = _adjugate(M)
            q = _pick_largest(np.transpose(adj, (0, 2, 1)))
            row = _pick_largest(adj)
        else:
            omega = extra[1]
            q = extra[0]
            ok &= omega > 0
        q = q / np.linalg.norm(q, axis=1)[:, None]
        if extra is None:
            pbar = row / np.einsum("ni,ni->n", row, q)[:, None]
        else:
            pbar = self._left_vector(A, omega, q)
        pv = pbar.conj()
        qb = q.conj()
        B, C = self.B, self.C
        with np.errstate(all="ignore"):
            h11 = B(xp + _cols(q) + _cols(qb), N).real
            s11 = np.linalg.solve(A, h11[..., None])[..., 0]
            h20 = B(xp + _cols(q) + _cols(q), N)
            shifted = 2j * omega[:, None, None] * np.eye(n) - A
            s20 = np.linalg.solve(shifted, h20[..., None])[..., 0]
            c111 = C(xp + _cols(q) + _cols(q) + _cols(qb), N)
            bq11 = B(xp + _cols(q) + _cols(s11), N)
            bq20 = B(xp + _cols(qb) + _cols(s20), N)
            total = _dot(pv, c111) - 2.0 * _dot(pv, bq11) + _dot(pv, bq20)
            l1 = total.real / (2.0 * omega)
            dx = -np.linalg.solve(A, self.F_mu(xp, N)[..., None])[..., 0]
            jq = np.einsum("nij,nj->ni", self.J_mu(xp, N), q)
            trans = _dot(pv, jq + B(xp + _cols(q) + _cols(dx), N)).real
            amp = 2.0 * np.abs(q) * np.sqrt(np.abs(trans / (omega * l1)))[:, None]
        ok &= np.isfinite(l1) & np.isfinite(trans)
        nan = np.where(ok, 1.0, np.nan)
        return {
            "ok": ok,
            "l1": l1 * nan,
            "omega": omega * nan,
            "critical_value": mu0 * nan,
            "transversality": trans * nan,
            "equilibrium": x0 * nan[:, None],
            "amplitude": amp * nan[:, None],
        }

    @staticmethod
    def _left_vector(A: np.ndarray, omega: np.ndarray, q: np.ndarray) -> np.ndarray:
        """conj(p) from the bordered system [[M^T, conj(q)], [q^T, 0]], M = A - i omega I.

        Its solution w satisfies w^T q = 1, which is <p, q> = 1 for p = conj(w).
        """
        N, n = q.shape
        K = np.zeros((N, n + 1, n + 1), dtype=complex)
        K[:, :n, :n] = np.transpose(A, (0, 2, 1)) - 1j * omega[:, None, None] * np.eye(n)
        K[:, :n, n] = q.conj()
        K[:, n, :n] = q
        rhs = np.zeros((N, n + 1, 1), dtype=complex)
        rhs[:, n, 0] = 1.0
        with np.errstate(all="ignore"):
            return np.linalg.solve(K, rhs)[:, :n, 0]
