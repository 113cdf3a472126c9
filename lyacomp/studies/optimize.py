"""Design optimization: evaluator outputs as scipy.optimize objectives and constraints.

A :class:`DesignSpace` picks the free parameters (the others stay fixed). Each
evaluation of a design ``x`` is ONE ``Evaluator.batch`` call on the central
difference stencil ``x, x + h_i e_i, x - h_i e_i``; value and gradient of every
output come from it, and the last stencil is cached, so ``fun(x)`` followed by
``jac(x)`` (or an objective and its constraints at the same ``x``) costs a single
call. The Newton search for the critical value starts from the same guess at every
design, so each output is a deterministic function of ``x``.

Samples whose status is not ok never become numbers an optimizer trusts:

* ``on_failure="raise"`` (default): a design without a usable Hopf point raises
  :class:`DesignPointError`, naming the parameter values and the status. The
  optimizer stops; narrow the bounds or start elsewhere.
* ``on_failure="inf"``: the value is +inf for an objective and a violating
  infinity for a constraint. Only for derivative-free methods (COBYLA,
  Nelder-Mead), which treat such a point as worse; the gradient at such a design
  still raises, because gradient methods (L-BFGS-B, for one) can misread an
  infinite value and report success at a wrong point.
* If the design is ok but a stencil neighbour is not, that derivative is taken
  one-sided from the ok neighbour (first order); if both neighbours fail the
  gradient raises :class:`DesignPointError`.

:class:`RobustStatistic` is the robust variant: the probability of a hard onset or
an upper quantile of l1 over the declared uncertainty, evaluated on samples drawn
once (common random numbers), so the objective is deterministic in ``x``.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from lyacomp.errors import StudyError
from lyacomp.runtime.evaluator import DELAY_DERIVATIVES, delay_refusal
from lyacomp.status import Status
from lyacomp.studies.robustness import fixed_values, study_setup
from lyacomp.studies.uncertainty import LogNormal, chunk_rng, draw_scores

SCALARS = ("l1", "critical_value", "omega", "transversality", "period")
FAILURE_POLICIES = ("raise", "inf")
GRADIENTS = ("exact", "differences")
EXACT_OUTPUTS = ("l1", "critical_value", "omega", "period")
"""Outputs whose gradient comes from the exact derivatives (``gradients="exact"``)."""


class DesignPointError(StudyError):
    """A design (or the gradient stencil around it) has no usable Hopf point.

    ``point`` holds the parameter values, ``status`` the evaluator's status name.
    """

    def __init__(self, message: str, point: Mapping[str, float], status: str):
        super().__init__(message)
        self.point = dict(point)
        self.status = status


def _status_label(code: int) -> str:
    try:
        return Status(code).label
    except ValueError:
        return f"status_{code}"


def _output_getter(output: str, states: Sequence[str]):
    if output in SCALARS:
        return lambda batch: np.asarray(getattr(batch, output), dtype=float)
    if output.startswith("amplitude_") and output[len("amplitude_") :] in states:
        j = list(states).index(output[len("amplitude_") :])
        return lambda batch: np.asarray(batch.amplitude, dtype=float)[:, j]
    names = ", ".join((*SCALARS, *(f"amplitude_{s}" for s in states)))
    raise StudyError(f"unknown output '{output}'; choose one of {names}")


class DesignSpace:
    """The free parameters of a design; every other parameter is held fixed.

    ``step`` is the relative central-difference step: ``h_i = step * max(|x_i|, s_i)``
    with ``s_i`` the magnitude of the starting value (1 where that is 0).
    ``gradients="exact"`` (the default with a bifurcation parameter) takes the gradients of
    l1, the critical value, omega and the period from the exact derivatives of one
    evaluation at ``x`` (``batch(..., derivatives=True)``); the other outputs, and every
    output with ``gradients="differences"`` (the default without a bifurcation parameter
    and for delay models, whose kernels have no exact derivatives yet), use the
    central-difference stencil.
    """

    def __init__(
        self,
        ev: Any,
        free: Sequence[str],
        fixed: Mapping[str, float] | None = None,
        *,
        step: float = 1e-5,
        threads: int | None = None,
        gradients: str | None = None,
    ):
        free = list(free)
        if gradients is None:
            # exact derivatives need a bifurcation parameter (the Hopf point is followed);
            # delay kernels do not compute them yet
            exact = ev.bifurcation is not None and not ev.model.delays
            gradients = "exact" if exact else "differences"
        if gradients not in GRADIENTS:
            raise StudyError(f"gradients must be one of {', '.join(GRADIENTS)}; got {gradients!r}")
        if not free:
            raise StudyError("name at least one free parameter to optimize over")
        unknown = [n for n in [*free, *(fixed or {})] if n not in ev.parameters]
        if unknown:
            raise StudyError(
                f"unknown parameter(s) {', '.join(unknown)};"
                f" the model has {', '.join(ev.parameters)}"
            )
        if len(set(free)) != len(free):
            raise StudyError(f"free parameters listed twice: {', '.join(free)}")
        if ev.bifurcation in free:
            raise StudyError(
                f"'{ev.bifurcation}' is the bifurcation parameter: its critical value is an"
                " output (optimize 'critical_value'), not a design variable"
            )
        if not (step > 0.0 and math.isfinite(step)):
            raise StudyError(f"step must be a positive number; got {step}")
        self.ev = ev
        self.free = tuple(free)
        given = fixed_values(fixed)
        self.fixed = {k: v for k, v in given.items() if k not in free}
        start = {**ev.nominal, **given}
        self.x0 = np.array([start[n] for n in free], dtype=float)
        self.scale = np.where(self.x0 != 0.0, np.abs(self.x0), 1.0)
        self.step = step
        self.threads = threads
        self._cache_key: bytes | None = None
        self._cache: Any = None
        if gradients == "exact" and ev.model.delays:
            refusal = delay_refusal(DELAY_DERIVATIVES)
            raise StudyError(f"{refusal}; use gradients='differences' (their default)")
        self.gradients = gradients if ev.bifurcation is not None else "differences"
        self._exact_key: bytes | None = None
        self._exact: Any = None
        self._columns = (
            [ev.derivative_parameters.index(n) for n in self.free]
            if (self.gradients == "exact")
            else []
        )

    def point(self, x: np.ndarray) -> dict[str, float]:
        """The free parameters of ``x`` by name."""
        return {n: float(v) for n, v in zip(self.free, np.ravel(x), strict=True)}

    def _as_vector(self, x: Sequence[float] | np.ndarray) -> np.ndarray:
        x = np.asarray(x, dtype=float).ravel()
        if x.shape != (len(self.free),):
            raise StudyError(f"expected {len(self.free)} values ({', '.join(self.free)}); got {x}")
        return x

    def steps(self, x: np.ndarray) -> np.ndarray:
        return self.step * np.maximum(np.abs(x), self.scale)

    def stencil(self, x: np.ndarray) -> np.ndarray:
        """Rows: x, then x + h_i e_i and x - h_i e_i for each free parameter i."""
        k = len(x)
        h = self.steps(x)
        rows = np.repeat(x[None, :], 2 * k + 1, axis=0)
        rows[1 : k + 1] += np.diag(h)
        rows[k + 1 :] -= np.diag(h)
        return rows

    def evaluate(self, x: Sequence[float] | np.ndarray) -> Any:
        """The batch result on the stencil around ``x`` (one call, cached for the last x)."""
        x = self._as_vector(x)
        key = x.tobytes()
        if key != self._cache_key:
            rows = self.stencil(x)
            inputs = {**self.fixed, **{n: rows[:, i] for i, n in enumerate(self.free)}}
            self._cache = self.ev.batch(inputs, threads=self.threads)
            self._cache_key = key
        return self._cache

    def evaluate_exact(self, x: Sequence[float] | np.ndarray) -> Any:
        """The batch result at ``x`` alone with exact derivatives (one call, cached)."""
        x = self._as_vector(x)
        key = x.tobytes()
        if key != self._exact_key:
            inputs = {**self.fixed, **{n: x[i : i + 1] for i, n in enumerate(self.free)}}
            self._exact = self.ev.batch(inputs, threads=self.threads, derivatives=True)
            self._exact_key = key
        return self._exact

    def exact_gradient(self, batch: Any, output: str) -> np.ndarray:
        """d output / d free parameters at the single sample of ``batch``."""
        der = batch.derivatives
        if output == "period":
            # period = 2 pi / omega
            omega = float(batch.omega[0])
            return -2.0 * math.pi / omega**2 * der["omega"][0, self._columns]
        return np.asarray(der[output][0, self._columns], dtype=float)

    def output(self, name: str, *, maximize: bool = False, on_failure: str = "raise"):
        """An output as a scipy objective: call for the value, ``.jac`` for the gradient."""
        return OutputFunction(self, name, sign=-1.0 if maximize else 1.0, on_failure=on_failure)

    def constraint(
        self, name: str, lower: float = -math.inf, upper: float = math.inf, *, on_failure="raise"
    ):
        """``lower <= output <= upper`` as a ``scipy.optimize.NonlinearConstraint``."""
        from scipy.optimize import NonlinearConstraint

        if not lower <= upper or (math.isinf(lower) and math.isinf(upper)):
            raise StudyError(f"constraint on {name} needs lower <= upper, one of them finite")
        violating = math.inf if math.isfinite(upper) else -math.inf
        fun = OutputFunction(self, name, on_failure=on_failure, failure_value=violating)
        return NonlinearConstraint(fun, lower, upper, jac=lambda x: fun.jac(x)[None, :])

    def uses_exact(self, output: str) -> bool:
        """True when the gradient of ``output`` comes from the exact derivatives."""
        return self.gradients == "exact" and output in EXACT_OUTPUTS


class OutputFunction:
    """One output of the evaluator as a function of the free parameters."""

    def __init__(
        self,
        space: DesignSpace,
        output: str,
        *,
        sign: float = 1.0,
        on_failure: str = "raise",
        failure_value: float = math.inf,
    ):
        if on_failure not in FAILURE_POLICIES:
            raise StudyError(f"on_failure must be one of {', '.join(FAILURE_POLICIES)}")
        self.space = space
        self.output = output
        self.sign = sign
        self.on_failure = on_failure
        self.failure_value = failure_value
        self._get = _output_getter(output, space.ev.states)

    def _fail(self, x: np.ndarray, code: int, what: str) -> DesignPointError:
        point = self.space.point(x)
        label = _status_label(code)
        where = ", ".join(f"{k}={v:.6g}" for k, v in point.items())
        return DesignPointError(
            f"{what} at {where}: the evaluator returned status '{label}' (no usable Hopf point)."
            " The optimizer left the region where the model has one; narrow the bounds or"
            " start elsewhere.",
            point,
            label,
        )

    def __call__(self, x: Sequence[float] | np.ndarray) -> float:
        x = self.space._as_vector(x)
        exact = self.space.uses_exact(self.output)
        batch = self.space.evaluate_exact(x) if exact else self.space.evaluate(x)
        code = int(batch.status[0])
        if code != 0:
            if self.on_failure == "inf":
                return self.failure_value
            raise self._fail(x, code, f"{self.output} is undefined")
        return self.sign * float(self._get(batch)[0])

    def value_and_gradient(self, x: Sequence[float] | np.ndarray) -> tuple[float, np.ndarray]:
        """Value and gradient together, for ``minimize(f.value_and_gradient, x0, jac=True)``."""
        return self(x), self.jac(x)

    def jac(self, x: Sequence[float] | np.ndarray) -> np.ndarray:
        """The exact gradient (see :class:`DesignSpace`), else central differences from the
        cached stencil, one-sided next to a failure."""
        x = self.space._as_vector(x)
        if self.space.uses_exact(self.output):
            batch = self.space.evaluate_exact(x)
            code = int(batch.status[0])
            grad = self.space.exact_gradient(batch, self.output) if code == 0 else None
            if grad is None or not np.isfinite(grad).all():
                raise self._fail(x, code, f"the gradient of {self.output} is undefined")
            return self.sign * grad
        batch = self.space.evaluate(x)
        status = np.asarray(batch.status)
        if status[0] != 0:
            raise self._fail(x, int(status[0]), f"the gradient of {self.output} is undefined")
        values = self._get(batch)
        k = len(x)
        h = self.space.steps(x)
        plus, minus = values[1 : k + 1], values[k + 1 :]
        plus_ok, minus_ok = status[1 : k + 1] == 0, status[k + 1 :] == 0
        grad = np.empty(k)
        for i in range(k):
            if plus_ok[i] and minus_ok[i]:
                grad[i] = (plus[i] - minus[i]) / (2.0 * h[i])
            elif plus_ok[i]:
                grad[i] = (plus[i] - values[0]) / h[i]
            elif minus_ok[i]:
                grad[i] = (values[0] - minus[i]) / h[i]
            else:
                raise self._fail(
                    x, int(status[1 + i]), f"both neighbours in {self.space.free[i]} fail"
                )
        return self.sign * grad


STATISTICS = ("probability", "quantile")
ROBUST_FAILURES = ("worst", "exclude", "raise")


class RobustStatistic:
    """Probability of hard onset, or an upper quantile of l1, under uncertainty.

    The uncertain parameters are drawn once (``samples`` draws, ``seed``; Latin
    hypercube by default) and re-used for every design: common random numbers make
    the statistic a deterministic function of ``x``. A free parameter that is also
    uncertain carries its declared spread along with the design: each draw keeps
    its offset from the starting value (its ratio to it, for a lognormal).

    ``statistic="probability"``: fraction of samples with l1 > 0. It is piecewise
    constant in ``x``; use a derivative-free method, or give ``smoothing`` (a width in
    units of l1) to replace the step by a logistic ramp that gradients can follow.
    The smoothed value is biased: it is the mean of ``expit(l1 / smoothing)``, not the
    probability. Every sample within a few widths of l1 = 0 counts partly (a soft sample
    at l1 = -smoothing counts 0.27, a hard one at +smoothing only 0.73), which pulls the
    value toward 1/2; for a density f of l1 the difference is about
    ``-(pi**2 / 6) * smoothing**2 * f'(0)``, so a small probability (most mass at l1 < 0,
    so f falls at 0) is over-estimated. Keep the width small against the spread of l1,
    and report the unsmoothed probability at the design found.
    ``statistic="quantile"``: the ``level`` quantile of l1 (e.g. 0.95).

    Non-ok samples (``on_failure``): ``"worst"`` (default, conservative) counts them
    as hard onsets / l1 = +inf, raising :class:`DesignPointError` if the quantile
    itself becomes infinite; ``"exclude"`` drops them; ``"raise"`` refuses any.

    ``client`` (a ``distributed.Client``) evaluates each design's samples on a Dask
    cluster, in blocks; the statistic is the same, bit for bit, as the local one.
    """

    def __init__(
        self,
        space: DesignSpace,
        *,
        statistic: str = "probability",
        level: float = 0.95,
        samples: int = 2000,
        seed: int = 0,
        uncertainty: Mapping[str, object] | None = None,
        method: str = "lhs",
        smoothing: float | None = None,
        on_failure: str = "worst",
        client: Any = None,
    ):
        if statistic not in STATISTICS:
            raise StudyError(f"statistic must be one of {', '.join(STATISTICS)}")
        if on_failure not in ROBUST_FAILURES:
            raise StudyError(f"on_failure must be one of {', '.join(ROBUST_FAILURES)}")
        if not 0.0 < level < 1.0:
            raise StudyError(f"level must lie strictly between 0 and 1; got {level}")
        if smoothing is not None and not (smoothing > 0.0 and math.isfinite(smoothing)):
            raise StudyError(f"smoothing must be a positive width in units of l1; got {smoothing}")
        if isinstance(samples, bool) or not isinstance(samples, int) or samples < 1:
            raise StudyError(f"samples must be a positive integer; got {samples!r}")
        fixed = {**space.fixed, **space.point(space.x0)}
        spec, _ = study_setup(space.ev, uncertainty, fixed)
        self.space = space
        self.spec = spec
        self.statistic = statistic
        self.level = level
        self.smoothing = smoothing
        self.on_failure = on_failure
        self.samples = samples
        self.draws = spec.values(draw_scores(chunk_rng(seed, 0), samples, spec.dimension, method))
        start = {**space.ev.nominal, **fixed}
        self._centre = np.array([start[n] for n in spec.names])
        # Lognormal spreads are relative, so they scale with the design; the others shift.
        self._scaled = [isinstance(m, LogNormal) for m in spec.marginals]
        for name, scaled, centre in zip(spec.names, self._scaled, self._centre, strict=True):
            if name in space.free and scaled and centre <= 0.0:
                raise StudyError(
                    f"free parameter '{name}' has a lognormal uncertainty but starts at"
                    f" {centre:g}; start it at a positive value"
                )
        self.client = client
        self._key: bytes | None = None
        self._values: list[float | DesignPointError] = []
        self._exact_key: bytes | None = None

    def _inputs(self, rows: np.ndarray) -> dict[str, np.ndarray | float]:
        n_rows, s = len(rows), self.samples
        inputs: dict[str, np.ndarray | float] = {
            k: v for k, v in self.space.fixed.items() if k not in self.spec.names
        }
        for i, name in enumerate(self.space.free):
            inputs[name] = np.repeat(rows[:, i], s)
        for j, name in enumerate(self.spec.names):
            draws = np.tile(self.draws[:, j], n_rows)
            if name in self.space.free and self._scaled[j]:
                draws = draws * (inputs[name] / self._centre[j])
            elif name in self.space.free:
                draws = draws - self._centre[j] + inputs[name]
            inputs[name] = draws
        return inputs

    def _evaluate(self, x: np.ndarray) -> list[float | DesignPointError]:
        """Statistic (or the reason it is undefined) at every stencil row; one batch call."""
        key = x.tobytes()
        if key != self._key:
            rows = self.space.stencil(x)
            inputs = self._inputs(rows)
            if self.client is None:
                batch = self.space.ev.batch(inputs, threads=self.space.threads)
                got = {"l1": batch.l1, "status": batch.status}
            else:
                from lyacomp.studies.cluster import batch_on_cluster

                got = batch_on_cluster(
                    self.client, self.space.ev, inputs, ("l1", "status"), self.space.threads
                )
            l1 = np.asarray(got["l1"], dtype=float).reshape(len(rows), self.samples)
            status = np.asarray(got["status"]).reshape(len(rows), self.samples)
            self._values = []
            for row, a, s in zip(rows, l1, status, strict=True):
                try:
                    self._values.append(self._reduce(row, a, s))
                except DesignPointError as exc:
                    self._values.append(exc)
            self._key = key
        return self._values

    def _reduce(self, x: np.ndarray, l1: np.ndarray, status: np.ndarray) -> float:
        bad = status != 0
        if bad.any():
            if self.on_failure == "raise":
                code = int(status[np.argmax(bad)])
                where = ", ".join(f"{k}={v:.6g}" for k, v in self.space.point(x).items())
                raise DesignPointError(
                    f"{int(bad.sum())} of {self.samples} samples near {where} have no usable Hopf"
                    f" point (first status '{_status_label(code)}')",
                    self.space.point(x),
                    _status_label(code),
                )
            if self.on_failure == "exclude":
                l1 = l1[~bad]
                if not len(l1):
                    raise DesignPointError(
                        "no sample has a usable Hopf point", self.space.point(x), "none"
                    )
            else:
                l1 = np.where(bad, math.inf, l1)
        if self.statistic == "quantile":
            with np.errstate(invalid="ignore"):  # inf - inf when interpolating failures
                q = float(np.quantile(l1, self.level))
            if not math.isfinite(q):
                raise DesignPointError(
                    f"more than {100 * (1 - self.level):g}% of the samples have no usable Hopf"
                    f" point, so the {self.level:g} quantile of l1 is undefined",
                    self.space.point(x),
                    "too_many_failures",
                )
            return q
        if self.smoothing is None:
            return float(np.mean(l1 > 0.0))
        from scipy.special import expit

        return float(np.mean(expit(l1 / self.smoothing)))

    def __call__(self, x: Sequence[float] | np.ndarray) -> float:
        if self._exact:
            return self._exact_at(self.space._as_vector(x))[0]
        value = self._evaluate(self.space._as_vector(x))[0]
        if isinstance(value, DesignPointError):
            raise value
        return value

    def _design_factors(self, x: np.ndarray) -> np.ndarray:
        """d(parameter value of each draw) / d(design value), (samples, free)."""
        factors = np.ones((self.samples, len(x)))
        for i, name in enumerate(self.space.free):
            if name in self.spec.names:
                j = self.spec.names.index(name)
                if self._scaled[j]:
                    factors[:, i] = self.draws[:, j] / self._centre[j]
        return factors

    @property
    def _exact(self) -> bool:
        return self.space.gradients == "exact" and (
            self.statistic == "quantile" or self.smoothing is not None
        )

    def _exact_at(self, x: np.ndarray) -> tuple[float, np.ndarray]:
        """Value and exact gradient at ``x`` from one batch call on the draws (cached)."""
        key = x.tobytes()
        if key != self._exact_key:
            try:
                self._exact_result: Any = self._exact_value_and_gradient(x)
            except DesignPointError as exc:
                self._exact_result = exc
            self._exact_key = key
        if isinstance(self._exact_result, DesignPointError):
            raise self._exact_result
        return self._exact_result

    def _exact_value_and_gradient(self, x: np.ndarray) -> tuple[float, np.ndarray]:
        """The statistic and its gradient from exact per-sample derivatives of l1: the
        quantile's two order statistics (numpy's linear interpolation), or the mean slope
        of the logistic ramp."""
        inputs = self._inputs(x[None, :])
        batch = self.space.ev.batch(inputs, threads=self.space.threads, derivatives=True)
        l1 = np.asarray(batch.l1, dtype=float)
        status = np.asarray(batch.status)
        value = self._reduce(x, l1, status)  # raises when the statistic is undefined
        cols = [self.space.ev.derivative_parameters.index(n) for n in self.space.free]
        grads = batch.derivatives["l1"][:, cols] * self._design_factors(x)
        good = status == 0
        if self.statistic == "quantile":
            if self.on_failure == "exclude":
                l1, grads = l1[good], grads[good]
            else:
                l1 = np.where(good, l1, math.inf)
            order = np.argsort(l1, kind="stable")
            position = self.level * (len(l1) - 1)
            low = int(math.floor(position))
            weight = position - low
            grad = (1.0 - weight) * grads[order[low]]
            if weight > 0.0:
                grad = grad + weight * grads[order[low + 1]]
        else:
            from scipy.special import expit

            t = l1[good] / self.smoothing
            slope = expit(t) * (1.0 - expit(t)) / self.smoothing
            grad = (slope[:, None] * grads[good]).sum(axis=0) / (
                len(l1) if self.on_failure != "exclude" else good.sum()
            )
        if not np.isfinite(grad).all():
            raise DesignPointError(
                "an exact derivative is missing at the samples that set the statistic",
                self.space.point(x),
                "no_derivative",
            )
        return value, grad

    def jac(self, x: Sequence[float] | np.ndarray) -> np.ndarray:
        """The gradient of the statistic: from exact derivatives (``gradients="exact"``,
        quantile or smoothed probability), else central differences on the same draws at
        every stencil row."""
        x = self.space._as_vector(x)
        if self._exact:
            return self._exact_at(x)[1]
        values = self._evaluate(x)
        for value in values:
            if isinstance(value, DesignPointError):
                raise value
        v = np.array(values)
        k = len(x)
        return (v[1 : k + 1] - v[k + 1 :]) / (2.0 * self.space.steps(x))

    def constraint(self, lower: float = -math.inf, upper: float = math.inf):
        """``lower <= statistic <= upper`` as a ``scipy.optimize.NonlinearConstraint``."""
        from scipy.optimize import NonlinearConstraint

        return NonlinearConstraint(self, lower, upper, jac=lambda x: self.jac(x)[None, :])
