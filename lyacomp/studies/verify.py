"""Check the compiled Hopf predictions by direct numerical integration.

The model is integrated with scipy's DOP853 (explicit, eighth order, tight
tolerances) a small distance past onset on the side where the predicted cycle
lives. Only the onset data (critical value, frequency, transversality, l1,
amplitude coefficients) come from the compiled evaluator; the equilibrium at the
shifted parameter value and the critical eigenvector that sets the starting point
are recomputed here from ``model.symbolic()`` with numpy/scipy, so the check
shares no code with the generated C.

- Supercritical: start inside the predicted cycle, integrate until the radial
  transient has died out (it decays like ``exp(-2|d (mu - mu0)| t)``), then measure
  the amplitude of every state and the period and put them beside
  ``K_j * sqrt(|mu - mu0|)`` and ``2*pi/omega``. Then the same at CLOSER_FRACTION of the
  offset, and both measurements extrapolated to the onset
  (:mod:`lyacomp.studies.verify_onset`): the extrapolated ``K_j`` and period are the
  numbers the verdict compares, free of the O(offset) bias of a single run.
- Subcritical: the predicted cycle is unstable. Start just inside it (the
  trajectory must return to the equilibrium) and just outside it (it must leave the
  neighbourhood). Together the two runs bracket the predicted amplitude.

This is a local, near-onset check; it says nothing about what happens far from the
equilibrium.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any, TypeVar

import numpy as np
import sympy

from lyacomp.errors import StudyError
from lyacomp.studies.verify_onset import OnsetFit, extrapolate_to_onset

#: What an integration returns (scipy's OdeResult or a DelaySolution).
S = TypeVar("S")

#: Progress notes (the CLI shows them on a terminal only): a run can take seconds.
progress_log = logging.getLogger("lyacomp.progress")

#: Ratio of the equilibrium's growth rate to the frequency used by default to pick
#: how far past onset to simulate: ``|d * (mu - mu0)| = growth * omega``.
DEFAULT_GROWTH = 0.003
#: ... but never farther from onset than this fraction of |mu0| (when mu0 != 0): a model
#: whose eigenvalues cross slowly would otherwise be simulated far outside the range
#: where the near-onset predictions hold.
MAX_RELATIVE_OFFSET = 0.01

#: Integrator tolerances: relative, and absolute as a fraction of the cycle size.
RTOL = 1e-10
ATOL_FRACTION = 1e-9

#: Starting radius of the runs, as fractions of the predicted cycle radius.
SUPERCRITICAL_START = 0.5
#: The closer run of a supercritical check starts at the radius the farther run measured,
#: kept between SUPERCRITICAL_START and this fraction of the predicted one.
CLOSER_START_MAX = 1.5
SUBCRITICAL_INNER = 0.8
SUBCRITICAL_OUTER = 1.25

#: A trajectory has left the neighbourhood once its distance from the equilibrium
#: exceeds this many predicted cycle radii; it has returned once its normal-form radius
#: falls below this fraction of the predicted one. Near onset the radius moves
#: monotonically, so a run from 0.8 that reaches 0.25 started inside the true unstable
#: cycle; going on to 0 would only add the slow linear decay.
ESCAPE_RADII = 3.0
RETURN_FRACTION = 0.25
#: A run that ends inside the neighbourhood "grew" if its mean normal-form radius over
#: the last two periods exceeds its start by this factor.
GREW_FACTOR = 1.2
#: Outcomes of the outside run that show the predicted hard onset.
OUTWARD = ("escaped", "grew")
OUTCOME_WORDS = {
    "settled": "settled on a cycle",
    "drifting": "still drifting at the end",
    "returned": "returned to the equilibrium",
    "escaped": "left the neighbourhood",
    "grew": "grew onto a larger oscillation",
    "stayed": "neither returned nor left",
}

#: Radial transients decay like exp(-rate*t); integrate for this many e-foldings.
SETTLE_EFOLDS = 7.0
#: Periods in each of the two measuring windows (the drift between them is reported).
WINDOW_PERIODS = 10
SAMPLES_PER_PERIOD = 512
#: A settled cycle's period may differ from the compiled 2 pi / omega by this fraction
#: (past onset the period moves by O(growth), a few percent at the default growth).
PERIOD_TOLERANCE = 0.05

#: Refuse runs longer than this many periods (the offset is then too small).
MAX_PERIODS = 20000
#: Relative change of the amplitude between the two windows below which the cycle
#: counts as settled.
SETTLED_DRIFT = 1e-3
#: Agreement bounds of the amplitude coefficient extrapolated to onset: ODE models, and
#: delay models (issue 9 asks for 5%).
ODE_AMPLITUDE_TOLERANCE = 0.1
DELAY_AMPLITUDE_TOLERANCE = 0.05
#: A supercritical check simulates a second time at this fraction of the offset and
#: extrapolates both measurements to onset; the settling time doubles there, so the check
#: takes about three times as long as one run.
CLOSER_FRACTION = 0.5
PLOT_SAMPLES = 6000
PLOT_PER_PERIOD = 24
PLOT_MAX_SAMPLES = 250_000


@dataclass(frozen=True)
class NumericModel:
    """Right-hand side and Jacobian of a model at fixed parameter values (states only)."""

    state_names: tuple[str, ...]
    rhs: Callable[[float, np.ndarray], np.ndarray]
    jacobian: Callable[[np.ndarray], np.ndarray]


@dataclass(frozen=True)
class CycleMeasurement:
    """Amplitude per state ((max - min)/2) and period measured on a settled trajectory."""

    amplitude: np.ndarray
    period: float
    drift: float

    @property
    def settled(self) -> bool:
        return self.drift < SETTLED_DRIFT


@dataclass
class SimulationRun:
    """One integration: where it started, what became of it, and samples for plots."""

    label: str
    start_radius: float
    outcome: str
    t_end: float
    t: np.ndarray = field(repr=False)
    x: np.ndarray = field(repr=False)

    def to_dict(self) -> dict[str, Any]:
        return {
            "label": self.label,
            "start_radius": self.start_radius,
            "outcome": self.outcome,
            "t_end": self.t_end,
        }


@dataclass
class OffsetRun:
    """The runs at one distance past onset, with the predictions there and what they gave."""

    value: float
    offset: float
    equilibrium: np.ndarray
    predicted_amplitude: np.ndarray
    predicted_cycle: np.ndarray = field(repr=False)
    runs: list[SimulationRun] = field(default_factory=list)
    measured: CycleMeasurement | None = None

    @property
    def amplitude_error(self) -> np.ndarray | None:
        """Relative error of the measured amplitude per state (supercritical only)."""
        if self.measured is None:
            return None
        with np.errstate(divide="ignore", invalid="ignore"):
            return self.measured.amplitude / self.predicted_amplitude - 1.0

    def to_dict(self, names: tuple[str, ...], period: float) -> dict[str, Any]:
        out: dict[str, Any] = {
            "value": self.value,
            "offset": self.offset,
            "predicted": {"amplitude": _by_state(names, self.predicted_amplitude)},
            "runs": [run.to_dict() for run in self.runs],
        }
        if self.measured is not None:
            out["measured"] = _measured_dict(names, self.measured)
            out["relative_error"] = {
                "amplitude": _by_state(names, self.amplitude_error),
                "period": self.measured.period / period - 1.0,
            }
        return out


@dataclass
class SimulationCheck:
    """Outcome of :func:`check_by_simulation`, with the predictions beside the measurements.

    ``far`` holds the runs at the farther offset (``value``, ``equilibrium``,
    ``predicted_amplitude``, ``runs``, ``measured`` read from it); a supercritical check
    also has ``closer`` (the runs at
    CLOSER_FRACTION of that offset) and ``onset`` (both measurements extrapolated to the
    onset, the numbers the verdict compares)."""

    model: str
    criticality: str
    bifurcation: str
    critical_value: float
    parameters: dict[str, float]
    state_names: tuple[str, ...]
    predicted_period: float
    far: OffsetRun
    #: Largest relative error of the extrapolated amplitude coefficient that counts as
    #: agreement (supercritical).
    amplitude_tolerance: float = ODE_AMPLITUDE_TOLERANCE
    closer: OffsetRun | None = None
    onset: OnsetFit | None = None

    @property
    def value(self) -> float:
        return self.far.value

    @property
    def offset(self) -> float:
        return self.far.offset

    @property
    def equilibrium(self) -> np.ndarray:
        return self.far.equilibrium

    @property
    def predicted_amplitude(self) -> np.ndarray:
        return self.far.predicted_amplitude

    @property
    def predicted_cycle(self) -> np.ndarray:
        return self.far.predicted_cycle

    @property
    def runs(self) -> list[SimulationRun]:
        return self.far.runs

    @property
    def measured(self) -> CycleMeasurement | None:
        return self.far.measured

    @property
    def main_state(self) -> int:
        """The state the verdict looks at: the one with the largest predicted amplitude."""
        return int(np.argmax(self.predicted_amplitude))

    @property
    def predicted_coefficient(self) -> np.ndarray:
        """The compiled amplitude coefficients ``K_j`` (amplitude / sqrt(|mu - mu0|))."""
        return self.predicted_amplitude / math.sqrt(abs(self.offset))

    @property
    def amplitude_error(self) -> np.ndarray | None:
        """Relative error of the raw amplitude measured at the farther offset, per state."""
        return self.far.amplitude_error

    @property
    def period_error(self) -> float | None:
        """Relative error of the raw period measured at the farther offset."""
        if self.measured is None:
            return None
        return self.measured.period / self.predicted_period - 1.0

    @property
    def onset_amplitude_error(self) -> np.ndarray | None:
        """Relative error of the extrapolated amplitude coefficient per state."""
        if self.onset is None:
            return None
        with np.errstate(divide="ignore", invalid="ignore"):
            return self.onset.coefficient / self.predicted_coefficient - 1.0

    @property
    def onset_period_error(self) -> float | None:
        """Relative error of the period extrapolated to onset."""
        if self.onset is None:
            return None
        return self.onset.period / self.predicted_period - 1.0

    @property
    def fold_offset(self) -> float | None:
        """The fitted fold-of-cycles estimate as an offset (the sign of the simulated
        ones), or None."""
        fold = self.onset.fold_offset if self.onset is not None else None
        return None if fold is None else math.copysign(fold, self.offset)

    @property
    def agrees(self) -> bool:
        """Supercritical: both runs settled on a cycle, the extrapolation is valid, the
        extrapolated amplitude coefficient of the main state is within
        ``amplitude_tolerance`` (10%; 5% for delay models) of the compiled one and the
        extrapolated period within PERIOD_TOLERANCE of the compiled one. Subcritical: the
        inner run returned and the outer run escaped or grew onto a larger oscillation."""
        if self.criticality == "supercritical":
            if self.onset is None or not self.onset.valid:
                return False
            error = self.onset_amplitude_error[self.main_state]
            return bool(
                abs(error) < self.amplitude_tolerance
                and abs(self.onset_period_error) < PERIOD_TOLERANCE
            )
        outcomes = {run.label: run.outcome for run in self.runs}
        return outcomes.get("inside") == "returned" and outcomes.get("outside") in OUTWARD

    def to_dict(self) -> dict[str, Any]:
        names = self.state_names
        out: dict[str, Any] = {
            "model": self.model,
            "criticality": self.criticality,
            "bifurcation": self.bifurcation,
            "critical_value": self.critical_value,
            "parameters": dict(self.parameters),
            "equilibrium": _by_state(names, self.equilibrium),
            "agrees": self.agrees,
            # the farther offset's runs are the check's own top-level entries
            **self.far.to_dict(names, self.predicted_period),
        }
        out["predicted"]["period"] = self.predicted_period
        if self.closer is not None:
            out["closer"] = self.closer.to_dict(names, self.predicted_period)
        if self.onset is not None:
            fit = self.onset
            out["onset"] = {
                "compared": compared_numbers(self),
                "valid": fit.valid,
                "reason": fit.reason,
                "predicted": {
                    "coefficient": _by_state(names, self.predicted_coefficient),
                    "period": self.predicted_period,
                },
                "extrapolated": {
                    "coefficient": _by_state(names, fit.coefficient),
                    "period": fit.period,
                },
                "raw_coefficient": {
                    "offset": _by_state(names, fit.raw[0]),
                    "closer": _by_state(names, fit.raw[1]),
                },
                "slope": _by_state(names, fit.slope),
                "correction": fit.correction,
                "fold_offset": self.fold_offset,
                "relative_error": {
                    "coefficient": _by_state(names, self.onset_amplitude_error),
                    "period": self.onset_period_error,
                },
            }
        return out


def compared_numbers(check: SimulationCheck) -> str:
    """Which numbers the verdict compares, in words (for the report and the JSON)."""
    name = check.state_names[check.main_state]
    return (
        f"amplitude coefficient K of {name} and the period, both extrapolated to onset from "
        f"the two offsets, against the compiled ones (tolerances "
        f"{100 * check.amplitude_tolerance:g}% and {100 * PERIOD_TOLERANCE:g}%)"
    )


def _measured_dict(names: tuple[str, ...], measured: CycleMeasurement) -> dict[str, Any]:
    return {
        "amplitude": _by_state(names, measured.amplitude),
        "period": measured.period,
        "drift": measured.drift,
        "settled": measured.settled,
    }


def _by_state(names: tuple[str, ...], values: np.ndarray) -> dict[str, float]:
    return {name: float(v) for name, v in zip(names, values, strict=True)}


# ---------------------------------------------------------------------------
# Building blocks that need only a plain ODE (tested without the compiler).
# ---------------------------------------------------------------------------


def numeric_model(model: Any, values: Mapping[str, float]) -> NumericModel:
    """Lambdify the model's right-hand side and Jacobian with all parameters fixed."""
    sym = model.symbolic()
    missing = [name for name in model.parameter_names if name not in values]
    if missing:
        raise StudyError(f"no value for parameter(s) {', '.join(missing)}")
    subs = {
        s: sympy.Float(float(values[name]))
        for s, name in zip(sym.parameters, model.parameter_names, strict=True)
    }
    rhs = sympy.Matrix([sympy.sympify(e).xreplace(subs) for e in sym.rhs])
    jac = rhs.jacobian(sympy.Matrix(sym.states))
    states = list(sym.states)
    # math-module code is several times faster than numpy on scalars, which is all
    # DOP853 ever passes; dummify keeps user names such as "lambda" or "E" harmless.
    f = sympy.lambdify(states, list(rhs), modules="math", dummify=True)
    j = sympy.lambdify(states, jac.tolist(), modules="math", dummify=True)

    def rhs_fn(_t: float, x: np.ndarray) -> np.ndarray:
        return np.array(f(*x), dtype=float)

    def jac_fn(x: np.ndarray) -> np.ndarray:
        return np.array(j(*x), dtype=float)

    return NumericModel(tuple(model.state_names), rhs_fn, jac_fn)


def find_equilibrium(nm: NumericModel, guess: np.ndarray) -> np.ndarray:
    """Newton-type solve of F(x) = 0 from ``guess`` (scipy hybr with the exact Jacobian)."""
    from scipy.optimize import root

    try:
        sol = root(
            lambda x: nm.rhs(0.0, x), np.asarray(guess, float), jac=nm.jacobian, method="hybr"
        )
        x = np.asarray(sol.x, float)
        residual = float(np.max(np.abs(nm.rhs(0.0, x))))
    except (ArithmeticError, ValueError):
        residual = math.inf
    scale = max(1.0, float(np.max(np.abs(guess))))
    if not residual <= 1e-9 * scale:
        raise StudyError(
            "could not find the equilibrium past onset for the simulation; "
            "try a smaller offset (--offset) or growth"
        )
    return x


def critical_direction(jacobian: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Critical eigenvectors at the eigenvalue with positive imaginary part closest to the
    imaginary axis: ``q`` with <q, q> = 1 and the adjoint ``p`` with <p, q> = 1
    (docs/mathematics.md).

    ``z = <p, x - x0>`` is then the complex normal-form coordinate of a point near x0.
    """
    values, vectors = np.linalg.eig(jacobian)
    candidates = np.flatnonzero(values.imag > 0)
    if candidates.size == 0:
        raise StudyError("the Jacobian past onset has no complex eigenvalue pair to follow")
    k = candidates[np.argmin(np.abs(values.real[candidates]))]
    q = vectors[:, k] / np.linalg.norm(vectors[:, k])
    left_values, left_vectors = np.linalg.eig(jacobian.T)
    p = left_vectors[:, np.argmin(np.abs(left_values - np.conj(values[k])))]
    return q, p / np.conj(np.vdot(p, q))


def measure_cycle(t: np.ndarray, x: np.ndarray, reference: int) -> tuple[np.ndarray, float]:
    """Amplitude ((max - min)/2) of every column of ``x`` and the period from the mean
    time between upward crossings of the window mean by column ``reference``."""
    amplitude = 0.5 * (x.max(axis=0) - x.min(axis=0))
    signal = x[:, reference] - x[:, reference].mean()
    up = np.flatnonzero((signal[:-1] < 0) & (signal[1:] >= 0))
    if up.size < 2:
        return amplitude, math.nan
    # linear interpolation of the crossing; its error cancels between equal crossings
    frac = -signal[up] / (signal[up + 1] - signal[up])
    times = t[up] + frac * (t[up + 1] - t[up])
    return amplitude, float((times[-1] - times[0]) / (times.size - 1))


def _radius_event(measure: Callable[[np.ndarray], float], level: float, direction: int):
    def event(_t: float, x: np.ndarray) -> float:
        return measure(x) - level

    event.terminal = True
    event.direction = direction
    return event


def run_integration(integrate: Callable[[], S], t_end: float) -> S:
    """Run one integration up to ``t_end`` (DOP853 or the delay integrator) and turn its
    failures into StudyError: math-module code raises (overflow, log of a negative) where
    numpy would give inf/nan, and a solver reports status -1 when it cannot go on."""
    progress_log.info("simulating the model up to t = %.4g ...", t_end)
    try:
        sol = integrate()
    except (ArithmeticError, ValueError) as exc:
        raise StudyError(
            f"the simulation left the model's domain ({exc}); try a smaller offset or growth"
        ) from None
    if sol.status == -1:
        raise StudyError(
            f"the integration failed ({sol.message}); the trajectory may have left the "
            "model's domain: try a smaller offset or growth"
        )
    return sol


def _integrate(
    nm: NumericModel, x0: np.ndarray, t_end: float, scale: float, events: list | None = None
):
    from scipy.integrate import solve_ivp

    return run_integration(
        lambda: solve_ivp(
            nm.rhs,
            (0.0, t_end),
            x0,
            method="DOP853",
            rtol=RTOL,
            atol=ATOL_FRACTION * scale,
            dense_output=True,
            events=events,
        ),
        t_end,
    )


def measure_windows(
    sol: Any, settle_time: float, period: float, reference: int
) -> CycleMeasurement:
    """Measure the cycle in the two windows of WINDOW_PERIODS periods after
    ``settle_time`` (``sol.sol(times)`` evaluates the solution); the drift is the change of
    the amplitude between them."""
    window = WINDOW_PERIODS * period
    n = WINDOW_PERIODS * SAMPLES_PER_PERIOD
    ta = np.linspace(settle_time, settle_time + window, n)
    tb = np.linspace(settle_time + window, settle_time + 2 * window, n)
    amp_a, _ = measure_cycle(ta, sol.sol(ta).T, reference)
    amp_b, per = measure_cycle(tb, sol.sol(tb).T, reference)
    drift = float(np.max(np.abs(amp_b - amp_a)) / max(float(np.max(amp_b)), 1e-300))
    return CycleMeasurement(amp_b, per, drift)


def settled_outcome(measured: CycleMeasurement | None) -> str:
    """The outcome word of a supercritical run (None: a terminal event stopped it)."""
    if measured is None:
        return "escaped"
    return "settled" if measured.settled else "drifting"


def start_label(fraction: float) -> str:
    """Label of a run that starts at ``fraction`` of the predicted cycle radius."""
    return "inside" if fraction <= 1 else "outside"


def settle_on_cycle(
    nm: NumericModel,
    x0: np.ndarray,
    period: float,
    settle_time: float,
    scale: float,
    reference: int,
    events: list | None = None,
) -> tuple[Any, CycleMeasurement | None]:
    """Integrate for ``settle_time`` plus two windows of WINDOW_PERIODS periods and measure
    the cycle in both windows. Returns the solution and the measurement (None when a
    terminal event, such as leaving the neighbourhood, stopped the run)."""
    t_end = settle_time + 2 * WINDOW_PERIODS * period
    sol = _integrate(nm, x0, t_end, scale, events)
    if sol.status == 1:
        return sol, None
    return sol, measure_windows(sol, settle_time, period, reference)


def _samples(sol: Any, t_end: float, period: float) -> tuple[np.ndarray, np.ndarray]:
    """Plot samples: PLOT_PER_PERIOD per period over the whole run (so long transients are
    not drawn aliased), capped at PLOT_MAX_SAMPLES, and 400 over the last two periods so
    the final cycle is drawn smooth."""
    n = int(min(max(PLOT_SAMPLES, PLOT_PER_PERIOD * t_end / period), PLOT_MAX_SAMPLES))
    coarse = np.linspace(0.0, t_end, n)
    fine = np.linspace(max(0.0, t_end - 2 * period), t_end, 400)
    t = np.union1d(coarse, fine)
    return t, sol.sol(t).T


def record_run(
    leg: OffsetRun, label: str, fraction: float, outcome: str, sol: Any, period: float
) -> None:
    """Append a finished run, with its plot samples, to the runs of its offset."""
    t, x = _samples(sol, float(sol.t[-1]), period)
    leg.runs.append(SimulationRun(label, fraction, outcome, float(sol.t[-1]), t, x))


# ---------------------------------------------------------------------------
# The check itself: compiled predictions against the integration.
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class OffsetPlan:
    """What a backend (ODE or delay) needs to simulate at one offset."""

    criticality: str
    values: dict[str, float]
    value: float
    delta: float
    predicted: np.ndarray
    period: float
    settle: float
    #: Supercritical: the starting radius as a fraction of the predicted one.
    start: float = SUPERCRITICAL_START


def check_by_simulation(
    model: Any,
    overrides: Mapping[str, float] | None = None,
    *,
    growth: float = DEFAULT_GROWTH,
    offset: float | None = None,
    evaluator: Any = None,
) -> SimulationCheck:
    """Integrate ``model`` just past its Hopf onset and compare with the compiled predictions.

    ``overrides`` fix parameters other than their nominal values (a value given for the
    bifurcation parameter is only the starting guess for the onset). The distance past
    onset is ``offset`` (in units of the bifurcation parameter; its sign is chosen from the
    predicted cycle side) or, by default, the one where the equilibrium's growth rate is
    ``growth`` times the frequency, capped at MAX_RELATIVE_OFFSET * |mu0|. A supercritical
    check runs again at CLOSER_FRACTION of that distance and extrapolates both measured
    amplitudes to the onset (:mod:`lyacomp.studies.verify_onset`).
    """
    import lyacomp

    ev = evaluator if evaluator is not None else lyacomp.compile(model)
    if ev.bifurcation is None:
        raise StudyError("the simulation check needs a model with a bifurcation parameter")
    if not growth > 0 or (offset is not None and not offset != 0):
        raise StudyError("growth and offset must be positive numbers")
    overrides = dict(overrides or {})
    res = ev(overrides)
    if not res.ok:
        raise StudyError(
            f"no Hopf point at these parameter values (status {res.status}); "
            "check --set values or the starting guess of the bifurcation parameter"
        )
    if res.criticality not in ("supercritical", "subcritical"):
        raise StudyError(
            f"the onset is {res.criticality} (l1 = {res.l1:.3g}); a simulation cannot "
            "decide it near onset"
        )

    mu0, d, omega = res.critical_value, res.transversality, res.omega
    side = 1.0 if res.cycle_side == "above" else -1.0
    if offset is not None:
        delta = side * abs(offset)
    else:
        delta = side * growth * omega / abs(d)
        if mu0 != 0:
            delta = side * min(abs(delta), MAX_RELATIVE_OFFSET * abs(mu0))
    coefficient = np.array([res.amplitude[s] for s in model.state_names], float)
    period = res.period  # the compiled period, 2 pi / omega (the result being checked)
    supercritical = res.criticality == "supercritical"
    closest = CLOSER_FRACTION * abs(delta) if supercritical else abs(delta)
    # radial transients decay like exp(-2 |d (mu - mu0)| t)
    settle_periods = SETTLE_EFOLDS / (2 * abs(d) * closest) / period
    if settle_periods > MAX_PERIODS:
        raise StudyError(
            f"the cycle would take about {settle_periods:.0f} periods to settle at offset "
            f"{closest:.3g}; use a larger offset"
        )

    def plan(shift: float, start: float = SUPERCRITICAL_START) -> OffsetPlan:
        return OffsetPlan(
            criticality=res.criticality,
            values={**ev.nominal, **overrides, ev.bifurcation: mu0 + shift},
            value=mu0 + shift,
            delta=shift,
            predicted=coefficient * math.sqrt(abs(shift)),
            period=period,
            settle=SETTLE_EFOLDS / (2 * abs(d * shift)),
            start=start,
        )

    if model.delays:
        from lyacomp.studies.verify_delay import simulate_delay_offset

        def simulate(p: OffsetPlan) -> OffsetRun:
            return simulate_delay_offset(model, res, p)

        tolerance = DELAY_AMPLITUDE_TOLERANCE
    else:

        def simulate(p: OffsetPlan) -> OffsetRun:
            return _simulate_ode_offset(model, res, p)

        tolerance = ODE_AMPLITUDE_TOLERANCE

    far_plan = plan(delta)
    far = simulate(far_plan)
    check = SimulationCheck(
        model=model.name,
        criticality=res.criticality,
        bifurcation=ev.bifurcation,
        critical_value=mu0,
        parameters={k: float(v) for k, v in far_plan.values.items()},
        state_names=tuple(model.state_names),
        predicted_period=period,
        far=far,
        amplitude_tolerance=tolerance,
    )
    if not supercritical or far.measured is None or not far.measured.settled:
        return check
    # The closer run starts where the farther one says its cycle is (the measured
    # amplitude scaled by sqrt(CLOSER_FRACTION)): a start within the O(offset) bias of the
    # cycle leaves a transient ten times smaller after the same settling time, and the
    # extrapolation would amplify it.
    ratio = far.measured.amplitude[check.main_state] / far.predicted_amplitude[check.main_state]
    start = min(max(float(ratio), SUPERCRITICAL_START), CLOSER_START_MAX)
    check.closer = simulate(plan(CLOSER_FRACTION * delta, start))
    near = check.closer.measured
    if near is not None and near.settled:
        check.onset = extrapolate_to_onset(
            (far.offset, check.closer.offset),
            (far.measured.amplitude, near.amplitude),
            (far.measured.period, near.period),
            check.main_state,
        )
    return check


def predicted_run(
    res: Any, plan: OffsetPlan, eq: np.ndarray, q: np.ndarray
) -> tuple[OffsetRun, float]:
    """The run at one offset before it is simulated: the normal-form radius ``|w|`` and the
    predicted cycle ``x0 + 2 Re(w q e^{i theta})`` (ODE and delay models alike)."""
    w = math.sqrt(abs(res.transversality * plan.delta / (res.omega * res.l1)))
    theta = np.linspace(0.0, 2 * math.pi, 400)
    run = OffsetRun(
        value=plan.value,
        offset=plan.delta,
        equilibrium=eq,
        predicted_amplitude=plan.predicted,
        predicted_cycle=eq + 2 * w * np.real(np.outer(np.exp(1j * theta), q)),
    )
    return run, w


def _simulate_ode_offset(model: Any, res: Any, plan: OffsetPlan) -> OffsetRun:
    """The DOP853 runs at one offset: the settled cycle (supercritical) or the two runs that
    bracket the unstable cycle (subcritical)."""
    nm = numeric_model(model, plan.values)
    guess = np.array([res.equilibrium[s] for s in nm.state_names], float)
    eq = find_equilibrium(nm, guess)
    q, p = critical_direction(nm.jacobian(eq))
    period, settle = plan.period, plan.settle
    leg, w = predicted_run(res, plan, eq, q)
    radius = 2 * w

    def start(fraction: float) -> np.ndarray:
        # the point of normal-form coordinate z = fraction * w (phase 0)
        return eq + 2 * fraction * w * np.real(q)

    # Leaving: Euclidean distance beyond ESCAPE_RADII cycle sizes (a point of the cycle is
    # never farther than 2|w| from x0). Returning: |<p, x - x0>| (the normal-form radius,
    # which stays near |w| on the cycle however flat its ellipse) below RETURN_FRACTION |w|.
    leave = _radius_event(lambda x: float(np.linalg.norm(x - eq)), ESCAPE_RADII * radius, +1)
    back = _radius_event(lambda x: abs(complex(np.vdot(p, x - eq))), RETURN_FRACTION * w, -1)
    reference = int(np.argmax(plan.predicted))
    if plan.criticality == "supercritical":
        sol, meas = settle_on_cycle(
            nm, start(plan.start), period, settle, radius, reference, [leave]
        )
        record_run(leg, start_label(plan.start), plan.start, settled_outcome(meas), sol, period)
        leg.measured = meas
        return leg

    for label, fraction in (("inside", SUBCRITICAL_INNER), ("outside", SUBCRITICAL_OUTER)):
        sol = _integrate(nm, start(fraction), 3 * settle, radius, [back, leave])
        if sol.status == 1:
            outcome = "returned" if sol.t_events[0].size else "escaped"
        else:
            # Still near the equilibrium at the end: a run that grew onto a larger
            # oscillation inside the neighbourhood also shows the hard onset (the unstable
            # cycle turning back in a fold onto a stable large one).
            tail = np.linspace(sol.t[-1] - 2 * period, sol.t[-1], 200)
            z = np.abs((sol.sol(tail).T - eq) @ np.conj(p)) / w
            outcome = "grew" if z.mean() > GREW_FACTOR * fraction else "stayed"
        record_run(leg, label, fraction, outcome, sol, period)
    return leg
