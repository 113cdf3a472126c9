"""Stage 6: the Python shim around a compiled model."""

from __future__ import annotations

import math
import numbers
from collections.abc import Mapping
from dataclasses import asdict, dataclass, replace
from types import ModuleType
from typing import Any

import numpy as np

from ..errors import EvaluationError
from ..model import Model
from .results import BatchResult, HopfResult

PREFIX = "lyc"


@dataclass(frozen=True)
class Tolerances:
    """Numerical settings of an evaluation (they do not change the compiled code)."""

    newton_tol: float = 1e-12
    """Newton stops when each step component is below newton_tol * (size of that unknown)."""
    max_iter: int = 50
    """Newton iterations per stage."""
    axis_tol: float = 1e-8
    """|Re lambda| <= axis_tol * |A| counts as on the imaginary axis (|A|: balanced norm)."""
    degenerate_rtol: float = 1e-9
    """l1 counts as zero (degenerate) when |l1| <= rtol * (size of the terms that cancel)."""
    degenerate_atol: float = 0.0
    """... or when |l1| <= atol (in the units of l1)."""
    transversality_rtol: float = 1e-7
    """d counts as zero when |d| * (scale of mu) <= rtol * omega (the pair barely moves).

    The scale of mu is max(|mu0|, |guess|), or 1 + |mu0| when the guess is zero."""

    def __post_init__(self) -> None:
        for name, value in asdict(self).items():
            if (
                isinstance(value, bool)
                or not isinstance(value, numbers.Real)
                or not math.isfinite(value)
                or value < 0
            ):
                raise EvaluationError(
                    f"tolerance {name} must be a finite number >= 0, got {value!r}"
                )
        if int(self.max_iter) != self.max_iter or self.max_iter < 1:
            raise EvaluationError(f"max_iter must be a positive integer, got {self.max_iter!r}")


class Evaluator:
    """A compiled model: call it for one parameter set, or ``batch`` for arrays.

    Parameters not given take their nominal values. Newton starts from the Hopf point
    solved at nominal values; a value given for the bifurcation parameter makes it start
    from that value and the model's state guesses instead.
    """

    def __init__(
        self,
        model: Model,
        module: ModuleType,
        key: str,
        tolerances: Tolerances,
        build_config: Any = None,
        state_guess: Mapping[str, float] | None = None,
    ):
        self.model = model
        self.key = key
        self.ffi = module.ffi
        self.lib = module.lib
        self.tolerances = tolerances
        self._module = module
        self._build_config = build_config
        self.parameters: tuple[str, ...] = model.parameter_names
        self.states: tuple[str, ...] = model.state_names
        self.bifurcation: str | None = model.bifurcation
        self._index = {name: i for i, name in enumerate(self.parameters)}
        self._nominal = [float(v) for v in model.nominal.values()]
        guess = dict(model.state_guess)
        unknown = set(state_guess or {}) - set(guess)
        if unknown:
            raise EvaluationError(
                f"unknown state(s) {sorted(unknown)}; this model has {list(model.state_names)}"
            )
        for name, value in (state_guess or {}).items():
            value = float(value)
            if not math.isfinite(value):
                raise EvaluationError(f"starting guess for {name} must be finite, got {value}")
            guess[name] = value
        self.state_guess: dict[str, float] = guess
        self._guess = self.ffi.new("double[]", list(guess.values()))
        self._options = self.ffi.new(f"{PREFIX}_options *")
        for name, value in asdict(tolerances).items():
            setattr(self._options, name, value)
        self._params_type = self.ffi.typeof(f"double[{max(len(self.parameters), 1)}]")
        self._result_type = self.ffi.typeof(f"{PREFIX}_result *")
        self._evaluate = getattr(self.lib, f"{PREFIX}_evaluate")
        self._evaluate_batch = getattr(self.lib, f"{PREFIX}_evaluate_batch")
        # Solve once at nominal values; later calls start Newton there (they fall back to
        # the model's guesses if that fails), unless they set the bifurcation guess.
        self._start = self.ffi.new(f"{PREFIX}_start *")
        getattr(self.lib, f"{PREFIX}_prepare_start")(
            self._nominal, self._guess, self._options, self._start
        )

    # -- introspection ----------------------------------------------------------------
    @property
    def nominal(self) -> dict[str, float]:
        return dict(zip(self.parameters, self._nominal))

    def with_tolerances(self, **changes: Any) -> Evaluator:
        """The same compiled model with other numerical settings."""
        return Evaluator(
            self.model,
            self._module,
            self.key,
            replace(self.tolerances, **changes),
            self._build_config,
            self.state_guess,
        )

    def with_guess(self, **states: float) -> Evaluator:
        """The same compiled model with other starting guesses for the equilibrium.

        Where a model has several equilibria or Hopf points, the guesses choose which one
        Newton finds.
        """
        return Evaluator(
            self.model,
            self._module,
            self.key,
            self.tolerances,
            self._build_config,
            {**self.state_guess, **states},
        )

    def __repr__(self) -> str:
        return (
            f"<lyacomp.Evaluator {self.model.name!r}: {len(self.states)} states, "
            f"parameters {list(self.parameters)}, bifurcation {self.bifurcation!r}>"
        )

    # -- one parameter set ------------------------------------------------------------
    def _unknown(self, names: Any) -> EvaluationError:
        bad = sorted(set(names) - set(self._index))
        return EvaluationError(
            f"unknown parameter(s) {bad}; this model has {list(self.parameters)}"
        )

    def __call__(self, params: Mapping[str, float] | None = None, /, **values: float) -> HopfResult:
        """Evaluate one parameter set: ``ev(k=2.1)`` or ``ev({"k": 2.1})``."""
        if params:
            values = {**params, **values}
        ffi = self.ffi
        row = self._nominal.copy()
        if values:
            index = self._index
            try:
                for name, value in values.items():
                    row[index[name]] = value
            except KeyError:
                raise self._unknown(values) from None
        try:
            p = ffi.new(self._params_type, row)  # cffi converts numbers, refuses the rest
        except TypeError:
            bad = {k: v for k, v in values.items() if not isinstance(v, numbers.Real)}
            raise EvaluationError(f"each parameter must be a number; got {bad}") from None
        res = ffi.new(self._result_type)
        start = ffi.NULL if self.bifurcation in values else self._start
        self._evaluate(p, self._guess, start, self._options, res)
        return HopfResult(res[0], self.states, self.bifurcation)

    # -- many parameter sets ----------------------------------------------------------
    def batch(
        self, params: Mapping[str, Any] | None = None, threads: int | None = None, **values: Any
    ) -> BatchResult:
        """Evaluate arrays of parameter sets in C (OpenMP threads, GIL released).

        Arrays broadcast against each other and against scalars; the result arrays
        have the broadcast shape. ``threads=None`` uses all cores.
        """
        values = {**(params or {}), **values}
        if set(values) - set(self._index):
            raise self._unknown(values)
        if threads is not None and (
            isinstance(threads, bool) or not isinstance(threads, int) or threads < 1
        ):
            raise EvaluationError(f"threads must be a positive integer or None, got {threads!r}")
        arrays = []
        for name, nominal in zip(self.parameters, self._nominal):
            raw = values.get(name, nominal)
            try:
                arrays.append(np.asarray(raw, dtype=np.float64))
            except (TypeError, ValueError):
                raise EvaluationError(f"parameter {name}: cannot read {raw!r} as numbers") from None
        try:
            shape = np.broadcast_shapes(*(a.shape for a in arrays))
        except ValueError:
            shapes = {n: a.shape for n, a in zip(self.parameters, arrays)}
            raise EvaluationError(f"parameter arrays do not broadcast together: {shapes}") from None
        count = math.prod(shape)
        columns, strides = [], []
        for a in arrays:
            if a.ndim == 0:
                columns.append(a.reshape(1))
                strides.append(0)
            else:
                columns.append(np.ascontiguousarray(np.broadcast_to(a, shape)).reshape(-1))
                strides.append(1)
        n = len(self.states)
        out = {
            "status": np.empty(count, dtype=np.int32),
            "criticality": np.empty(count, dtype=np.int8),
            "cycle_side": np.empty(count, dtype=np.int8),
            "unstable_count": np.empty(count, dtype=np.int32),
            "stable_side": np.empty(count, dtype=np.int8),
            **{
                k: np.empty(count)
                for k in ("l1", "omega", "period", "critical_value", "transversality")
            },
            "equilibrium": np.empty((n, count)),
            "amplitude": np.empty((n, count)),
        }
        if count:
            ffi = self.ffi
            c_out = ffi.new(f"{PREFIX}_batch_out *")
            c_out.status = ffi.cast("int *", ffi.from_buffer(out["status"]))
            c_out.criticality = ffi.cast("signed char *", ffi.from_buffer(out["criticality"]))
            c_out.cycle_side = ffi.cast("signed char *", ffi.from_buffer(out["cycle_side"]))
            c_out.unstable_count = ffi.cast("int *", ffi.from_buffer(out["unstable_count"]))
            c_out.stable_side = ffi.cast("signed char *", ffi.from_buffer(out["stable_side"]))
            for k in (
                "l1",
                "omega",
                "period",
                "critical_value",
                "transversality",
                "equilibrium",
                "amplitude",
            ):
                setattr(c_out, k, ffi.cast("double *", ffi.from_buffer(out[k])))
            c_params = ffi.new(
                "double *[]",
                [ffi.cast("double *", ffi.from_buffer(c)) for c in columns] or [ffi.NULL],
            )
            c_strides = ffi.new("long[]", strides or [0])
            start = ffi.NULL if self.bifurcation in values else self._start
            self._evaluate_batch(
                count,
                c_params,
                c_strides,
                self._guess,
                start,
                self._options,
                threads or 0,
                c_out,
            )
        vector = {k: v.reshape(shape) for k, v in out.items() if v.ndim == 1}
        matrix = {k: out[k].T.reshape(shape + (n,)) for k in ("equilibrium", "amplitude")}
        return BatchResult(states=self.states, **vector, **matrix)

    # -- pickling: re-load (or re-build) from the cache in the receiving process ------
    def __reduce__(self):
        return (_restore, (self.model, self.tolerances, self._build_config, self.state_guess))


def _restore(
    model: Model, tolerances: Tolerances, build_config: Any, state_guess: dict[str, float]
) -> Evaluator:
    from ..pipeline import compile_model

    ev = compile_model(model, config=build_config, tolerances=tolerances)
    return ev.with_guess(**state_guess)
