"""Baseline B2: the per-sample loop that most users write.

For each sample: ``scipy.optimize.root`` finds the Hopf point from (F = 0, largest real part
of the eigenvalues of J = 0) (closed forms instead when the model gives them),
``numpy.linalg.eig`` gives omega and the eigenvectors of J and J^T, lambdified derivatives
give B and C, and ``numpy.linalg.solve`` the two linear systems of the l1 formula
(docs/mathematics.md).
Each sample starts from the nominal Hopf point, computed once outside the timing.
"""

from __future__ import annotations

import numpy as np
import scipy.optimize
import sympy
from symbolic import HopfSymbols


class LoopHopf:
    """B2 evaluator: ``solve(params)`` loops over the rows of ``params``."""

    def __init__(self, hs: HopfSymbols, closed_forms: dict | None = None):
        self.hs = hs
        xp = list(hs.x) + list(hs.p)

        def fn(expr, extra=()):
            return sympy.lambdify(xp + list(extra), expr, modules="numpy", cse=True, dummify=True)

        self.F = fn(hs.F)
        self.J = fn(hs.J)
        self.F_mu = fn(hs.F_mu)
        self.J_mu = fn(hs.J_mu)
        self.B = fn(list(hs.B), list(hs.u) + list(hs.v))
        self.C = fn(list(hs.C), list(hs.u) + list(hs.v) + list(hs.w))
        self.closed = None
        if closed_forms is not None:
            exprs = list(closed_forms["equilibrium"]) + [closed_forms["critical_value"]]
            self.closed = sympy.lambdify(list(hs.p), exprs, modules="numpy", dummify=True)
        self.z0: np.ndarray | None = None

    def prepare(self, nominal: np.ndarray, guess: np.ndarray, mu_guess: float) -> None:
        """Solve once at the nominal parameters from the model's guess (outside the timing)."""
        if self.closed is not None:
            return
        self.z0 = np.concatenate([guess, [mu_guess]]).astype(float)
        ok, z = self._root(nominal.astype(float))
        if not ok:
            raise RuntimeError("B2: scipy.optimize.root failed at the nominal parameters")
        self.z0 = z

    def _root(self, p: np.ndarray) -> tuple[bool, np.ndarray]:
        n, k = self.hs.n, self.hs.mu_index

        def residual(z):
            p[k] = z[n]
            args = (*z[:n], *p)
            lam = np.linalg.eigvals(np.asarray(self.J(*args), dtype=float))
            return np.append(np.asarray(self.F(*args), dtype=float).ravel(), lam.real.max())

        # scipy's default tolerance, as most users leave it.
        sol = scipy.optimize.root(residual, self.z0, method="hybr")
        return bool(sol.success), sol.x

    def solve_one(self, params: np.ndarray) -> dict:
        """All quantities of docs/mathematics.md for one sample (NaN where it fails)."""
        n, k = self.hs.n, self.hs.mu_index
        p = params.astype(float, copy=True)
        if self.closed is not None:
            cf = self.closed(*p)
            x0, mu0, ok = np.array(cf[:n], dtype=float), float(cf[n]), True
        else:
            ok, z = self._root(p)
            x0, mu0 = z[:n], float(z[n])
        p[k] = mu0
        args = (*x0, *p)
        A = np.asarray(self.J(*args), dtype=float)
        lam, V = np.linalg.eig(A)
        upper = np.where(lam.imag > 0, np.abs(lam.real), np.inf)
        if not ok or not np.isfinite(upper).any():
            return {"ok": False}
        j = int(np.argmin(upper))
        omega = float(lam[j].imag)
        q = V[:, j]
        lam_t, W = np.linalg.eig(A.T)
        p0 = W[:, int(np.argmin(np.abs(lam_t + 1j * omega)))]
        pv = p0 / np.conj(np.vdot(p0, q))
        qb = q.conj()
        h11 = np.array(self.B(*args, *q, *qb), dtype=complex)
        s11 = np.linalg.solve(A, h11)
        h20 = np.array(self.B(*args, *q, *q), dtype=complex)
        s20 = np.linalg.solve(2j * omega * np.eye(n) - A, h20)
        c111 = np.array(self.C(*args, *q, *q, *qb), dtype=complex)
        bq11 = np.array(self.B(*args, *q, *s11), dtype=complex)
        bq20 = np.array(self.B(*args, *qb, *s20), dtype=complex)
        total = np.vdot(pv, c111) - 2.0 * np.vdot(pv, bq11) + np.vdot(pv, bq20)
        l1 = total.real / (2.0 * omega)
        dx = -np.linalg.solve(A, np.asarray(self.F_mu(*args), dtype=float).ravel())
        jq = np.asarray(self.J_mu(*args), dtype=float) @ q
        trans = np.vdot(pv, jq + np.array(self.B(*args, *q, *dx), dtype=complex)).real
        amp = 2.0 * np.abs(q) * np.sqrt(abs(trans / (omega * l1)))
        return {
            "ok": True,
            "l1": l1,
            "omega": omega,
            "critical_value": mu0,
            "transversality": trans,
            "equilibrium": x0,
            "amplitude": amp,
        }

    def solve(self, params: np.ndarray) -> dict[str, np.ndarray]:
        """Loop over the samples; same keys and shapes as the B1 and lyacomp results."""
        N, n = len(params), self.hs.n
        out = {
            "ok": np.zeros(N, dtype=bool),
            "l1": np.full(N, np.nan),
            "omega": np.full(N, np.nan),
            "critical_value": np.full(N, np.nan),
            "transversality": np.full(N, np.nan),
            "equilibrium": np.full((N, n), np.nan),
            "amplitude": np.full((N, n), np.nan),
        }
        for i in range(N):
            r = self.solve_one(params[i])
            if r["ok"]:
                for key, value in r.items():
                    out[key][i] = value
        return out
