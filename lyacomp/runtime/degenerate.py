"""Locating the degenerate Hopf point (l1 = 0) along a second parameter.

The Newton iteration runs in C (templates/stage_degenerate.c.j2); this module checks the
request, calls it and turns its outcome into a result or an error a user can act on.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from ..errors import DegeneratePointError, EvaluationError
from ..status import Status
from .results import HopfResult

if TYPE_CHECKING:
    from .evaluator import Evaluator

_OWN_CODES = {
    -1: "Newton on l1 = 0 did not converge within max_iter steps",
    -2: "l1 does not change with {name} here (zero slope): no switch of onset type nearby",
    -3: "{name} is the bifurcation parameter; choose another parameter",
}


@dataclass(frozen=True)
class DegeneratePoint:
    """Where the onset type switches: l1 = 0 at ``value`` of ``parameter``.

    ``l2`` decides the onset there (negative: soft, positive: hard); ``slope`` is
    dl1/d(parameter) at the point (sign: on which side of ``value`` the onset is hard).
    """

    parameter: str
    value: float
    critical_value: float | None
    omega: float
    l1: float
    l2: float
    slope: float
    steps: int
    hopf: HopfResult

    @property
    def hard_side(self) -> str:
        """'above' or 'below' ``value``: where l1 > 0 (hard onset, to first order)."""
        return "above" if self.slope > 0 else "below"

    def to_dict(self) -> dict[str, Any]:
        """The JSON form (the keys of ``lyacomp eval --degenerate-in``)."""
        return {
            "parameter": self.parameter,
            "value": self.value,
            "critical_value": self.critical_value,
            "omega": self.omega,
            "l2": self.l2,
            "l1": self.l1,
            "slope": self.slope,
            "hard_side": self.hard_side,
            "steps": self.steps,
        }


def locate_degenerate(
    ev: Evaluator, name: str, row: list[float], use_start: bool
) -> DegeneratePoint:
    """Newton in C for the value of parameter ``name`` where l1 = 0, from its value in ``row``."""
    if name not in ev.parameters:
        raise EvaluationError(f"unknown parameter {name!r}; this model has {list(ev.parameters)}")
    if name == ev.bifurcation:
        raise DegeneratePointError(_OWN_CODES[-3].format(name=name))
    ffi = ev.ffi
    p = ffi.new(ev._params_type, row)
    found = ffi.new("double[4]")
    steps = ffi.new("int *")
    res = ffi.new(ev._result_type)
    start = ev._start if use_start else ffi.NULL
    fn = ev.lib.lyc_degenerate_point
    code = fn(p, ev.parameters.index(name), ev._guess, start, ev._options, found, steps, res)
    start_value = row[ev.parameters.index(name)]
    if code != 0:
        if code in _OWN_CODES:
            why = _OWN_CODES[code].format(name=name)
        else:
            status = Status(code)
            why = f"the Hopf point was lost on the way ({status.label}: {status.explanation})"
        raise DegeneratePointError(
            f"no degenerate Hopf point found along {name} from {name} = {start_value:g} "
            f"after {steps[0]} step(s): {why}; try another starting value with --set {name}=..."
        )
    hopf = HopfResult(res[0], ev.states, ev.bifurcation)
    return DegeneratePoint(
        parameter=name,
        value=float(found[0]),
        critical_value=float(res.critical_value) if ev.bifurcation is not None else None,
        omega=float(res.omega),
        l1=float(found[1]),
        l2=float(found[2]),
        slope=float(found[3]),
        steps=int(steps[0]),
        hopf=hopf,
    )
