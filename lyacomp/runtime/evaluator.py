"""Stage 6: the Python shim around a compiled model."""

from __future__ import annotations

import decimal
import math
import numbers
import operator
import threading
from collections.abc import Callable, Mapping
from dataclasses import asdict, dataclass, replace
from types import ModuleType
from typing import Any

import numpy as np

from ..errors import EvaluationError, InternalError
from ..model import Model
from ..status import Criticality
from . import operating as op
from .batch_buffers import BatchBuffers
from .degenerate import DegeneratePoint, locate_degenerate
from .derivatives import batch_derivative_struct, batch_derivatives, derivatives_of
from .results import NO_EXTRAS, BatchResult, HopfResult, SearchInfo

PREFIX = "lyc"

PLAIN = "plain"
"""The library a first compile builds: Hopf point, l1, batch drivers, operating search."""
EXTENDED = "extended"
"""The twin library built on first use: everything, also l2, the degenerate point and the
exact parameter derivatives (one library, so these stages can call each other)."""
VARIANTS = (PLAIN, EXTENDED)

MAX_THREADS = 4096
"""Largest thread count a batch call takes (the C driver takes an int; more is a typo)."""

MAX_ITER = 100_000
"""Largest Newton iteration count per stage."""

_DEGENERATE = int(Criticality.DEGENERATE)  # compared with the C struct's int per call

_FLOAT64 = np.float64  # a float subclass: cffi reads its double as it reads a float's

_FAST_TYPES = frozenset((float, _FLOAT64))
"""The value types the keyword fast path of the scalar call passes to C unchecked."""

_NEW = object.__new__

_REAL_KINDS = "biuf"  # numpy dtype kinds of real numbers: bool, signed, unsigned, float


def _describe(value: Any) -> str:
    """A short description of a refused value (never the whole of a large input)."""
    if isinstance(value, int) and not isinstance(value, bool) and abs(value) >= 10**30:
        return f"an integer of about 10^{int(value.bit_length() * math.log10(2))}"
    if isinstance(value, np.ndarray):
        return f"an array of dtype {value.dtype}"
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def _real_scalar(value: Any, what: str) -> float:
    """``value`` as a float when it is a real number (bool, int, float, numpy real); else
    an EvaluationError naming ``what``."""
    if isinstance(value, float):  # numpy float64 included
        return float(value)
    if isinstance(value, np.ndarray | np.generic):
        array = np.asarray(value)
        if array.ndim != 0:
            raise EvaluationError(
                f"{what} must be one number, got an array of shape {array.shape} "
                "(use batch for arrays)"
            )
        return float(_real_array(array, what))
    if isinstance(value, numbers.Real | decimal.Decimal):
        try:
            return float(value)
        except OverflowError:
            raise EvaluationError(
                f"{what} is {_describe(value)}, beyond the range of a double (about 1.8e308)"
            ) from None
    raise EvaluationError(f"{what} must be a real number, got {_describe(value)}")


def _real_array(raw: Any, what: str) -> np.ndarray:
    """``raw`` (a number, a sequence of numbers or a real numpy array) as float64; other
    inputs (complex, strings, dates, objects, masked arrays) give an EvaluationError
    naming ``what``."""
    if isinstance(raw, np.ma.MaskedArray):
        raise EvaluationError(
            f"{what} is a masked array; fill the masked entries first "
            "(for example a.filled(np.nan))"
        )
    if not isinstance(raw, np.ndarray | np.generic):
        if isinstance(raw, str | bytes) or not hasattr(raw, "__len__"):
            return np.asarray(_real_scalar(raw, what))
        try:
            array = np.asarray(raw)
        except (TypeError, ValueError):
            raise EvaluationError(f"{what}: cannot read {_describe(raw)} as an array") from None
        if array.dtype.kind == "O":
            # Python numbers numpy keeps as objects (ints beyond 64 bits, None, mixtures)
            flat = [_real_scalar(v, what) for v in array.reshape(-1)]
            return np.array(flat, dtype=np.float64).reshape(array.shape)
    else:
        array = np.asarray(raw)
    if array.dtype.kind not in _REAL_KINDS:
        raise EvaluationError(
            f"{what} must hold real numbers, got dtype {array.dtype} "
            "(complex, text, dates and objects are refused)"
        )
    out = array.astype(np.float64, copy=False)
    if array.dtype.kind == "f" and array.dtype.itemsize > 8:
        with np.errstate(over="ignore"):
            out = array.astype(np.float64)
        if (np.isinf(out) & np.isfinite(array)).any():
            raise EvaluationError(f"{what} holds values beyond the range of a double")
    return out


def _names(mapping: Any, keywords: dict[str, Any], what: str) -> dict[str, Any]:
    """User names from the positional mapping and the keywords (keywords win)."""
    if mapping is None:
        return keywords
    if not isinstance(mapping, Mapping):
        raise EvaluationError(
            f"{what} are given as a mapping of name -> value, got {_describe(mapping)}"
        )
    return {**mapping, **keywords}


_CALL = 0
"""The key of the call context among the parameter names of the fast path's mapping (a
keyword is always a string)."""


def _in_order(keys: tuple[Any, ...]) -> Callable[[Mapping[Any, Any]], tuple]:
    """A function of a mapping: its values of ``keys``, as a tuple in that order (one C call
    for two keys or more; itemgetter of one key gives the value, not a tuple)."""
    if len(keys) >= 2:
        return operator.itemgetter(*keys)
    return lambda mapping: tuple(mapping[key] for key in keys)


#: What delay kernels do not compute yet (the refusals of ``delay_refusal``).
DELAY_L2 = "the second Lyapunov coefficient"
DELAY_DEGENERATE = "the degenerate point"
DELAY_DERIVATIVES = "exact differentiation (derivatives=True)"


def delay_refusal(what: str) -> EvaluationError:
    """The one refusal of what delay kernels do not compute yet."""
    return EvaluationError(
        f"{what} is not available for models with delays yet (only for ODE models); the delay"
        " kernel gives l1, the critical value, omega, the equilibrium and the root count"
        " (with the guess-based or the operating-point search)"
    )


def _derivatives_need_guess_search(method: str, guess: Any = None) -> None:
    """Exact derivatives come with the guess-based search from the nominal solution."""
    if method == "operating" or guess is not None:
        raise EvaluationError(
            "derivatives=True runs the guess-based search from the nominal solution; it cannot"
            " be combined with the operating-point search or per-sample guesses (pass"
            " search='guess' and no guess=)"
        )


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
            ok = not isinstance(value, bool) and isinstance(value, numbers.Real)
            try:
                ok = ok and math.isfinite(value) and value >= 0
            except OverflowError:  # an int beyond float range
                ok = False
            if not ok:
                raise EvaluationError(
                    f"tolerance {name} must be a finite number >= 0, got {_describe(value)}"
                )
        if int(self.max_iter) != self.max_iter or not 1 <= self.max_iter <= MAX_ITER:
            raise EvaluationError(
                f"max_iter must be an integer from 1 to {MAX_ITER}, got {_describe(self.max_iter)}"
            )


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
            value = _real_scalar(value, f"starting guess for {name}")
            if not math.isfinite(value):
                raise EvaluationError(f"starting guess for {name} must be finite, got {value}")
            guess[name] = value
        self.state_guess: dict[str, float] = guess
        self._guess = self.ffi.new("double[]", list(guess.values()))
        self._options = self.ffi.new(f"{PREFIX}_options *")
        for name, value in asdict(tolerances).items():
            setattr(self._options, name, int(value) if name == "max_iter" else float(value))
        self._params_type = self.ffi.typeof(f"double[{max(len(self.parameters), 1)}]")
        self._result_type = self.ffi.typeof(f"{PREFIX}_result *")
        self._evaluate = getattr(self.lib, f"{PREFIX}_evaluate")
        self._null = self.ffi.NULL
        # For the scalar call: the nominal values in a buffer C only reads (so threads share
        # it), and where the bifurcation parameter's guess sits.
        self._c_nominal = self.ffi.new(self._params_type, self._nominal)
        self._bif_index = self._index.get(self.bifurcation) if self.bifurcation else None
        self._nominal_start = None if self._bif_index is None else self._nominal[self._bif_index]
        # The keyword fast path of __call__ runs the default search, the guess-based one, and
        # reads operating= and search= as options: neither may be a parameter name.
        self._fast = model.operating is None and not {"operating", "search"} & set(self._index)
        self._context = (self.states, self.bifurcation)  # shared by the results
        self._evaluate_batch = getattr(self.lib, f"{PREFIX}_evaluate_batch")
        self._evaluate_batch_from = getattr(self.lib, f"{PREFIX}_evaluate_batch_from")
        # l2 and the degenerate point live in the extended variant (none for delay models)
        self._l2_kernel = getattr(self.lib, f"{PREFIX}_second_coefficient", None)
        self._has_l2 = not model.delays
        self._extended = self._l2_kernel is not None
        self._twins: dict[str, Evaluator] = {}
        self._twin_lock = threading.Lock()
        # Solve once at nominal values; later calls start Newton there (they fall back to
        # the model's guesses if that fails), unless they set the bifurcation guess.
        self._start = self.ffi.new(f"{PREFIX}_start *")
        getattr(self.lib, f"{PREFIX}_prepare_start")(
            self._nominal, self._guess, self._options, self._start
        )
        self._prepare_scalar()

    def _prepare_scalar(self) -> None:
        """The guess-based scalar call: the C entry (``_entry``, called with a call context
        and the parameters), the contexts of a warm start and of a start from the guesses
        (``_warm``, ``_cold``), and ``_scalar``: what the keyword fast path of __call__
        reads, in one attribute (one load instead of ten): the entry; its arguments at
        nominal values; the same by name (the call context under the key ``_CALL``), their
        count and the getter that puts such a mapping in argument order; the context of a
        call from the guesses; the results' shared context; the search of a call at the
        nominal guess; the bifurcation parameter."""
        ffi = self.ffi
        entry = getattr(self.lib, f"{PREFIX}_evaluate_values", None)
        if entry is None:  # no parameters, or too many for an argument list (api.h.j2)
            entry = self._evaluate_array
            warm, cold = (self._guess, self._start), (self._guess, self._null)
        else:
            warm, cold = ffi.new(f"{PREFIX}_call *"), ffi.new(f"{PREFIX}_call *")
            for call, start in ((warm, self._start), (cold, self._null)):
                call.state_guess, call.start, call.opt = self._guess, start, self._options
        self._entry, self._warm, self._cold = entry, warm, cold
        defaults = {_CALL: warm, **dict(zip(self.parameters, self._nominal))}
        self._scalar = (
            entry,
            (warm, *self._nominal),
            defaults,
            len(defaults),
            _in_order(tuple(defaults)),
            cold,
            self._context,
            ("guess", self._nominal_start),
            self.bifurcation,
        )

    def _evaluate_array(self, call: tuple, *row: float) -> Any:
        """What ``<prefix>_evaluate_values`` does, for models without it: the parameters as
        an array, a fresh result struct."""
        res = self.ffi.new(self._result_type)
        self._evaluate(list(row) or self._c_nominal, *call, self._options, res)
        return res

    # -- introspection ----------------------------------------------------------------
    @property
    def nominal(self) -> dict[str, float]:
        return dict(zip(self.parameters, self._nominal))

    def with_tolerances(self, /, **changes: Any) -> Evaluator:
        """The same compiled model with other numerical settings (names of Tolerances)."""
        unknown = sorted(set(changes) - set(asdict(self.tolerances)))
        if unknown:
            raise EvaluationError(
                f"unknown tolerance(s) {unknown}; the settings are {list(asdict(self.tolerances))}"
            )
        return Evaluator(
            self.model,
            self._module,
            self.key,
            replace(self.tolerances, **changes),
            self._build_config,
            self.state_guess,
        )

    def with_guess(
        self, guesses: Mapping[str, float] | None = None, /, **states: float
    ) -> Evaluator:
        """The same compiled model with other starting guesses for the equilibrium:
        ``ev.with_guess(x=0.5)`` or ``ev.with_guess({"x": 0.5})``.

        Where a model has several equilibria or Hopf points, the guesses choose which one
        Newton finds.
        """
        states = _names(guesses, states, "starting guesses")
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

    def __call__(self, params: Mapping[str, float] | None = None, /, **values: Any) -> HopfResult:
        """Evaluate one parameter set: ``ev(k=2.1)`` or ``ev({"k": 2.1})``.

        Every value must be one real number (see :meth:`batch` for the rules).
        ``search="operating"`` (the default when the model declares ``operating`` or
        ``operating=`` is given) follows the equilibrium from that stable operating value
        of the bifurcation parameter to the first loss of stability; ``search="guess"``
        runs Newton from the starting guesses (faster, and it finds the Hopf point nearest
        the guesses, first loss of stability or not). Parameters named ``operating`` or
        ``search`` go in the mapping. ``l2=True`` also computes the second Lyapunov
        coefficient (it is computed anyway when l1 is degenerate); in a model with a
        parameter named ``l2`` that keyword is the parameter, and :meth:`evaluate_l2`
        asks for l2. With ``derivatives=True`` the result also carries the exact
        derivatives of l1, the critical value, omega and the equilibrium with respect to
        every parameter other than the bifurcation parameter (``result.derivatives``), from
        the same C call (guess-based search); in a model with a parameter named
        ``derivatives`` that keyword is the parameter: use :meth:`evaluate_derivatives`.
        """
        # operating= and search= are read from the keywords, not declared keyword-only:
        # declared names cost every parameter keyword a string comparison per name.
        if params is None and self._fast:
            # The common call (parameter keywords, Python or numpy float64 values) skips the
            # general checks; anything else leaves row None, to take them.
            (entry, args, defaults, count, in_order, cold, context, search, bif) = self._scalar
            if values:
                # One merge gives every parameter a value (and the call context its place
                # before them); a name that is no parameter (or operating=, search=, l2=, ...)
                # makes the mapping longer.
                merged = {**defaults, **values}
                if len(merged) == count and _FAST_TYPES.issuperset(map(type, values.values())):
                    if bif in values:  # bif None: no keyword is None
                        merged[_CALL], search = cold, ("guess", float(values[bif]))
                    args = in_order(merged)
                else:
                    args = None
            if args is not None:
                # The values go to C as arguments and the struct comes back by value: nothing
                # is shared between calls or threads, and the result owns its copy.
                res = entry(*args)
                result = _NEW(HopfResult)  # four stores instead of a call of __init__
                result._raw = res
                result._context = context
                result._search = search
                result._extras = NO_EXTRAS
                if res.criticality == _DEGENERATE and self._has_l2:
                    self._second_coefficient(args[1:] or self._c_nominal, res, result)
                return result
        operating = values.pop("operating", None)
        search = values.pop("search", None)
        want_l2 = False
        if "l2" in values and "l2" not in self._index:
            want_l2 = values.pop("l2")
            if not isinstance(want_l2, bool | np.bool_):
                raise EvaluationError(f"l2 must be True or False, got {_describe(want_l2)}")
        if "derivatives" in values and "derivatives" not in self._index:
            flag = values.pop("derivatives")
            if not isinstance(flag, bool | np.bool_):
                raise EvaluationError(f"derivatives must be True or False, got {_describe(flag)}")
            if flag:
                _derivatives_need_guess_search(op.chosen_search(self, search, operating))
                return self._call_derivatives(_names(params, values, "parameters"), bool(want_l2))
        return self._evaluate_one(params, values, bool(want_l2), operating, search)

    def evaluate_l2(
        self,
        params: Mapping[str, float] | None = None,
        /,
        *,
        operating: float | None = None,
        search: str | None = None,
        **values: float,
    ) -> HopfResult:
        """Like calling the evaluator, always with the second Lyapunov coefficient."""
        return self._evaluate_one(params, values, True, operating, search)

    def _evaluate_one(
        self,
        params: Any,
        values: dict[str, Any],
        l2: bool,
        operating: Any = None,
        search: str | None = None,
    ) -> HopfResult:
        method = op.chosen_search(self, search, operating)
        if params is not None:
            values = _names(params, values, "parameters")
        # The operating search takes the parameters as a list (cffi passes it as a temporary
        # array, so threads sharing the evaluator share no buffer), the nominal ones as the
        # read-only buffer; the guess-based search as arguments of the C entry. The result
        # struct is the HopfResult's own storage, read field by field when asked.
        if values:
            p = row = self._nominal.copy()
            index = self._index
            try:
                for name, value in values.items():
                    row[index[name]] = (
                        value if type(value) is float else _real_scalar(value, f"parameter {name}")
                    )
            except KeyError:
                raise self._unknown(values) from None
        else:
            row, p = self._nominal, self._c_nominal
        if method != "operating":
            call = self._cold if self.bifurcation in values else self._warm
            guess = None if self._bif_index is None else row[self._bif_index]
            return self._guess_call(row, guess, call, l2)
        res = self.ffi.new(self._result_type)
        result = self._call_operating(p, row, operating, res)
        if l2 or (res.criticality == _DEGENERATE and self._has_l2):
            self._second_coefficient(p, res, result)
        return result

    def _guess_call(
        self, row: list[float], guess: float | None, call: Any, l2: bool = False
    ) -> HopfResult:
        """The guess-based search at parameters ``row`` with the call context ``call`` (from
        the nominal solution, ``_warm``, or from the guesses, ``_cold``); l2 when asked for
        or l1 is degenerate."""
        res = self._entry(call, *row)
        result = HopfResult._fresh(res, self._context, guess)
        if l2 or (res.criticality == _DEGENERATE and self._has_l2):
            self._second_coefficient(row or self._c_nominal, res, result)
        return result

    def _call_operating(self, p: Any, row: Any, operating: Any, res: Any) -> HopfResult:
        """One evaluation by the operating-point search."""
        value = self.model.operating if operating is None else operating
        value = _real_scalar(value, "operating value")
        guess = np.asarray(row[self._bif_index])
        direction = int(op.directions(self, guess, op.check_finite(np.asarray(value))))
        info = self.ffi.new(f"{PREFIX}_search *")
        evaluate = getattr(self.lib, f"{PREFIX}_evaluate_operating")
        evaluate(p, self._guess, value, direction, self._options, res, info)
        search = SearchInfo("operating", value, op.word(direction), info.steps, info.loss_value)
        return HopfResult(res, self.states, self.bifurcation, search)

    def _second_coefficient(self, p: Any, res: Any, result: HopfResult) -> None:
        """Compute l2 at the Hopf point of ``res`` and attach it to ``result`` (in the
        extended twin when this library is the plain one)."""
        if not self._has_l2:
            raise delay_refusal(DELAY_L2)
        twin = self._twin(EXTENDED)
        ffi = twin.ffi
        if self.ffi.typeof(res).kind == "struct":  # returned by value (the scalar call)
            res = self.ffi.addressof(res)
        if twin is not self:
            # The struct types belong to each library's ffi: copy the bytes across (the
            # layout is the same, both come from the same model and api.h.j2).
            size = self.ffi.sizeof(res[0])
            res, copy = ffi.new(twin._result_type), res
            ffi.memmove(res, self.ffi.buffer(copy, size), size)
            p = ffi.new(twin._params_type, list(p))
        value = ffi.new("double *")
        gain = ffi.new("double[]", len(self.states))
        twin._l2_kernel(p, res, value, gain)
        result._set_second_coefficient(
            float(value[0]), {s: float(gain[i]) for i, s in enumerate(self.states)}
        )

    def degenerate_point(
        self, name: str, params: Mapping[str, float] | None = None, /, **values: float
    ) -> DegeneratePoint:
        """Where the onset type switches along parameter ``name`` (l1 = 0), by Newton in C
        from ``name``'s value (nominal, or given here), with l2 there.

        Raises DegeneratePointError when it is not found."""
        if not self._has_l2:
            raise delay_refusal(DELAY_DEGENERATE)
        values = _names(params, values, "parameters")
        row = self._nominal.copy()
        try:
            for key, value in values.items():
                row[self._index[key]] = _real_scalar(value, f"parameter {key}")
        except KeyError:
            raise self._unknown(values) from None
        twin = self._twin(EXTENDED)
        return locate_degenerate(twin, name, row, self.bifurcation not in values)

    def evaluate_derivatives(
        self, params: Mapping[str, float] | None = None, /, **values: float
    ) -> HopfResult:
        """``ev(..., derivatives=True)``, also for models with a parameter of that name."""
        return self._call_derivatives(_names(params, values, "parameters"))

    def _call_derivatives(self, values: dict[str, Any], l2: bool = False) -> HopfResult:
        twin = self._with_derivatives()
        if twin is not self:
            return twin._call_derivatives(values, l2)
        entry = getattr(self.lib, f"{PREFIX}_evaluate_derivatives")
        ffi = self.ffi
        row = self._row(values)
        p = ffi.new(self._params_type, row)
        res = ffi.new(self._result_type)
        der = ffi.new(f"{PREFIX}_derivatives *")
        start = ffi.NULL if self.bifurcation in values else self._start
        entry(p, self._guess, start, self._options, res, der)
        search = SearchInfo("guess", row[self._index[self.bifurcation]])
        result = HopfResult(
            res,
            self.states,
            self.bifurcation,
            search,
            derivatives=derivatives_of(der, self.parameters, self),
        )
        if l2 or (res.criticality == Criticality.DEGENERATE and self._has_l2):
            self._second_coefficient(p, res, result)
        return result

    def _row(self, values: Mapping[str, Any]) -> list[float]:
        row = self._nominal.copy()
        try:
            for name, value in values.items():
                row[self._index[name]] = _real_scalar(value, f"parameter {name}")
        except KeyError:
            raise self._unknown(values) from None
        return row

    @property
    def derivative_parameters(self) -> tuple[str, ...]:
        """The parameters derivatives are taken for, in the order of the columns of
        ``BatchResult.derivatives`` arrays: model order without the bifurcation parameter."""
        return tuple(p for p in self.parameters if p != self.bifurcation)

    def _with_derivatives(self) -> Evaluator:
        """The evaluator whose library has the derivative entry points: this one, or its
        extended twin."""
        if self.bifurcation is None:
            raise EvaluationError(
                "derivatives need a bifurcation parameter: without one the given point is not "
                "followed when a parameter changes (add [bifurcation] parameter = ... to the model)"
            )
        if self.model.delays:
            raise delay_refusal(DELAY_DERIVATIVES)
        return self._twin(EXTENDED)

    def _twin(self, variant: str) -> Evaluator:
        """This evaluator if its library is ``variant`` (or holds everything of it), else
        the same model, tolerances and guesses built as ``variant``: once per evaluator,
        on first use, through the cache (so another process or thread builds it once)."""
        if variant == PLAIN or self._extended:
            return self
        twin = self._twins.get(variant)
        if twin is None:
            with self._twin_lock:
                twin = self._twins.get(variant)
                if twin is None:
                    if _TWIN_BUILD is None:
                        raise InternalError("no twin build hook registered; import lyacomp first")
                    twin = _TWIN_BUILD(
                        self.model, self.tolerances, self._build_config, self.state_guess, variant
                    )
                    self._twins[variant] = twin
        return twin

    # -- many parameter sets ----------------------------------------------------------
    def batch(
        self,
        params: Mapping[str, Any] | None = None,
        /,
        *,
        threads: int | None = None,
        guess: Mapping[str, Any] | None = None,
        operating: Any = None,
        search: str | None = None,
        **values: Any,
    ) -> BatchResult:
        """Evaluate arrays of parameter sets in C (OpenMP threads, GIL released):
        ``ev.batch({"k": array})`` or ``ev.batch(k=array)``.

        Arrays broadcast against each other and against scalars; the result arrays
        have the broadcast shape. Values must be real numbers: Python bool, int and float,
        numpy arrays and scalars of real dtypes, sequences of these; complex, text, dates,
        object and masked arrays are refused. ``threads=None`` uses all cores. A keyword
        named ``threads`` is always the option: a parameter of that name goes in the mapping.

        ``guess`` gives each sample its own starting point: arrays (or numbers) for states,
        and for the bifurcation parameter, broadcast like the parameters. With state
        guesses every sample starts from its own guesses (states not given keep the
        evaluator's guesses), not from the nominal solution; studies pass a solved
        neighbour's equilibrium and critical value to stay on its branch. (A model
        parameter named ``guess`` still takes a keyword value that is not a mapping.)

        ``search`` and ``operating`` are those of a scalar call; ``operating`` may be an
        array (one operating value per sample, broadcast like the parameters). ``guess``
        belongs to the guess-based search and is refused with the operating search.

        ``derivatives=True`` adds ``result.derivatives``: a mapping from ``"l1"``,
        ``"critical_value"`` and ``"omega"`` to arrays of shape ``shape + (parameters,)``
        and from ``"equilibrium"`` to ``shape + (parameters, states)``, the parameter axis
        in the order of :attr:`derivative_parameters` (NaN where a sample is not ok). In a
        model with a parameter named ``derivatives`` that keyword is the parameter; use
        :meth:`batch_derivatives` then.

        ``out=`` takes buffers from :meth:`batch_buffers` (room for at least this batch's
        samples, and for the derivatives when they are asked for) and writes every output
        into them instead of fresh arrays: the same numbers, bit for bit, without the page
        faults of new memory, for loops that evaluate chunk after chunk. The arrays of the
        result are then views on the buffers, overwritten by the next call that uses them
        (the derivative arrays too, unless the bifurcation parameter sits between other
        parameters: they are copies then). Inputs must not share memory with the buffers
        (copy a previous result's arrays first). A model parameter named ``out`` takes a
        keyword value that is not a :class:`BatchBuffers`.
        """
        derivatives = False
        if "derivatives" in values and "derivatives" not in self._index:
            derivatives = values.pop("derivatives")
            if not isinstance(derivatives, bool | np.bool_):
                raise EvaluationError(
                    f"derivatives must be True or False, got {_describe(derivatives)}"
                )
        buffers = self._out_option(values)
        return self._batch(
            params, threads, bool(derivatives), values, guess, operating, search, buffers
        )

    def batch_derivatives(
        self, params: Mapping[str, Any] | None = None, /, *, threads: int | None = None, **values
    ) -> BatchResult:
        """``ev.batch(..., derivatives=True)``, also for models with a parameter of that name
        (``out=`` as in :meth:`batch`)."""
        buffers = self._out_option(values)
        return self._batch(params, threads, True, values, None, None, None, buffers)

    def batch_buffers(self, capacity: int, *, derivatives: bool = False) -> BatchBuffers:
        """Output arrays for ``batch(..., out=buffers)`` calls of up to ``capacity`` samples
        each (a smaller batch uses the first places): allocated once, mapped by the first
        call, reused by every later one. ``derivatives=True`` adds room for the derivative
        outputs (``parameters * (3 + states)`` more doubles per sample). The buffers fit
        every evaluator of the same model (other tolerances or guesses, the extended twin).
        """
        if isinstance(capacity, bool | np.bool_) or not isinstance(capacity, numbers.Integral):
            raise EvaluationError(
                f"capacity must be a positive integer (samples), got {_describe(capacity)}"
            )
        if int(capacity) < 1:
            raise EvaluationError(f"capacity must be at least 1 sample, got {int(capacity)}")
        if not isinstance(derivatives, bool | np.bool_):
            raise EvaluationError(
                f"derivatives must be True or False, got {_describe(derivatives)}"
            )
        return BatchBuffers(
            int(capacity), self.states, self.parameters, derivatives=bool(derivatives)
        )

    def _out_option(self, values: dict[str, Any]) -> BatchBuffers | None:
        """The ``out=`` buffers taken out of the keywords (None without them)."""
        if "out" not in values:
            return None
        if "out" in self._index and not isinstance(values["out"], BatchBuffers):
            return None  # the value of a parameter named `out`
        buffers = values.pop("out")
        if buffers is not None and not isinstance(buffers, BatchBuffers):
            raise EvaluationError(
                f"out= takes the buffers of ev.batch_buffers(capacity), got {_describe(buffers)}"
            )
        return buffers

    def _batch(
        self,
        params: Mapping[str, Any] | None,
        threads: Any,
        derivatives: bool,
        values: dict,
        guess: Mapping[str, Any] | None,
        operating: Any,
        search: str | None,
        buffers: BatchBuffers | None = None,
    ) -> BatchResult:
        method = op.chosen_search(self, search, operating)
        if derivatives:
            _derivatives_need_guess_search(method, guess)
            twin = self._with_derivatives()
            if twin is not self:
                return twin._batch(params, threads, True, values, guess, operating, search, buffers)
        values = _names(params, values, "parameters")
        if guess is not None and not isinstance(guess, Mapping) and "guess" in self._index:
            # a parameter named `guess` given as a keyword (a mapping is never its value)
            values, guess = {**values, "guess": guess}, None
        if method == "operating" and guess is not None:
            raise EvaluationError(
                "guess= starts the guess-based search; the operating-point search starts"
                " from the equilibrium at the operating value: give one or the other"
                " (search='guess' to use the guesses)"
            )
        if set(values) - set(self._index):
            raise self._unknown(values)
        threads = self._threads(threads)
        guesses = self._guess_arrays(guess)
        if self.bifurcation is not None and self.bifurcation in (guess or {}):
            values = {**values, self.bifurcation: guess[self.bifurcation]}
        arrays = [
            _real_array(values[name], f"parameter {name}")
            if name in values
            else np.asarray(nominal)
            for name, nominal in zip(self.parameters, self._nominal)
        ]
        if method == "operating":
            value = self.model.operating if operating is None else operating
            op_array = op.check_finite(_real_array(value, "operating value"))
        else:
            op_array = np.asarray(0.0)
        try:
            shape = np.broadcast_shapes(
                *(a.shape for a in [*arrays, *guesses.values()]), op_array.shape
            )
        except ValueError:
            shapes = {n: a.shape for n, a in zip(self.parameters, arrays)}
            shapes.update({f"guess {n}": a.shape for n, a in guesses.items()})
            shapes["(operating)"] = op_array.shape
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
        run = (count, shape, columns, strides, arrays, guesses, op_array, values, method, threads)
        if buffers is None:
            fresh = BatchBuffers(
                count,
                self.states,
                self.parameters,
                derivatives=derivatives,
                operating=method == "operating",
            )
            return self._run_batch(fresh, derivatives, *run)
        buffers.check(self, count, derivatives)
        inputs = [*columns, *guesses.values(), op_array]
        if any(buffers.overlaps(a) for a in inputs):
            raise EvaluationError(
                "an input of this batch shares memory with the out= buffers (a view on a result"
                " of an earlier call with them?): pass a copy (np.array(...))"
            )
        with buffers.claimed():
            return self._run_batch(buffers, derivatives, *run)

    def _run_batch(
        self,
        buffers: BatchBuffers,
        derivatives: bool,
        count: int,
        shape: tuple[int, ...],
        columns: list[np.ndarray],
        strides: list[int],
        arrays: list[np.ndarray],
        guesses: dict[str, np.ndarray],
        op_array: np.ndarray,
        values: dict[str, Any],
        method: str,
        threads: int,
    ) -> BatchResult:
        """The C call of a checked batch, writing into ``buffers``; the result on them."""
        n = len(self.states)
        out = buffers.outputs(count)
        extra: dict[str, np.ndarray] = {}
        der_out = buffers.derivative_outputs(count) if derivatives else {}
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
            if method == "operating":
                bif_guess = arrays[self._index[self.bifurcation]]
                extra = self._batch_operating(
                    count, shape, c_params, c_strides, bif_guess, op_array, threads, c_out, buffers
                )
            elif guesses:
                state_columns, state_strides = self._guess_columns(guesses, shape)
                c_guesses = ffi.new(
                    "double *[]",
                    [ffi.cast("double *", ffi.from_buffer(c)) for c in state_columns],
                )
                self._evaluate_batch_from(
                    count,
                    c_params,
                    c_strides,
                    c_guesses,
                    ffi.new("long[]", state_strides),
                    self._options,
                    threads,
                    c_out,
                )
            else:
                start = ffi.NULL if self.bifurcation in values else self._start
                args = (count, c_params, c_strides, self._guess, start, self._options, threads)
                if derivatives:
                    c_der = batch_derivative_struct(ffi, der_out)
                    self.lib.lyc_evaluate_batch_derivatives(*args, c_out, c_der)
                else:
                    self._evaluate_batch(*args, c_out)
        elif method == "operating":
            loss, steps = buffers.operating(0)
            extra = {"loss_value": loss.reshape(shape), "search_steps": steps.reshape(shape)}
        vector = {k: v.reshape(shape) for k, v in out.items() if v.ndim == 1}
        matrix = {k: out[k].T.reshape(shape + (n,)) for k in ("equilibrium", "amplitude")}
        result = BatchResult(states=self.states, **vector, **matrix, search=method, **extra)
        if derivatives:
            keep = [k for k, p in enumerate(self.parameters) if p != self.bifurcation]
            result = replace(
                result,
                derivatives=batch_derivatives(der_out, keep, shape),
                derivative_parameters=self.derivative_parameters,
            )
        return result

    def _batch_operating(
        self,
        count: int,
        shape: tuple[int, ...],
        c_params: Any,
        c_strides: Any,
        guess: np.ndarray,
        operating: np.ndarray,
        threads: int,
        c_out: Any,
        buffers: BatchBuffers,
    ) -> dict[str, np.ndarray]:
        """The operating-point search over a batch: one operating value and direction per
        sample (broadcast); returns the per-sample loss values and step counts (views on
        ``buffers``)."""
        ffi = self.ffi
        op_column = np.ascontiguousarray(np.broadcast_to(operating, shape), dtype=np.float64)
        dirs = op.directions(self, np.broadcast_to(guess, shape), op_column)
        dirs = np.ascontiguousarray(dirs, dtype=np.int8).reshape(-1)
        op_column = op_column.reshape(-1)
        loss, steps = buffers.operating(count)
        getattr(self.lib, f"{PREFIX}_evaluate_operating_batch")(
            count,
            c_params,
            c_strides,
            ffi.cast("double *", ffi.from_buffer(op_column)),
            1,
            ffi.cast("signed char *", ffi.from_buffer(dirs)),
            1,
            self._guess,
            self._options,
            threads,
            c_out,
            ffi.cast("double *", ffi.from_buffer(loss)),
            ffi.cast("int *", ffi.from_buffer(steps)),
        )
        return {"loss_value": loss.reshape(shape), "search_steps": steps.reshape(shape)}

    def _guess_arrays(self, guess: Mapping[str, Any] | None) -> dict[str, np.ndarray]:
        """The per-sample state guesses of ``batch`` as float arrays (checked names and
        values); the bifurcation parameter's guess is handled as its value."""
        if guess is None:
            return {}
        if not isinstance(guess, Mapping):
            raise EvaluationError(
                f"guess is given as a mapping of name -> values, got {_describe(guess)}"
            )
        allowed = set(self.states) | ({self.bifurcation} if self.bifurcation else set())
        unknown = sorted(set(guess) - allowed)
        if unknown:
            also = f" or the bifurcation parameter {self.bifurcation!r}" if self.bifurcation else ""
            raise EvaluationError(
                f"guess: unknown name(s) {unknown}; give states {list(self.states)}{also}"
            )
        out = {}
        for name in self.states:
            if name in guess:
                array = _real_array(guess[name], f"guess for {name}")
                if not np.isfinite(array).all():
                    raise EvaluationError(f"guess for {name} must be finite everywhere")
                out[name] = array
        return out

    def _guess_columns(
        self, guesses: Mapping[str, np.ndarray], shape: tuple[int, ...]
    ) -> tuple[list[np.ndarray], list[int]]:
        """One contiguous column (stride 1) or one value (stride 0) per state."""
        columns, strides = [], []
        for name in self.states:
            if name not in guesses:
                columns.append(np.array([self.state_guess[name]]))
                strides.append(0)
            elif guesses[name].ndim == 0:
                columns.append(guesses[name].reshape(1))
                strides.append(0)
            else:
                columns.append(
                    np.ascontiguousarray(np.broadcast_to(guesses[name], shape)).reshape(-1)
                )
                strides.append(1)
        return columns, strides

    def _threads(self, threads: Any) -> int:
        """The thread count for C (0: all cores), or an EvaluationError."""
        if threads is None:
            return 0
        hint = (
            "; a parameter named 'threads' goes in the mapping: ev.batch({'threads': ...})"
            if "threads" in self._index
            else ""
        )
        if isinstance(threads, bool | np.bool_) or not isinstance(threads, numbers.Integral):
            raise EvaluationError(
                f"threads must be a positive integer or None, got {_describe(threads)}{hint}"
            )
        if not 1 <= int(threads) <= MAX_THREADS:
            raise EvaluationError(
                f"threads must be from 1 to {MAX_THREADS} (or None for all cores), "
                f"got {_describe(int(threads))}{hint}"
            )
        return int(threads)

    # -- pickling: re-load (or re-build) from the cache in the receiving process ------
    def __reduce__(self):
        return (_restore, (self.model, self.tolerances, self._build_config, self.state_guess))


_REBUILD: Callable[..., Evaluator] | None = None
_TWIN_BUILD: Callable[..., Evaluator] | None = None


def register_rebuild(
    rebuild: Callable[..., Evaluator], twin_build: Callable[..., Evaluator]
) -> None:
    """Set how unpickled evaluators are rebuilt and how the twin library of another
    variant is built on first use (the pipeline registers itself on import, so this layer
    does not import the pipeline back)."""
    global _REBUILD, _TWIN_BUILD
    _REBUILD = rebuild
    _TWIN_BUILD = twin_build


def _restore(
    model: Model, tolerances: Tolerances, build_config: Any, state_guess: dict[str, float]
) -> Evaluator:
    if _REBUILD is None:  # importing lyacomp imports the pipeline, which registers it
        raise InternalError("no rebuild hook registered; import lyacomp before unpickling")
    return _REBUILD(model, tolerances, build_config, state_guess)
