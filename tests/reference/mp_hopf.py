"""High-precision Hopf reference built on sympy and mpmath only.

This module deliberately shares no code with lyacomp and locates the Hopf point by a
different route: instead of the augmented eigenvector system, it solves

    F(x, mu) = 0,   Re det(A - i w I) = 0,   Im det(A - i w I) = 0

for ``(x, mu, w)``: a damped Newton iteration in double precision (central-difference
Jacobian), then ``mpmath.findroot`` at 40 significant digits. Eigenvectors come from
``mpmath.eig`` (right and left); every derivative comes from ``sympy.diff``. The first
Lyapunov coefficient, transversality and amplitude coefficients follow the projection
formulas of docs/mathematics.md (Kuznetsov, Elements of Applied Bifurcation Theory,
3rd ed. 2004, Chapter 3) with ``<q, q> = 1`` and ``<p, q> = 1``.
"""

from __future__ import annotations

import itertools
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import mpmath
import numpy as np
import sympy as sp

DEFAULT_DPS = 40

mp = mpmath.mp


class ReferenceSolveError(RuntimeError):
    """The reference computation failed (no convergence or no isolated imaginary pair)."""


@dataclass(frozen=True)
class MpHopfPoint:
    """Hopf quantities at high precision (mpmath numbers)."""

    l1: mpmath.mpf
    omega: mpmath.mpf
    critical_value: mpmath.mpf | None
    transversality: mpmath.mpf | None
    equilibrium: tuple[mpmath.mpf, ...]
    amplitude: tuple[mpmath.mpf, ...] | None
    eigenvalues: tuple[mpmath.mpc, ...]
    q: tuple[mpmath.mpc, ...]
    p: tuple[mpmath.mpc, ...]

    @property
    def period(self) -> mpmath.mpf:
        """Period of the linear oscillation at onset, 2*pi/omega."""
        return 2 * mpmath.pi / self.omega


def _inner(u: Sequence, v: Sequence):
    """<u, v> = sum conj(u_i) v_i (conjugate-linear in the first slot, docs/mathematics.md)."""
    return mpmath.fsum(mpmath.conj(a) * b for a, b in zip(u, v, strict=True))


def _lambdify(args: Sequence[sp.Symbol], exprs: Sequence[sp.Expr], modules: str = "mpmath"):
    # The arguments are already renamed to plain identifiers (see MpHopf.__init__).
    return sp.lambdify(list(args), list(exprs), modules=modules, dummify=False)


class MpHopf:
    """A model prepared once (symbolic derivatives, mpmath callables), solved many times.

    ``rhs`` are sympy expressions of ``states`` and ``parameters``; ``bifurcation`` is one of
    ``parameters`` or None (then the point is taken as given and only the equilibrium is solved).
    """

    def __init__(
        self,
        rhs: Sequence[sp.Expr],
        states: Sequence[sp.Symbol],
        parameters: Sequence[sp.Symbol],
        bifurcation: sp.Symbol | None = None,
    ) -> None:
        self.states = tuple(states)
        self.parameters = tuple(parameters)
        self.bifurcation = bifurcation
        self.n = len(self.states)
        if len(rhs) != self.n:
            raise ValueError("need one right-hand side per state")
        # Rename every symbol to a plain identifier once, so user names such as "lambda" or
        # "E" cannot clash with Python or mpmath (cheaper than lambdify's per-call dummify).
        args = tuple(sp.Symbol(f"arg{i}_") for i in range(self.n + len(self.parameters)))
        rename = dict(zip(self.states + self.parameters, args, strict=True))
        rhs = [sp.sympify(f).xreplace(rename) for f in rhs]
        x = args[: self.n]
        self._x = x
        jac = [[sp.diff(f, xj) for xj in x] for f in rhs]
        self._second = self._tensor_entries(rhs, 2)
        self._third = self._tensor_entries(rhs, 3)
        self._f = _lambdify(args, rhs)
        self._jac = _lambdify(args, [e for row in jac for e in row])
        # Double-precision twins, only for the starting iterations of the root finder.
        self._f_np = _lambdify(args, rhs, "numpy")
        self._jac_np = _lambdify(args, [e for row in jac for e in row], "numpy")
        self._d2 = _lambdify(args, [e for _, e in self._second])
        self._d3 = _lambdify(args, [e for _, e in self._third])
        if bifurcation is not None:
            if bifurcation not in self.parameters:
                raise ValueError(f"bifurcation parameter {bifurcation} is not among the parameters")
            mu = rename[bifurcation]
            self._f_mu = _lambdify(args, [sp.diff(f, mu) for f in rhs])
            self._j_mu = _lambdify(args, [sp.diff(e, mu) for row in jac for e in row])

    def _tensor_entries(self, rhs: Sequence[sp.Expr], order: int):
        """Non-zero symmetric derivative entries ((i, j, k[, l]), expr), one per sorted index."""
        entries = []
        for i, f in enumerate(rhs):
            for combo in itertools.combinations_with_replacement(range(self.n), order):
                expr = sp.diff(f, *[self._x[j] for j in combo])
                if expr != 0:
                    entries.append(((i, *combo), expr))
        return entries

    # --- evaluation helpers -------------------------------------------------------------

    def _args(self, x: Sequence, theta: Sequence) -> list:
        return list(x) + list(theta)

    def _matrix(self, flat: Sequence) -> mpmath.matrix:
        n = self.n
        return mpmath.matrix([[flat[i * n + j] for j in range(n)] for i in range(n)])

    def _expand(self, entries, values) -> dict[tuple[int, ...], object]:
        """Full symmetric tensor (as a sparse dict) from the sorted-index entries."""
        full: dict[tuple[int, ...], object] = {}
        for (key, _), value in zip(entries, values, strict=True):
            i, rest = key[0], key[1:]
            for perm in set(itertools.permutations(rest)):
                full[(i, *perm)] = value
        return full

    @staticmethod
    def _apply(tensor: Mapping[tuple[int, ...], object], n: int, *vectors) -> list:
        out = [mpmath.mpc(0)] * n
        for key, value in tensor.items():
            term = value
            for slot, vec in zip(key[1:], vectors, strict=True):
                term = term * vec[slot]
            out[key[0]] += term
        return out

    def _theta(self, values: Mapping) -> list:
        by_name = {str(k): v for k, v in values.items()}
        missing = [str(s) for s in self.parameters if str(s) not in by_name]
        if missing:
            raise ValueError(f"missing parameter values: {missing}")
        return [mpmath.mpf(by_name[str(s)]) for s in self.parameters]

    # --- root finding --------------------------------------------------------------------

    @staticmethod
    def _double_newton(residual_np, z: np.ndarray, max_steps: int = 80):
        """Damped Newton in double precision; returns the root and the last Jacobian."""
        for _ in range(max_steps):
            r = np.asarray(residual_np(z), dtype=float)
            jac = np.empty((len(r), len(z)))
            for k in range(len(z)):
                step = 1e-6 * max(1.0, abs(z[k]))
                zp, zm = z.copy(), z.copy()
                zp[k] += step
                zm[k] -= step
                jac[:, k] = (np.asarray(residual_np(zp)) - np.asarray(residual_np(zm))) / (2 * step)
            try:
                delta = np.linalg.solve(jac, -r)
            except np.linalg.LinAlgError as exc:
                raise ReferenceSolveError("singular Newton matrix") from exc
            lam, rnorm = 1.0, np.linalg.norm(r)
            while lam > 1e-6 and not np.linalg.norm(residual_np(z + lam * delta)) < rnorm:
                lam /= 2
            z = z + lam * delta
            if not np.all(np.isfinite(z)):
                break
            if np.linalg.norm(lam * delta) < 1e-13 * (1.0 + np.linalg.norm(z)):
                return z, jac
        raise ReferenceSolveError("double-precision Newton did not converge")

    @staticmethod
    def _locate(residual_np, residual_mp, z0: Sequence[float]) -> list:
        """Root of a square system: double-precision Newton, then mpmath.findroot polishing.

        The polishing step reuses the final double-precision Jacobian (a chord iteration): it
        converges linearly with rate ~1e-8, so a handful of 40-digit residual evaluations do.
        """
        with np.errstate(all="ignore"):  # a diverging start is reported as an error instead
            z, jac = MpHopf._double_newton(residual_np, np.array([float(v) for v in z0]))
        chord = mpmath.matrix(jac.tolist())
        tol = mpmath.mpf(10) ** (-(mp.dps - 10))
        root = mpmath.findroot(
            lambda *v: residual_mp(list(v)),
            [mpmath.mpf(v) for v in z],
            J=lambda *v: chord,
            tol=tol,
            maxsteps=40,
            verify=False,
        )
        root = [root[i] for i in range(len(z))]
        if mpmath.norm(mpmath.matrix(residual_mp(root))) > mpmath.sqrt(tol):
            raise ReferenceSolveError("mpmath.findroot did not polish the root")
        return root

    # --- the solve --------------------------------------------------------------------------

    def solve(
        self,
        values: Mapping,
        state_guess: Sequence[float],
        omega_guess: float | None = None,
        dps: int = DEFAULT_DPS,
    ) -> MpHopfPoint:
        """Locate the Hopf point from the guesses and evaluate every Hopf quantity.

        ``values`` maps parameter names (or symbols) to numbers; the bifurcation parameter's
        value is the starting guess. ``omega_guess`` defaults to the imaginary part of the
        eigenvalue nearest to the imaginary axis at the guess.
        """
        with mpmath.workdps(dps):
            return self._solve(values, state_guess, omega_guess)

    def equilibrium(
        self, values: Mapping, state_guess: Sequence[float], dps: int = DEFAULT_DPS
    ) -> tuple[mpmath.mpf, ...]:
        """The equilibrium F(x) = 0 at the given parameter values, from ``state_guess``."""
        with mpmath.workdps(dps):
            return tuple(self._equilibrium(self._theta(values), state_guess))

    def _equilibrium(self, theta: list, state_guess: Sequence[float]) -> list:
        theta_np = [float(v) for v in theta]
        return self._locate(
            lambda z: self._f_np(*z, *theta_np),
            lambda z: self._f(*self._args(z, theta)),
            [float(v) for v in state_guess],
        )

    def rough_location(
        self, values: Mapping, state_guess: Sequence[float]
    ) -> tuple[float, float] | None:
        """(critical value, omega) in double precision from these guesses, or None.

        Cheap; meant for probing whether several starting guesses reach the same Hopf point.
        """
        theta = self._theta(values)
        residual_np, _ = self._hopf_residuals(theta)
        z0 = self._hopf_start(theta, state_guess)
        try:
            with np.errstate(all="ignore"):
                z, _ = self._double_newton(residual_np, np.array(z0))
        except ReferenceSolveError:
            return None
        return float(z[self.n]), abs(float(z[self.n + 1]))

    def _hopf_start(self, theta: list, state_guess: Sequence[float], omega_guess=None) -> list:
        idx = self.parameters.index(self.bifurcation)
        x = [float(v) for v in state_guess]
        if omega_guess is None:
            omega_guess = abs(mpmath.im(self._critical_eigenvalue(x, theta)))
        return [*x, float(theta[idx]), float(omega_guess)]

    def _hopf_residuals(self, theta: list):
        """F = 0 and det(A - i w I) = 0 in the unknowns (x, mu, w), in double and mp precision."""
        n = self.n
        idx = self.parameters.index(self.bifurcation)
        theta_np = [float(v) for v in theta]

        def residual_np(z):
            th = list(theta_np)
            th[idx] = z[n]
            m = np.reshape(self._jac_np(*z[:n], *th), (n, n)) - 1j * z[n + 1] * np.eye(n)
            det = np.linalg.det(m)
            return [*self._f_np(*z[:n], *th), det.real, det.imag]

        def residual_mp(z):
            th = list(theta)
            th[idx] = z[n]
            args = self._args(z[:n], th)
            det = mpmath.det(self._matrix(self._jac(*args)) - 1j * z[n + 1] * mpmath.eye(n))
            return [*self._f(*args), mpmath.re(det), mpmath.im(det)]

        return residual_np, residual_mp

    def _solve(self, values, state_guess, omega_guess) -> MpHopfPoint:
        n = self.n
        theta = self._theta(values)
        if self.bifurcation is None:
            return self._quantities(self._equilibrium(theta, state_guess), theta, None, None)
        idx = self.parameters.index(self.bifurcation)
        residual_np, residual_mp = self._hopf_residuals(theta)
        z = self._locate(
            residual_np, residual_mp, self._hopf_start(theta, state_guess, omega_guess)
        )
        theta[idx] = z[n]
        return self._quantities(z[:n], theta, idx, abs(z[n + 1]))

    def _critical_eigenvalue(self, x, theta) -> complex:
        """Upper eigenvalue nearest the imaginary axis, in double precision (a starting guess)."""
        jac = np.reshape(self._jac_np(*[float(v) for v in self._args(x, theta)]), (self.n, self.n))
        return self._pick([mpmath.mpc(e) for e in np.linalg.eigvals(jac)], None)

    @staticmethod
    def _pick(eigs, omega):
        """The eigenvalue nearest to i*omega, or (omega None) the upper one nearest the axis."""
        if omega is not None:
            return min(eigs, key=lambda e: abs(e - 1j * omega))
        pairs = [e for e in eigs if mpmath.im(e) > 0]
        if not pairs:
            raise ReferenceSolveError("no complex pair of eigenvalues")
        return min(pairs, key=lambda e: abs(mpmath.re(e)))

    def _quantities(self, x, theta, mu_index, omega_hint) -> MpHopfPoint:
        n = self.n
        args = self._args(x, theta)
        a = self._matrix(self._jac(*args))
        eigs, left, right = mpmath.eig(a, left=True, right=True)
        lam = self._pick(eigs, omega_hint)
        omega = mpmath.im(lam)
        # The pair must be simple and isolated: exactly one eigenvalue at i*omega, one at
        # -i*omega, and no other eigenvalue on the imaginary axis.
        tiny = mpmath.mpf(10) ** (-(mp.dps // 3))
        on_axis = [e for e in eigs if abs(mpmath.re(e)) < tiny]
        if mu_index is not None and len(on_axis) != 2:
            raise ReferenceSolveError(f"critical pair not simple/isolated: {eigs}")
        k = min(range(n), key=lambda j: abs(eigs[j] - lam))
        q = [right[i, k] for i in range(n)]
        qn = mpmath.sqrt(mpmath.re(_inner(q, q)))
        q = [v / qn for v in q]
        # Row k of the left eigenvectors is y^H with y^H A = i w y^H; as A is real, A^T p = -i w p
        # holds for p = conj(y).
        p = [mpmath.conj(left[k, i]) for i in range(n)]
        scale = mpmath.conj(_inner(p, q))
        p = [v / scale for v in p]
        aq = a * mpmath.matrix(q)
        atp = a.T * mpmath.matrix(p)
        residual = max(
            max(abs(aq[i] - lam * q[i]) for i in range(n)),
            max(abs(atp[i] - mpmath.conj(lam) * p[i]) for i in range(n))
            / mpmath.norm(mpmath.matrix(p)),
        )
        if residual > mpmath.mpf(10) ** (-(mp.dps // 2)) * (1 + mpmath.mnorm(a, 1)):
            raise ReferenceSolveError(f"inaccurate critical eigenvectors (residual {residual})")

        second = self._expand(self._second, self._d2(*args))
        third = self._expand(self._third, self._d3(*args))
        qb = [mpmath.conj(v) for v in q]

        def bform(u, v):
            return self._apply(second, n, u, v)

        h11 = mpmath.lu_solve(a, mpmath.matrix(bform(q, qb)))
        h20 = mpmath.lu_solve(2j * omega * mpmath.eye(n) - a, mpmath.matrix(bform(q, q)))
        c = (
            _inner(p, self._apply(third, n, q, q, qb))
            - 2 * _inner(p, bform(q, list(h11)))
            + _inner(p, bform(qb, list(h20)))
        )
        l1 = mpmath.re(c) / (2 * omega)

        critical = transversality = amplitude = None
        if mu_index is not None:
            critical = theta[mu_index]
            f_mu = mpmath.matrix(self._f_mu(*args))
            x_mu = -mpmath.lu_solve(a, f_mu)
            j_mu = self._matrix(self._j_mu(*args))
            jq = j_mu * mpmath.matrix(q)
            bq = bform(q, list(x_mu))
            transversality = mpmath.re(_inner(p, [jq[i] + bq[i] for i in range(n)]))
            factor = mpmath.sqrt(abs(transversality / (omega * l1)))
            amplitude = tuple(2 * abs(v) * factor for v in q)
        return MpHopfPoint(
            l1=l1,
            omega=omega,
            critical_value=critical,
            transversality=transversality,
            equilibrium=tuple(x),
            amplitude=amplitude,
            eigenvalues=tuple(eigs),
            q=tuple(q),
            p=tuple(p),
        )

    # --- an independent check of the transversality ----------------------------------------

    def eigenvalue_slope(self, point: MpHopfPoint, values: Mapping, dps: int = DEFAULT_DPS):
        """Re d(lambda)/d(mu) at the Hopf point by differentiating along the equilibrium branch.

        Uses mpmath.diff on (equilibrium solve + eigenvalue), sharing nothing with the
        projection formula for the transversality.
        """
        if self.bifurcation is None:
            raise ValueError("the model has no bifurcation parameter")
        with mpmath.workdps(dps):
            theta = self._theta(values)
            idx = self.parameters.index(self.bifurcation)

            def real_part(mu):
                th = list(theta)
                th[idx] = mu
                xs = self._equilibrium(th, point.equilibrium)
                a = self._matrix(self._jac(*self._args(xs, th)))
                eigs = mpmath.eig(a, right=False)
                return mpmath.re(min(eigs, key=lambda e: abs(e - 1j * point.omega)))

            return mpmath.diff(real_part, point.critical_value)
