"""After a failed Newton search: is there a Hopf point along the parameter at all?

``lyacomp eval`` calls :func:`scan_for_hopf` when the status is ``no_convergence``, so that
the message says what is true before it suggests a better starting guess. The scan follows
the equilibrium in the bifurcation parameter (Newton on F = 0 with the compiled right-hand
side and Jacobian, each point started from the previous one) and watches the rightmost
complex eigenvalue pair (numpy.linalg.eigvals) change the sign of its real part.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from ..runtime.evaluator import PREFIX, Evaluator

#: Number of parameter values in the scan, and its half-width relative to max(1, |guess|).
SCAN_POINTS = 401
SCAN_HALF_WIDTH = 1.0


@dataclass(frozen=True)
class ScanOutcome:
    """What the scan saw over ``[lo, hi]``: values of the bifurcation parameter where the
    pair crosses (midpoints of the brackets), and how many points had an equilibrium."""

    parameter: str
    lo: float
    hi: float
    crossings: tuple[float, ...]
    solved: int
    points: int

    def message(self) -> str:
        """One line for the user."""
        where = f"a scan of {self.parameter} over [{self.lo:.6g}, {self.hi:.6g}]"
        if self.crossings:
            near = ", ".join(f"{c:.6g}" for c in self.crossings[:5])
            return (
                f"{where} finds the eigenvalue pair crossing the imaginary axis near "
                f"{self.parameter} = {near}: a Hopf point exists there; start from it "
                f"(--set {self.parameter}={self.crossings[0]:.6g})"
            )
        if self.solved == 0:
            return (
                f"{where} finds no equilibrium from the state guesses; give state guesses "
                "(--guess STATE=VALUE) near an equilibrium of the model"
            )
        return (
            f"{where} (equilibrium found at {self.solved} of {self.points} values) finds no "
            "complex eigenvalue pair crossing the imaginary axis: there is no Hopf point "
            "near this guess, and a better starting guess will not help unless one exists "
            "outside the scanned range"
        )


def _newton(ev: Evaluator, x: np.ndarray, p: np.ndarray) -> np.ndarray | None:
    ffi, n = ev.ffi, len(ev.states)
    rhs = getattr(ev.lib, f"{PREFIX}_rhs")
    jac = getattr(ev.lib, f"{PREFIX}_jacobian")
    f = np.empty(n)
    j = np.empty(n * n)
    c_p = ffi.cast("double *", ffi.from_buffer(p))
    for _ in range(60):
        c_x = ffi.cast("double *", ffi.from_buffer(x))
        rhs(c_x, c_p, ffi.cast("double *", ffi.from_buffer(f)))
        jac(c_x, c_p, ffi.cast("double *", ffi.from_buffer(j)))
        if not (np.all(np.isfinite(f)) and np.all(np.isfinite(j))):
            return None
        a = j.reshape(n, n)
        scale = 1.0 + np.max(np.abs(a)) * (1.0 + np.max(np.abs(x)))
        if np.max(np.abs(f)) <= 1e-12 * scale:
            return x
        try:
            step = np.linalg.solve(a, -f)
        except np.linalg.LinAlgError:
            return None
        x = x + step
    return None


def _rightmost_pair(ev: Evaluator, x: np.ndarray, p: np.ndarray) -> float:
    """Real part of the rightmost complex pair at the equilibrium x (NaN if none)."""
    ffi, n = ev.ffi, len(ev.states)
    j = np.empty(n * n)
    getattr(ev.lib, f"{PREFIX}_jacobian")(
        ffi.cast("double *", ffi.from_buffer(x)),
        ffi.cast("double *", ffi.from_buffer(p)),
        ffi.cast("double *", ffi.from_buffer(j)),
    )
    eig = np.linalg.eigvals(j.reshape(n, n))
    size = max(float(np.max(np.abs(eig))), np.finfo(float).tiny)
    pair = eig[np.abs(eig.imag) > 1e-8 * size]
    return float(np.max(pair.real)) if pair.size else math.nan


def scan_for_hopf(ev: Evaluator, values: Mapping[str, float]) -> ScanOutcome | None:
    """Scan the bifurcation parameter around its starting guess (None without one, and for
    delay models: their spectrum is not the eigenvalues of one matrix)."""
    mu = ev.bifurcation
    if mu is None or ev.model.delays:
        return None
    params = {**ev.nominal, **values}
    if mu not in values and ev.model.guess is not None:
        params[mu] = float(ev.model.guess)
    centre = float(params[mu])
    half = SCAN_HALF_WIDTH * max(1.0, abs(centre))
    grid = np.linspace(centre - half, centre + half, SCAN_POINTS)
    start = np.array(list(ev.state_guess.values()), float)
    index = ev.parameters.index(mu)
    crossings: list[float] = []
    solved = attempted = 0
    # two sweeps out from the guess, each following the equilibrium from the previous value
    for sweep in (grid[SCAN_POINTS // 2 :], grid[SCAN_POINTS // 2 :: -1]):
        x, last_r, last_mu = start.copy(), math.nan, math.nan
        for value in sweep:
            p = np.array([params[name] for name in ev.parameters], float)
            p[index] = value
            attempted += 1
            found = _newton(ev, x.copy(), p)
            if found is None:
                x, last_r = start.copy(), math.nan
                continue
            solved += 1
            x = found
            r = _rightmost_pair(ev, x, p)
            if math.isfinite(r) and math.isfinite(last_r) and (r > 0) != (last_r > 0):
                crossings.append(0.5 * (value + last_mu))
            last_r, last_mu = r, value
    crossings.sort(key=lambda c: abs(c - centre))
    return ScanOutcome(
        mu,
        float(grid[0]),
        float(grid[-1]),
        tuple(crossings),
        solved,
        2 * len(grid[SCAN_POINTS // 2 :]),
    )
