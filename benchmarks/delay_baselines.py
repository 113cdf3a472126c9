"""Baselines for delay models: the math of docs/mathematics.md ("Delay equations") written
directly in numpy (vectorized over samples) and as a per-sample scipy loop.

Both start from sympy expressions written here, not from lyacomp's derivation:
``F(x, z_1, ..., z_m, p)`` with ``z_k`` standing for ``x(t - tau_k)`` and the delays
``tau_k(p)``. At the equilibrium every ``z_k`` equals ``x``. The Hopf point solves the real
augmented system in ``(x, mu, v_r, v_i, omega)``

    F(x, x, ..., x) = 0,   Re, Im of Delta(i omega) v = 0,   c . v_r = 1,   c . v_i = 0

with ``Delta(l) = l I - A0 - sum_k A_k exp(-l tau_k)``; then ``q = v / |v|``, ``p`` spans the
null space of ``Delta(i omega)^H`` with ``<p, Delta'(i omega) q> = 1``, and

    c1 = 1/2 <p, C(Q, Q, conj Q) + 2 B(Q, E(0) Delta(0)^-1 B(Q, conj Q))
                                 + B(conj Q, E(2 i omega) Delta(2 i omega)^-1 B(Q, Q))>

``l1 = Re c1 / omega``; ``d = Re <p, J_mu Q + B(E(0) x0', Q) - i omega sum tau_k' e^{-i omega
tau_k} A_k q>`` with ``x0' = Delta(0)^-1 F_mu``; amplitudes ``2 |q_j| sqrt(|d / (omega l1)|)``.

The stability context is the same count as the compiled kernel's (templates/delay_roots.c.j2,
count_beside_pair): the argument principle for g = det Delta / (lambda^2 + omega^2) on the
lines Re lambda = +-band, steps h_max = min(Y / 16, 0.5 / tau_max) halved where a step
turns the phase by more than 0.5 rad or disagrees with the trapezoidal integral of
Re g'/g, and the exact tail beyond Y = 1.01 max(R, omega) / sin(0.8 pi / (n + 1)). The
vectorized baseline halves and doubles each sample's step locally, as the kernel does; the
loop halves one sample's whole grid (one vectorized grid per sample). A sample
is ok when both lines give the same count (no other root within the band); the line +band
is scanned only when the grid of the line -band needed steps below 1000 band (as in the
kernel: a root of the band forces steps below about 3 band on that line).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np
import scipy.optimize
import sympy
from b1_numpy import Packed

NEWTON_MAX_STEPS = 40
NEWTON_TOL = 1e-13
AXIS_TOL = 1e-8  # the band of the imaginary axis, relative to the rate (the kernel's default)
MAX_HALVINGS = 40
MAX_LEVELS = 48  # step halvings the stepped count allows (the kernel's LEVELS)


def _count_on_line(A: np.ndarray, tau: np.ndarray, omega: np.ndarray, s: np.ndarray):
    """Roots of g = det Delta / (lambda^2 + omega^2) right of Re lambda = s per sample
    (-1: not resolved, a root on the line) and the step of the grid that resolved it.
    A is (N, m+1, n, n), tau (N, m)."""
    N, _, n, _ = A.shape
    damp = np.exp(-s[:, None] * tau)  # |exp(-lambda tau_k)| on the line
    size = np.abs(A[:, 0]) + np.einsum("nk,nkij->nij", damp, np.abs(A[:, 1:]))
    bound = np.abs(s) + size.sum(axis=2).max(axis=1)
    y_end = 1.01 * np.maximum(bound, omega) / np.sin(0.8 * np.pi / (n + 1))
    h_max = np.minimum(y_end / 16, 0.5 / tau.max(axis=1))
    counts = np.full(N, -1)
    used = np.zeros(N)
    todo = np.arange(N)
    eye = np.eye(n)
    ng = n - 2
    for halving in range(MAX_HALVINGS):
        if len(todo) == 0:
            break
        h = h_max[todo] / 2.0**halving
        steps = int(np.ceil(np.max(y_end[todo] / h)))
        lam = s[todo, None] + 1j * h[:, None] * np.arange(steps + 1)  # (T, J+1)
        e = np.exp(-lam[:, :, None] * tau[todo, None, :])  # (T, J+1, m)
        blocks = A[todo, 1:]
        delta = lam[..., None, None] * eye - A[todo, None, 0]
        delta = delta - np.einsum("tjk,tkab->tjab", e, blocks)
        dprime = eye + np.einsum("tjk,tk,tkab->tjab", e, tau[todo], blocks)
        det = np.linalg.det(delta)
        log_d = np.trace(np.linalg.solve(delta, dprime), axis1=2, axis2=3)
        pair = lam**2 + omega[todo, None] ** 2
        g = det / pair
        ratio = (log_d - 2 * lam / pair).real
        turn = np.angle(g[:, 1:] / g[:, :-1])
        predicted = 0.5 * h[:, None] * (ratio[:, 1:] + ratio[:, :-1])
        smooth = np.all(
            (np.abs(turn) <= 0.5) & (np.abs(turn - predicted) <= 0.05 + 0.1 * np.abs(turn)),
            axis=1,
        )
        at_end = np.arctan2(h * steps, s[todo])
        turned = turn.sum(axis=1) + ng * (np.pi / 2 - at_end)
        turned -= np.angle(g[:, -1] * np.exp(-1j * ng * at_end))
        count = 0.5 * (ng - 2 * turned / np.pi)
        whole = np.round(count)
        good = smooth & (np.abs(count - whole) < 0.25)
        counts[todo[good]] = whole[good]
        used[todo[good]] = h[good]
        todo = todo[~smooth]
    return counts, used


def _count_stepped(A: np.ndarray, tau: np.ndarray, omega: np.ndarray, s: np.ndarray):
    """The same count with the kernel's step control, per sample: each sample advances by
    its own step h_max / 2^level, halved where a step fails the two tests and doubled
    again after a kept step (so a sample that needs short steps near a root takes them
    there only); all samples still on their line move together, one step per pass.
    Returns the counts (-1: not resolved) and the shortest kept step of each sample."""
    N, _, n, _ = A.shape
    damp = np.exp(-s[:, None] * tau)
    size = np.abs(A[:, 0]) + np.einsum("nk,nkij->nij", damp, np.abs(A[:, 1:]))
    bound = np.abs(s) + size.sum(axis=2).max(axis=1)
    y_end = 1.01 * np.maximum(bound, omega) / np.sin(0.8 * np.pi / (n + 1))
    h_max = np.minimum(y_end / 16, 0.5 / tau.max(axis=1))
    eye = np.eye(n)
    ng = n - 2

    def g_and_slope(idx: np.ndarray, lam: np.ndarray):
        e = np.exp(-lam[:, None] * tau[idx])
        blocks = A[idx, 1:]
        delta = lam[:, None, None] * eye - A[idx, 0] - np.einsum("tk,tkab->tab", e, blocks)
        dprime = eye + np.einsum("tk,tk,tkab->tab", e, tau[idx], blocks)
        pair = lam**2 + omega[idx] ** 2
        log_d = np.trace(np.linalg.solve(delta, dprime), axis1=1, axis2=2)
        return np.linalg.det(delta) / pair, (log_d - 2 * lam / pair).real

    y, turned, level = np.zeros(N), np.zeros(N), np.zeros(N, dtype=int)
    shortest = h_max.copy()
    g0, slope0 = g_and_slope(np.arange(N), s.astype(complex))
    resolved = np.isfinite(g0) & (g0 != 0)
    y_stop = y_end * (1 - 1e-12)
    active = np.flatnonzero(resolved & (y < y_stop))
    while len(active):
        h = h_max[active] / 2.0 ** level[active]
        g1, slope1 = g_and_slope(active, s[active] + 1j * (y[active] + h))
        turn = np.angle(g1 / g0[active])
        predicted = 0.5 * h * (slope0[active] + slope1)
        smooth = (np.abs(turn) <= 0.5) & (np.abs(turn - predicted) <= 0.05 + 0.1 * np.abs(turn))
        kept, refused = active[smooth], active[~smooth]
        turned[kept] += turn[smooth]
        y[kept] += h[smooth]
        shortest[kept] = np.minimum(shortest[kept], h[smooth])
        g0[kept], slope0[kept] = g1[smooth], slope1[smooth]
        level[kept] = np.maximum(level[kept] - 1, 0)
        level[refused] += 1
        resolved[refused[level[refused] >= MAX_LEVELS]] = False  # a root on the line
        active = active[resolved[active] & (y[active] < y_stop[active])]
    at_end = np.arctan2(y, s)
    turned += ng * (np.pi / 2 - at_end) - np.angle(g0 * np.exp(-1j * ng * at_end))
    count = 0.5 * (ng - 2 * turned / np.pi)
    whole = np.round(count)
    good = resolved & (np.abs(count - whole) < 0.25)
    return np.where(good, whole, -1).astype(int), shortest


def unstable_count(
    A: np.ndarray, tau: np.ndarray, omega: np.ndarray, stepped: bool = True
) -> np.ndarray:
    """Roots right of the imaginary axis besides the pair +-i omega (-1 where another root
    lies within the band of the axis or the count is not resolved). ``stepped``: the step
    control of the kernel per sample (the vectorized baseline); otherwise one grid per
    sample, halved as a whole where it fails (the per-sample loop, where one vectorized
    grid is the cheaper way in numpy)."""
    count_on_line = _count_stepped if stepped else _count_on_line
    norms = np.sqrt(np.einsum("nkij,nkij->n", A, A))
    band = AXIS_TOL * np.maximum(norms, omega)
    # As in the kernel (spectrum_context): the line -band first; a root of the band would
    # have forced steps below about 3 band there, so only samples whose scan needed steps
    # below 1000 band scan the line +band.
    wide, used = count_on_line(A, tau, omega, -band)
    right = wide.copy()
    again = ~(used > 1e3 * band)
    if again.any():
        right[again] = count_on_line(A[again], tau[again], omega[again], band[again])[0]
    return np.where((right >= 0) & (right == wide), right, -1)


def prediction(solve, nominal: np.ndarray, mu_index: int, z0: np.ndarray) -> np.ndarray:
    """dz/dp at the nominal Hopf point z0, by central differences of points solved at
    p +- delta e_k (outside the timing): the first-order start the kernel's warm start
    uses (templates/delay_locate.c.j2, prepare_prediction; mu is an unknown)."""
    dz = np.zeros((len(nominal), len(z0)))
    for k in range(len(nominal)):
        if k == mu_index:
            continue
        delta = 1e-6 * (abs(nominal[k]) if nominal[k] != 0 else 1.0)
        plus, minus = nominal.copy(), nominal.copy()
        plus[k] += delta
        minus[k] -= delta
        dz[k] = (solve(plus) - solve(minus)) / (2 * delta)
    return dz


def predicted_starts(z0, dz, nominal, params, mu_index) -> np.ndarray:
    """z0 + dz . (p - p0) per sample, kept (as in the kernel) when it moves no unknown by
    more than a fifth of its size (1 for an unknown that is zero at z0)."""
    dp = params - nominal
    dp[:, mu_index] = 0.0
    shift = dp @ dz
    size = np.where(z0 != 0, np.abs(z0), 1.0)
    keep = np.max(np.abs(shift) / size, axis=1) <= 0.2
    return z0 + np.where(keep[:, None], shift, 0.0)


@dataclass(frozen=True)
class DelayModel:
    """A delay model as sympy: states, parameters, right-hand sides in (x, z_k, p), delays."""

    states: tuple[sympy.Symbol, ...]
    parameters: tuple[sympy.Symbol, ...]
    delayed: tuple[tuple[sympy.Symbol, ...], ...]
    rhs: tuple[sympy.Expr, ...]
    delays: tuple[sympy.Expr, ...]
    bifurcation: str


class DelaySymbols:
    """The symbolic pieces both baselines lambdify."""

    def __init__(self, dm: DelayModel):
        x, p = list(dm.states), list(dm.parameters)
        n, m = len(x), len(dm.delays)
        self.n, self.m = n, m
        self.mu_index = [str(s) for s in p].index(dm.bifurcation)
        mu = p[self.mu_index]
        stacked = x + [s for block in dm.delayed for s in block]
        at_eq = {z: x[i] for block in dm.delayed for i, z in enumerate(block)}
        F = sympy.Matrix(dm.rhs)
        Js = F.jacobian(stacked)
        self.xp = x + p
        self.F = F.xreplace(at_eq)
        self.blocks = [Js[:, k * n : (k + 1) * n].xreplace(at_eq) for k in range(m + 1)]
        self.F_mu = F.diff(mu).xreplace(at_eq)
        self.J_mu = Js.diff(mu).xreplace(at_eq)
        self.tau = sympy.Matrix(dm.delays)
        self.tau_mu = self.tau.diff(mu)
        size = n * (m + 1)
        self.U = [sympy.Symbol(f"bench_U{i}") for i in range(size)]
        self.V = [sympy.Symbol(f"bench_V{i}") for i in range(size)]
        self.W = [sympy.Symbol(f"bench_W{i}") for i in range(size)]
        self.B, self.C = self._forms(F, stacked, at_eq)
        # the augmented Hopf system and its Jacobian in (x, mu, v_r, v_i, omega)
        vr = sympy.Matrix([sympy.Symbol(f"bench_vr{i}") for i in range(n)])
        vi = sympy.Matrix([sympy.Symbol(f"bench_vi{i}") for i in range(n)])
        c = sympy.Matrix([sympy.Symbol(f"bench_c{i}") for i in range(n)])
        om = sympy.Symbol("bench_omega")
        A0 = self.blocks[0]
        re = -om * vi - A0 * vr
        im = om * vr - A0 * vi
        for k in range(m):
            cos, sin = sympy.cos(om * self.tau[k]), sympy.sin(om * self.tau[k])
            re -= self.blocks[k + 1] * (cos * vr + sin * vi)
            im -= self.blocks[k + 1] * (cos * vi - sin * vr)
        G = sympy.Matrix([*self.F, *re, *im, (c.T * vr)[0] - 1, (c.T * vi)[0]])
        unknowns = x + [mu] + list(vr) + list(vi) + [om]
        self.system_args = self.xp + list(vr) + list(vi) + [om] + list(c)
        self.G = G
        self.DG = G.jacobian(unknowns)

    def _forms(self, F, stacked, at_eq):
        """B(U, V) and C(U, V, W) on the stacked arguments, non-zero entries only."""
        n = self.n
        b_terms: list[list] = [[] for _ in range(n)]
        c_terms: list[list] = [[] for _ in range(n)]
        for i in range(n):
            deps = [a for a, s in enumerate(stacked) if s in F[i].free_symbols]
            for pos, a in enumerate(deps):
                da = F[i].diff(stacked[a])
                for pos_b, b in enumerate(deps[pos:], start=pos):
                    dab = da.diff(stacked[b])
                    if dab == 0:
                        continue
                    pairs = {(a, b), (b, a)}
                    b_terms[i].append(
                        dab.xreplace(at_eq) * sum(self.U[r] * self.V[s] for r, s in pairs)
                    )
                    for c in deps[pos_b:]:
                        dabc = dab.diff(stacked[c])
                        if dabc == 0:
                            continue
                        triples = set(itertools.permutations((a, b, c)))
                        term = sum(self.U[r] * self.V[s] * self.W[t] for r, s, t in triples)
                        c_terms[i].append(dabc.xreplace(at_eq) * term)
        return [sympy.Add(*t) for t in b_terms], [sympy.Add(*t) for t in c_terms]


def _cols(a: np.ndarray) -> list[np.ndarray]:
    return [a[:, i] for i in range(a.shape[1])]


def _dot(p: np.ndarray, y: np.ndarray) -> np.ndarray:
    """<p, y> = sum conj(p_i) y_i per sample."""
    return np.einsum("ni,ni->n", p.conj(), y)


class VectorizedDelayHopf:
    """The numpy baseline: every step on arrays of samples (batched solves, einsum)."""

    def __init__(self, ds: DelaySymbols):
        self.ds = ds
        n, m = ds.n, ds.m
        size = n * (m + 1)
        xp = ds.xp
        self.F_mu = Packed(ds.F_mu, xp, (n,))
        self.blocks = Packed([e for blk in ds.blocks for e in blk], xp, (m + 1, n, n))
        self.J_mu = Packed(ds.J_mu, xp, (n, size))
        self.tau = Packed(list(ds.tau) + list(ds.tau_mu), ds.xp, (2, m))
        self.B = Packed(ds.B, xp + ds.U + ds.V, (n,), complex)
        self.C = Packed(ds.C, xp + ds.U + ds.V + ds.W, (n,), complex)
        self.G = Packed(ds.G, ds.system_args, (3 * n + 2,))
        self.DG = Packed(ds.DG, ds.system_args, (3 * n + 2, 3 * n + 2))
        self.start: np.ndarray | None = None
        self.c: np.ndarray | None = None

    def prepare(self, nominal: np.ndarray, start: np.ndarray) -> None:
        """``start`` = (x, mu, v_r, v_i, omega) near the nominal Hopf point; solved once
        outside the timing so every sample starts from the nominal solution."""
        n = self.ds.n
        self.c = start[n + 1 : 2 * n + 1] / np.dot(
            start[n + 1 : 2 * n + 1], start[n + 1 : 2 * n + 1]
        )
        self.start = start.astype(float)
        ok, z = self._newton(nominal[None, :].astype(float))
        if not ok[0]:
            raise RuntimeError("numpy baseline: Newton failed at the nominal parameters")
        self.start = z[0]
        self.nominal = nominal.astype(float)

        def solve(p):
            return self._newton(p[None, :])[1][0]

        self.dz = prediction(solve, self.nominal, self.ds.mu_index, self.start)

    def _newton(self, p: np.ndarray, starts: np.ndarray | None = None):
        n, N, k = self.ds.n, len(p), self.ds.mu_index
        z = np.tile(self.start, (N, 1)) if starts is None else starts.copy()
        p = p.copy()
        c = np.tile(self.c, (N, 1))
        done = np.zeros(N, dtype=bool)
        for _ in range(NEWTON_MAX_STEPS):
            p[:, k] = z[:, n]
            args = _cols(z[:, :n]) + _cols(p) + _cols(z[:, n + 1 :]) + _cols(c)
            G, DG = self.G(args, N), self.DG(args, N)
            with np.errstate(all="ignore"):
                dz = np.linalg.solve(DG, -G[..., None])[..., 0]
            z += dz
            size = np.max(np.abs(dz) / (1.0 + np.abs(z)), axis=1)
            done = size < NEWTON_TOL
            if np.all(done | ~np.isfinite(size)):
                break
        # omega = 0 with mu making Delta(0) v = 0 also solves the system: not a Hopf point
        return done & np.all(np.isfinite(z), axis=1) & (z[:, 3 * n + 1] > 0), z

    def solve(self, params: np.ndarray) -> dict[str, np.ndarray]:
        """All samples at once; ``params`` is (N, m) in model order (mu column ignored)."""
        ds = self.ds
        n, N = ds.n, len(params)
        starts = predicted_starts(self.start, self.dz, self.nominal, params, ds.mu_index)
        ok, z = self._newton(params.astype(float), starts)
        p = params.astype(float, copy=True)
        p[:, ds.mu_index] = z[:, n]
        out = {
            "ok": ok,
            "l1": np.full(N, np.nan),
            "omega": np.full(N, np.nan),
            "critical_value": np.full(N, np.nan),
            "transversality": np.full(N, np.nan),
            "equilibrium": np.full((N, n), np.nan),
            "amplitude": np.full((N, n), np.nan),
            "unstable_count": np.full(N, -1),
        }
        for key, value in self._quantities(z[ok], p[ok]).items():
            out[key][ok] = value
        out["ok"] = ok & (out["unstable_count"] >= 0)
        return out

    def _quantities(self, z: np.ndarray, p: np.ndarray) -> dict[str, np.ndarray]:
        """l1 and the derived quantities at converged Hopf points (rows of z)."""
        ds = self.ds
        n, m, N = ds.n, ds.m, len(z)
        x0, omega = z[:, :n], z[:, 3 * n + 1]
        xp = _cols(x0) + _cols(p)
        A = self.blocks(xp, N)  # (N, m+1, n, n)
        taus = self.tau(xp, N)
        tau, tau_mu = taus[:, 0], taus[:, 1]
        eye = np.eye(n)

        def delta(lam: np.ndarray) -> np.ndarray:
            out = lam[:, None, None] * eye - A[:, 0]
            for k in range(m):
                out = out - A[:, k + 1] * np.exp(-lam * tau[:, k])[:, None, None]
            return out

        iw = 1j * omega
        v = z[:, n + 1 : 2 * n + 1] + 1j * z[:, 2 * n + 1 : 3 * n + 1]
        q = v / np.linalg.norm(v, axis=1)[:, None]
        U, _, _ = np.linalg.svd(delta(iw))
        left = U[:, :, -1]
        dprime = eye + sum(
            tau[:, k, None, None] * A[:, k + 1] * np.exp(-iw * tau[:, k])[:, None, None]
            for k in range(m)
        )
        s = _dot(left, np.einsum("nij,nj->ni", dprime, q))
        pv = left / np.conj(s)[:, None]

        def stack(h: np.ndarray, lam: np.ndarray) -> np.ndarray:
            return np.concatenate(
                [h] + [h * np.exp(-lam * tau[:, k])[:, None] for k in range(m)], axis=1
            )

        Q = stack(q, iw)
        Qb = Q.conj()
        h11 = np.linalg.solve(
            delta(np.zeros(N, complex)), self.B(xp + _cols(Q) + _cols(Qb), N)[..., None]
        )[..., 0]
        h20 = np.linalg.solve(delta(2 * iw), self.B(xp + _cols(Q) + _cols(Q), N)[..., None])[..., 0]
        H11, H20 = stack(h11, np.zeros(N)), stack(h20, 2 * iw)
        total = (
            self.C(xp + _cols(Q) + _cols(Q) + _cols(Qb), N)
            + 2 * self.B(xp + _cols(Q) + _cols(H11), N)
            + self.B(xp + _cols(Qb) + _cols(H20), N)
        )
        l1 = 0.5 * _dot(pv, total).real / omega
        dx = np.linalg.solve(
            delta(np.zeros(N, complex)), self.F_mu(xp, N)[..., None].astype(complex)
        )[..., 0]
        X = stack(dx, np.zeros(N))
        rot = sum(
            (tau_mu[:, k] * np.exp(-iw * tau[:, k]))[:, None]
            * np.einsum("nij,nj->ni", A[:, k + 1], q)
            for k in range(m)
        )
        lam_mu = _dot(
            pv,
            np.einsum("nij,nj->ni", self.J_mu(xp, N), Q)
            + self.B(xp + _cols(X) + _cols(Q), N)
            - iw[:, None] * rot,
        )
        trans = lam_mu.real
        amp = 2 * np.abs(q) * np.sqrt(np.abs(trans / (omega * l1)))[:, None]
        return {
            "unstable_count": unstable_count(A, tau, omega),
            "l1": l1,
            "omega": omega,
            "critical_value": z[:, n],
            "transversality": trans,
            "equilibrium": x0,
            "amplitude": amp,
        }


class LoopDelayHopf:
    """The per-sample baseline: scipy.optimize.fsolve on the augmented system, then numpy
    linear algebra, one sample at a time."""

    def __init__(self, ds: DelaySymbols):
        self.ds = ds
        n = ds.n

        def fn(expr, args):
            return sympy.lambdify(args, expr, modules="numpy", cse=True, dummify=True)

        self.G = fn(list(ds.G), ds.system_args)
        self.blocks = fn([blk.tolist() for blk in ds.blocks], ds.xp)
        self.F_mu = fn(list(ds.F_mu), ds.xp)
        self.J_mu = fn(ds.J_mu.tolist(), ds.xp)
        self.tau = fn([list(ds.tau), list(ds.tau_mu)], ds.xp)
        self.B = fn(ds.B, ds.xp + ds.U + ds.V)
        self.C = fn(ds.C, ds.xp + ds.U + ds.V + ds.W)
        self.start: np.ndarray | None = None
        self.c: np.ndarray | None = None
        self.n = n

    def prepare(self, nominal: np.ndarray, start: np.ndarray) -> None:
        n = self.n
        self.c = start[n + 1 : 2 * n + 1] / np.dot(
            start[n + 1 : 2 * n + 1], start[n + 1 : 2 * n + 1]
        )
        self.start = start.astype(float)
        ok, z = self._root(nominal.astype(float))
        if not ok:
            raise RuntimeError("scipy loop baseline: fsolve failed at the nominal parameters")
        self.start = z
        self.nominal = nominal.astype(float)

        def solve(p):  # tight, so that the differences resolve the derivative
            return self._root(p, xtol=1e-13)[1]

        self.dz = prediction(solve, self.nominal, self.ds.mu_index, self.start)

    def _root(self, p: np.ndarray, start: np.ndarray | None = None, xtol: float = 1.49012e-08):
        n, k = self.n, self.ds.mu_index

        def residual(z):
            p[k] = z[n]
            return np.array(self.G(*z[:n], *p, *z[n + 1 :], *self.c), dtype=float)

        # scipy's default tolerance, as most users leave it
        z0 = self.start if start is None else start
        z, _, flag, _ = scipy.optimize.fsolve(residual, z0, full_output=True, xtol=xtol)
        return flag == 1 and z[3 * n + 1] > 0, z

    def solve_one(self, params: np.ndarray) -> dict:
        ds, n, m = self.ds, self.n, self.ds.m
        p = params.astype(float, copy=True)
        start = predicted_starts(self.start, self.dz, self.nominal, p[None, :], ds.mu_index)
        ok, z = self._root(p, start[0])
        if not ok:
            return {"ok": False}
        p[ds.mu_index] = z[n]
        x0, omega = z[:n], z[3 * n + 1]
        args = (*x0, *p)
        A = np.array(self.blocks(*args), dtype=float)
        tau, tau_mu = (np.array(t, dtype=float) for t in self.tau(*args))
        eye = np.eye(n)

        def delta(lam):
            return lam * eye - A[0] - sum(A[k + 1] * np.exp(-lam * tau[k]) for k in range(m))

        def stack(h, lam):
            return np.concatenate([h] + [h * np.exp(-lam * tau[k]) for k in range(m)])

        iw = 1j * omega
        v = z[n + 1 : 2 * n + 1] + 1j * z[2 * n + 1 : 3 * n + 1]
        q = v / np.linalg.norm(v)
        U, _, _ = np.linalg.svd(delta(iw))
        dprime = eye + sum(tau[k] * A[k + 1] * np.exp(-iw * tau[k]) for k in range(m))
        pv = U[:, -1] / np.conj(np.vdot(U[:, -1], dprime @ q))
        Q = stack(q, iw)
        Qb = Q.conj()

        def B(u, w):
            return np.array(self.B(*args, *u, *w), dtype=complex)

        h11 = np.linalg.solve(delta(0.0), B(Q, Qb))
        h20 = np.linalg.solve(delta(2 * iw), B(Q, Q))
        total = (
            np.array(self.C(*args, *Q, *Q, *Qb), dtype=complex)
            + 2 * B(Q, stack(h11, 0.0))
            + B(Qb, stack(h20, 2 * iw))
        )
        l1 = 0.5 * np.vdot(pv, total).real / omega
        dx = np.linalg.solve(delta(0.0), np.array(self.F_mu(*args), dtype=float))
        rot = sum(tau_mu[k] * np.exp(-iw * tau[k]) * (A[k + 1] @ q) for k in range(m))
        jq = np.array(self.J_mu(*args), dtype=float) @ Q
        trans = np.vdot(pv, jq + B(stack(dx, 0.0), Q) - iw * rot).real
        count = int(unstable_count(A[None], tau[None], np.array([omega]), stepped=False)[0])
        return {
            "ok": count >= 0,
            "unstable_count": count,
            "l1": l1,
            "omega": omega,
            "critical_value": z[n],
            "transversality": trans,
            "equilibrium": x0,
            "amplitude": 2 * np.abs(q) * np.sqrt(abs(trans / (omega * l1))),
        }

    def solve(self, params: np.ndarray) -> dict[str, np.ndarray]:
        N, n = len(params), self.n
        out = {
            "ok": np.zeros(N, dtype=bool),
            "l1": np.full(N, np.nan),
            "omega": np.full(N, np.nan),
            "critical_value": np.full(N, np.nan),
            "transversality": np.full(N, np.nan),
            "equilibrium": np.full((N, n), np.nan),
            "amplitude": np.full((N, n), np.nan),
            "unstable_count": np.full(N, -1),
        }
        for i in range(N):
            r = self.solve_one(params[i])
            if r["ok"]:
                for key, value in r.items():
                    out[key][i] = value
        return out
