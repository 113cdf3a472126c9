"""The simulation check for delay models (``x(t - tau)`` terms).

Same plan as :mod:`lyacomp.studies.verify` (and the same predictions from the compiled
evaluator), with :func:`lyacomp.studies.delay_sim.integrate_delay` in place of DOP853. The
pieces that depend on the delays are recomputed here from ``model.symbolic()`` with
numpy/scipy, sharing no code with the generated C:

- the equilibrium solves ``F(x, x, ..., x) = 0`` (every delayed state equal to ``x``);
- the critical root ``lambda`` of ``det Delta(lambda) = 0``,
  ``Delta(lambda) = lambda I - A0 - sum_k A_k exp(-lambda tau_k)``, is followed by Newton
  from ``i omega`` at the shifted parameter value, with ``Delta(lambda) q = 0``;
- a run starts from the history ``x0 + 2 Re(z q exp(lambda theta))``, ``theta`` in
  ``[-tau_max, 0]``: the critical eigenfunction of the linearization, scaled to the
  normal-form radius ``|z|``;
- the radius of a state is read from the state and its rate, ``x - x0 ~ 2 Re(z q)``,
  ``x' / omega ~ 2 Re(i z q)`` (least squares for ``z``); a delay model's exact projection
  needs the whole history segment, this estimate needs only the present.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import sympy

from lyacomp.errors import StudyError
from lyacomp.studies.delay_sim import DelaySolution, integrate_delay
from lyacomp.studies.verify import (
    ESCAPE_RADII,
    GREW_FACTOR,
    RETURN_FRACTION,
    SUBCRITICAL_INNER,
    SUBCRITICAL_OUTER,
    WINDOW_PERIODS,
    NumericModel,
    OffsetPlan,
    OffsetRun,
    find_equilibrium,
    measure_windows,
    predicted_run,
    record_run,
    run_integration,
    settled_outcome,
    start_label,
)

#: Tolerances of the delay runs: relative, and absolute as a fraction of the cycle size.
#: Looser than the ODE runs' (the integrator is pure Python); the measurement needs 1e-4.
RTOL = 1e-9
ATOL_FRACTION = 1e-8
#: Newton on the critical root: iterations and relative step size that counts as converged.
ROOT_STEPS = 50
ROOT_TOL = 1e-13


@dataclass(frozen=True)
class NumericDelayModel:
    """A delay model at fixed parameter values: delays, right-hand side, linearization."""

    state_names: tuple[str, ...]
    delays: tuple[float, ...]
    rhs: Callable[[float, np.ndarray, tuple[np.ndarray, ...]], np.ndarray]
    blocks: Callable[[np.ndarray], np.ndarray]
    """``blocks(x)``: ``A0, A_1, ..., A_m`` at the equilibrium ``x`` (shape (m+1, n, n))."""

    def at_equilibrium(self) -> NumericModel:
        """``F(x, x, ..., x)`` and its Jacobian ``A0 + sum A_k``, for the equilibrium solve."""
        m = len(self.delays)
        return NumericModel(
            self.state_names,
            lambda t, x: self.rhs(t, x, (x,) * m),
            lambda x: self.blocks(x).sum(axis=0),
        )

    def delta(self, x0: np.ndarray, lam: complex) -> np.ndarray:
        """The characteristic matrix ``Delta(lam)`` at the equilibrium ``x0``."""
        blocks = self.blocks(x0)
        out = lam * np.eye(len(x0)) - blocks[0]
        for tau, block in zip(self.delays, blocks[1:], strict=True):
            out = out - block * np.exp(-lam * tau)
        return out

    def delta_prime(self, x0: np.ndarray, lam: complex) -> np.ndarray:
        """``Delta'(lam) = I + sum tau_k A_k exp(-lam tau_k)``."""
        blocks = self.blocks(x0)
        out = np.eye(len(x0), dtype=complex)
        for tau, block in zip(self.delays, blocks[1:], strict=True):
            out = out + tau * block * np.exp(-lam * tau)
        return out


def numeric_delay_model(model: Any, values: Mapping[str, float]) -> NumericDelayModel:
    """Lambdify a delay model's right-hand side and linearization with all parameters fixed."""
    sym = model.symbolic()
    missing = [name for name in model.parameter_names if name not in values]
    if missing:
        raise StudyError(f"no value for parameter(s) {', '.join(missing)}")
    subs = {
        s: sympy.Float(float(values[name]))
        for s, name in zip(sym.parameters, model.parameter_names, strict=True)
    }
    delays = tuple(float(sympy.sympify(tau).xreplace(subs)) for tau in sym.delays)
    if not all(tau > 0 and math.isfinite(tau) for tau in delays):
        raise StudyError(
            f"the delays are {delays} at the simulated parameter values; they must be positive"
        )
    states = list(sym.states)
    lagged = [s for block in sym.lagged for s in block]
    rhs = sympy.Matrix([sympy.sympify(e).xreplace(subs) for e in sym.rhs])
    at_eq = {z: states[j] for block in sym.lagged for j, z in enumerate(block)}
    blocks = [rhs.jacobian(states).xreplace(at_eq)]
    blocks += [rhs.jacobian(list(block)).xreplace(at_eq) for block in sym.lagged]
    # math-module code is faster than numpy on the scalars the integrator passes;
    # dummify keeps user names harmless
    f = sympy.lambdify(states + lagged, list(rhs), modules="math", dummify=True)
    j = sympy.lambdify(states, [b.tolist() for b in blocks], modules="math", dummify=True)

    def rhs_fn(_t: float, x: np.ndarray, delayed: tuple[np.ndarray, ...]) -> np.ndarray:
        return np.array(f(*x, *(v for past in delayed for v in past)), dtype=float)

    def blocks_fn(x: np.ndarray) -> np.ndarray:
        return np.array(j(*x), dtype=float)

    return NumericDelayModel(tuple(model.state_names), delays, rhs_fn, blocks_fn)


def critical_root(
    ndm: NumericDelayModel, x0: np.ndarray, omega: float
) -> tuple[complex, np.ndarray, np.ndarray]:
    """The root ``lambda`` of ``det Delta`` nearest ``i omega`` (Newton on
    ``Delta(lambda) q = 0, c^H q = 1``) with ``q`` (``<q, q> = 1``) and ``p``
    (``Delta(lambda)^H p = 0``, ``<p, Delta'(lambda) q> = 1``)."""
    n = len(x0)
    lam = 1j * omega
    _, _, vh = np.linalg.svd(ndm.delta(x0, lam))
    q = vh[-1].conj()
    c = q / np.vdot(q, q)
    for _ in range(ROOT_STEPS):
        # rows: Delta(lam) q = 0 and <c, q> = 1; unknowns (q, lam)
        jac = np.zeros((n + 1, n + 1), dtype=complex)
        jac[:n, :n] = ndm.delta(x0, lam)
        jac[:n, n] = ndm.delta_prime(x0, lam) @ q
        jac[n, :n] = c.conj()
        res = np.concatenate([ndm.delta(x0, lam) @ q, [np.vdot(c, q) - 1]])
        step = np.linalg.solve(jac, -res)
        q, lam = q + step[:n], lam + step[n]
        if abs(step[n]) <= ROOT_TOL * max(1.0, abs(lam)) and np.linalg.norm(step[:n]) <= ROOT_TOL:
            break
    else:
        raise StudyError(
            "could not follow the critical root of the delay equation past onset; "
            "try a smaller offset (--offset) or growth"
        )
    q = q / np.linalg.norm(q)
    u, _, _ = np.linalg.svd(ndm.delta(x0, lam))
    p = u[:, -1]
    p = p / np.conj(np.vdot(p, ndm.delta_prime(x0, lam) @ q))
    return complex(lam), q, p


def radius_estimator(q: np.ndarray, omega: float) -> Callable[[np.ndarray, np.ndarray], float]:
    """``|z|`` from ``x - x0`` and ``x'`` by least squares on ``x - x0 = 2 Re(z q)``,
    ``x' / omega = 2 Re(i z q)`` (the linear oscillation on the critical eigenspace)."""
    qr, qi = q.real, q.imag
    design = 2 * np.block([[qr[:, None], -qi[:, None]], [-qi[:, None], -qr[:, None]]])
    solve = np.linalg.pinv(design)

    def radius(dx: np.ndarray, rate: np.ndarray) -> float:
        a, b = solve @ np.concatenate([dx, rate / omega])
        return math.hypot(a, b)

    return radius


def _integrate(ndm, history, t_end: float, scale: float, stop=None) -> DelaySolution:
    return run_integration(
        lambda: integrate_delay(
            ndm.rhs,
            ndm.delays,
            history,
            (0.0, t_end),
            rtol=RTOL,
            atol=ATOL_FRACTION * scale,
            stop=stop,
        ),
        t_end,
    )


def simulate_delay_offset(model: Any, res: Any, plan: OffsetPlan) -> OffsetRun:
    """The delay-model runs at one offset (``plan``, set up by
    :func:`lyacomp.studies.verify.check_by_simulation`): the settled cycle (supercritical)
    or the two runs that bracket the unstable cycle (subcritical)."""
    ndm = numeric_delay_model(model, plan.values)
    guess = np.array([res.equilibrium[s] for s in ndm.state_names], float)
    eq = find_equilibrium(ndm.at_equilibrium(), guess)
    omega = res.omega
    lam, q, _ = critical_root(ndm, eq, omega)
    leg, w = predicted_run(res, plan, eq, q)
    radius = 2 * w
    period, settle = plan.period, plan.settle
    reference = int(np.argmax(plan.predicted))
    estimate = radius_estimator(q, omega)

    def history(fraction: float):
        def phi(s: float) -> np.ndarray:
            return eq + 2 * fraction * w * np.real(q * np.exp(lam * s))

        return phi

    def stop(returning: bool):
        def condition(_t: float, x: np.ndarray, rate: np.ndarray) -> str | None:
            if float(np.linalg.norm(x - eq)) > ESCAPE_RADII * radius:
                return "escaped"
            if returning and estimate(x - eq, rate) < RETURN_FRACTION * w:
                return "returned"
            return None

        return condition

    if plan.criticality == "supercritical":
        t_end = settle + 2 * WINDOW_PERIODS * period
        sol = _integrate(ndm, history(plan.start), t_end, radius, stop(False))
        meas = measure_windows(sol, settle, period, reference) if sol.status == 0 else None
        record_run(leg, start_label(plan.start), plan.start, settled_outcome(meas), sol, period)
        leg.measured = meas
        return leg

    for label, fraction in (("inside", SUBCRITICAL_INNER), ("outside", SUBCRITICAL_OUTER)):
        sol = _integrate(ndm, history(fraction), 3 * settle, radius, stop(True))
        if sol.status == 1:
            outcome = sol.stopped_by
        else:
            tail = np.linspace(sol.t[-1] - 2 * period, sol.t[-1], 200)
            xs = sol.sol(tail).T
            rates = np.array(
                [
                    ndm.rhs(s, x, tuple(sol.sol(s - tau) for tau in ndm.delays))
                    for s, x in zip(tail, xs, strict=True)
                ]
            )
            z = np.array([estimate(x - eq, r) for x, r in zip(xs, rates, strict=True)]) / w
            outcome = "grew" if z.mean() > GREW_FACTOR * fraction else "stayed"
        record_run(leg, label, fraction, outcome, sol, period)
    return leg
