"""Result objects returned by evaluators."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..status import Criticality, Status
from .second_coefficient import CycleFold, cycle_fold

CAUTION = (
    "Local analysis near onset: l1 describes the cycle born at the Hopf point for small "
    "|mu - mu0| only. It is no substitute for testing, nor for the codes and licensed "
    "practice that govern your field."
)


_LABELS = {int(s): s.label for s in Status}
"""Status code -> label, without an enum construction per access."""


def _number(value: float) -> float | None:
    return None if math.isnan(value) else float(value)


@dataclass(frozen=True)
class SearchInfo:
    """Which search located the Hopf point, and where it started."""

    method: str
    """"guess" (Newton from the starting guesses) or "operating" (followed from a stable point)."""
    start_value: float | None
    """The bifurcation parameter's value where the search started (guess or operating value)."""
    direction: str | None = None
    """"up" or "down": where the operating search moved the parameter."""
    steps: int | None = None
    """Continuation steps the operating search took."""
    loss_value: float | None = None
    """Where the operating search saw stability lost (also for a real eigenvalue crossing)."""

    def to_dict(self) -> dict[str, Any]:
        return {
            "method": self.method,
            "start_value": self.start_value,
            "direction": self.direction,
            "steps": self.steps,
            "loss_value": None if self.loss_value is None else _number(self.loss_value),
        }


class _Extras:
    """What a result holds besides the C struct: l2 and the derivatives, when computed."""

    __slots__ = ("l2", "radius_gain", "derivatives")

    def __init__(self, derivatives: dict[str, dict] | None = None):
        self.l2: float | None = None
        self.radius_gain: dict[str, float] | None = None
        self.derivatives = derivatives


_NEW = object.__new__

NO_EXTRAS = _Extras()
"""Shared by the results that have no extras (most scalar calls); never written to."""


class HopfResult:
    """The outcome for one parameter set (a view on the C result struct it owns).

    Numbers are NaN unless ``status == "ok"``.
    """

    # Four slots, so that the scalar call can make one with four stores (``_fresh``, and its
    # copy inlined in ``Evaluator.__call__``'s fast path).
    __slots__ = ("_raw", "_context", "_search", "_extras")

    def __init__(
        self,
        raw: Any,
        states: tuple[str, ...],
        bifurcation: str | None,
        search: SearchInfo | tuple[Any, ...] | None = None,
        *,
        derivatives: dict[str, dict] | None = None,
    ):
        self._raw = raw
        self._context = (states, bifurcation)
        # A tuple holds SearchInfo's arguments: the scalar call leaves building it (about
        # as costly as the C call of a small model) to the first reader.
        self._search = search
        self._extras = NO_EXTRAS if derivatives is None else _Extras(derivatives)

    @staticmethod
    def _fresh(raw: Any, context: tuple[tuple[str, ...], str | None], start: float | None):
        """The result of a scalar guess-based call: ``context`` is ``(states, bifurcation)``,
        shared by the evaluator's results; ``start`` the bifurcation parameter's guess."""
        result = _NEW(HopfResult)  # four stores instead of a call of __init__
        result._raw = raw
        result._context = context
        result._search = ("guess", start)
        result._extras = NO_EXTRAS
        return result

    @property
    def search(self) -> SearchInfo | None:
        """How the point was searched for (None when the caller did not say)."""
        search = self._search
        if type(search) is tuple:
            # threads reading at once may each build one; they are equal
            search = self._search = SearchInfo(*search)
        return search

    def _set_second_coefficient(self, l2: float, radius_gain: dict[str, float]) -> None:
        """Attach l2 (computed on request, or because l1 is degenerate)."""
        if self._extras is NO_EXTRAS:
            self._extras = _Extras()
        self._extras.l2 = l2
        self._extras.radius_gain = radius_gain

    @property
    def l2(self) -> float | None:
        """Second Lyapunov coefficient (None when not computed, NaN when it failed)."""
        return self._extras.l2

    @property
    def degenerate_onset(self) -> str | None:
        """At a degenerate point (l1 = 0), the onset l2 decides: 'soft' (l2 < 0) or 'hard'."""
        l2 = self._extras.l2
        if self.criticality != "degenerate" or l2 is None or not l2 != 0.0:
            return None
        return "soft" if l2 < 0.0 else "hard" if l2 > 0.0 else None

    @property
    def cycle_fold(self) -> CycleFold | None:
        """The fold of cycles bounding the jump, when l1 and l2 have opposite signs."""
        l2 = self._extras.l2
        if l2 is None or not self.ok or self.criticality == "degenerate":
            return None
        bifurcation = self._context[1]
        transversality = self.transversality if bifurcation is not None else None
        critical = self.critical_value if bifurcation is not None else None
        return cycle_fold(
            self.l1, l2, self.omega, transversality, critical, self._extras.radius_gain or {}
        )

    @property
    def derivatives(self) -> dict[str, dict] | None:
        """Exact derivatives when asked for (``ev(..., derivatives=True)``) and ok, else None:
        ``{"l1" | "critical_value" | "omega": {parameter: value},
        "equilibrium": {state: {parameter: value}}}`` over the parameters other than the
        bifurcation parameter."""
        return self._extras.derivatives

    @property
    def status(self) -> str:
        return _LABELS[self._raw.status]

    @property
    def status_code(self) -> Status:
        return Status(self._raw.status)

    @property
    def ok(self) -> bool:
        return self._raw.status == 0

    @property
    def l1(self) -> float:
        """First Lyapunov coefficient (negative: supercritical, positive: subcritical)."""
        return self._raw.l1

    @property
    def omega(self) -> float:
        return self._raw.omega

    @property
    def period(self) -> float:
        return self._raw.period

    @property
    def critical_value(self) -> float:
        return self._raw.critical_value

    @property
    def transversality(self) -> float:
        return self._raw.transversality

    @property
    def bifurcation_parameter(self) -> str | None:
        return self._context[1]

    @property
    def equilibrium(self) -> dict[str, float]:
        return {s: self._raw.equilibrium[i] for i, s in enumerate(self._context[0])}

    @property
    def amplitude(self) -> dict[str, float]:
        """K_j: state j oscillates with amplitude K_j * sqrt(|mu - mu0|) near onset."""
        return {s: self._raw.amplitude[i] for i, s in enumerate(self._context[0])}

    @property
    def cycle_side(self) -> str | None:
        """'above' or 'below' mu0: where the cycle exists."""
        return {1: "above", -1: "below"}.get(self._raw.cycle_side)

    @property
    def criticality(self) -> str | None:
        """'supercritical', 'subcritical', 'degenerate', or None when not ok."""
        return Criticality(self._raw.criticality).label

    @property
    def unstable_count(self) -> int | None:
        """Eigenvalues of A with positive real part besides the critical pair (None when not ok)."""
        count = int(self._raw.unstable_count)
        return None if count < 0 else count

    @property
    def stable_side(self) -> str | None:
        """'above' or 'below' mu0: where the equilibrium is stable; None if on neither side."""
        return {1: "above", -1: "below"}.get(self._raw.stable_side)

    @property
    def first_loss_of_stability(self) -> bool:
        """True when the Hopf point is where a stable equilibrium first loses stability.

        Only then do "soft onset" (supercritical) and "hard onset" (subcritical) apply; with
        other unstable eigenvalues the cycle born at the Hopf point is a saddle cycle.
        """
        return self.ok and self._raw.unstable_count == 0

    @property
    def iterations(self) -> int:
        return self._raw.iterations

    @property
    def explanation(self) -> str:
        return self.status_code.explanation

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form (NaN becomes None); ``l2`` and what follows from it only when
        l2 was computed."""
        amplitude = {k: _number(v) for k, v in self.amplitude.items()}
        out = {
            "status": self.status,
            "l1": _number(self.l1),
            "omega": _number(self.omega),
            "critical_value": _number(self.critical_value),
            "bifurcation_parameter": self._context[1],
            "equilibrium": {k: _number(v) for k, v in self.equilibrium.items()},
            "transversality": _number(self.transversality),
            "amplitude": amplitude,
            "cycle_side": self.cycle_side,
            "period": _number(self.period),
            "criticality": self.criticality,
            "unstable_count": self.unstable_count,
            "stable_side": self.stable_side,
            "search": None if self.search is None else self.search.to_dict(),
        }
        if self._extras.l2 is not None:
            fold = self.cycle_fold
            out["l2"] = _number(self._extras.l2)
            out["degenerate_onset"] = self.degenerate_onset
            out["cycle_fold"] = None if fold is None else fold.to_dict()
        return out

    def derivatives_dict(self) -> dict[str, dict[str, float]] | None:
        """The derivatives of l1, the critical value and omega, JSON-ready (None if missing)."""
        derivatives = self._extras.derivatives
        if derivatives is None:
            return None
        return {q: dict(derivatives[q]) for q in ("l1", "critical_value", "omega")}

    def __repr__(self) -> str:
        if not self.ok:
            return f"HopfResult(status={self.status!r})"
        return (
            f"HopfResult(status='ok', l1={self.l1:.6g}, omega={self.omega:.6g}, "
            f"critical_value={self.critical_value:.6g}, criticality={self.criticality!r})"
        )


@dataclass(frozen=True)
class BatchResult:
    """Outcomes for many parameter sets, as numpy arrays of the input's broadcast shape.

    Float arrays are NaN where ``status != 0``; ``equilibrium`` and ``amplitude`` have a
    trailing axis over the states.
    """

    states: tuple[str, ...]
    status: np.ndarray
    criticality: np.ndarray
    cycle_side: np.ndarray
    unstable_count: np.ndarray
    """int32: eigenvalues with positive real part besides the pair; -1 where not ok."""
    stable_side: np.ndarray
    """int8: +1 stable above mu0, -1 stable below, 0 on neither side (or not ok)."""
    l1: np.ndarray
    omega: np.ndarray
    period: np.ndarray
    critical_value: np.ndarray
    transversality: np.ndarray
    equilibrium: np.ndarray
    amplitude: np.ndarray
    search: str = "guess"
    """"guess" or "operating": which search ran."""
    loss_value: np.ndarray | None = None
    """Operating search: mu where stability was first lost (NaN where not seen)."""
    search_steps: np.ndarray | None = None
    """Operating search: continuation steps per sample."""
    derivatives: dict[str, np.ndarray] | None = None
    """With ``batch(..., derivatives=True)``: ``"l1"``, ``"critical_value"``, ``"omega"``
    shaped ``shape + (parameters,)``, ``"equilibrium"`` shaped ``shape + (parameters,
    states)``; the parameter axis follows ``derivative_parameters``."""
    derivative_parameters: tuple[str, ...] = ()

    def __len__(self) -> int:
        return int(self.status.size)

    @property
    def shape(self) -> tuple[int, ...]:
        return self.status.shape

    @property
    def ok(self) -> np.ndarray:
        return self.status == Status.OK

    @property
    def first_loss(self) -> np.ndarray:
        """Samples whose Hopf point is the first loss of stability of a stable equilibrium."""
        return self.ok & (self.unstable_count == 0)

    @property
    def subcritical(self) -> np.ndarray:
        return self.criticality == Criticality.SUBCRITICAL

    @property
    def supercritical(self) -> np.ndarray:
        return self.criticality == Criticality.SUPERCRITICAL

    def status_counts(self) -> dict[str, int]:
        """Number of samples per status label (only statuses that occur)."""
        codes, counts = np.unique(self.status, return_counts=True)
        return {Status(int(c)).label: int(k) for c, k in zip(codes, counts)}

    def criticality_counts(self) -> dict[str, int]:
        """Number of samples per criticality name (only those that occur)."""
        codes, counts = np.unique(self.criticality, return_counts=True)
        return {Criticality(int(c)).name.lower(): int(k) for c, k in zip(codes, counts)}

    def status_labels(self) -> np.ndarray:
        """Status labels as an array of strings."""
        labels = np.array([s.label for s in Status])
        return labels[self.status]
