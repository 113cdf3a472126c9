"""Parameter-plane maps of the onset type, and where along a line the onset type switches.

A map evaluates the compiled model once, in a single batch call, at every point of a
grid over two parameters (the bifurcation parameter is solved for at each point) and
sorts the points into supercritical, subcritical, degenerate, no Hopf point and solver
failure. The curve l1 = 0 (degenerate Hopf points) is then located by root finding
(scipy brentq) on the compiled l1 along every grid line whose neighbouring points
have l1 of opposite signs, so its accuracy is that of the root finder, not of the grid.
Grid points where l1 is exactly zero (or degenerate within the tolerance) are zeros in
their own right: they are reported as located points, never skipped by the sign test.

Branch continuity: after the first pass, the grid is swept row by row and every point
is solved again from a solved neighbour (the one in the previous row, or beside it in
the same row): that neighbour's equilibrium and critical value are its starting point,
so the Hopf branch (equilibrium and critical value together) is followed across the
plane. Points whose critical value still jumps against their
neighbours far more than the grid spacing explains are marked ``BRANCH_CHANGE``.
"""

from __future__ import annotations

import csv
import math
import sys
from collections.abc import Mapping
from dataclasses import dataclass, field
from enum import IntEnum
from pathlib import Path
from typing import Any

import numpy as np

from lyacomp.errors import StudyError
from lyacomp.status import Criticality, Status

from .bautin_curve import trace_from_grid_points


class PointClass(IntEnum):
    """What a grid point is, as stored in :attr:`ParameterMap.classes`."""

    NO_HOPF = 0
    SUPERCRITICAL = 1
    SUBCRITICAL = 2
    DEGENERATE = 3
    SOLVER_FAILURE = 4
    BRANCH_CHANGE = 5
    UNSTABLE_EQUILIBRIUM = 6

    @property
    def words(self) -> str:
        return _CLASS_WORDS[self]


_CLASS_WORDS = {
    PointClass.NO_HOPF: "no Hopf point",
    PointClass.SUPERCRITICAL: "supercritical (soft onset)",
    PointClass.SUBCRITICAL: "subcritical (hard onset)",
    PointClass.DEGENERATE: "degenerate (l1 = 0)",
    PointClass.SOLVER_FAILURE: "solver failure",
    PointClass.BRANCH_CHANGE: "another Hopf branch (critical value jumps)",
    PointClass.UNSTABLE_EQUILIBRIUM: "Hopf point on an already unstable equilibrium",
}

#: A neighbour's critical value may differ by this many times the typical neighbour step
#: (the median over the grid, per axis) before the point counts as on another branch.
BRANCH_JUMP_FACTOR = 25.0

#: Statuses that mean the solver could not give an answer (as opposed to answering that
#: there is no proper Hopf point here).
SOLVER_FAILURES = frozenset({"no_convergence", "nonfinite_input", "nonfinite_result"})

_CRITICALITY_CLASS = {
    Criticality.SUPERCRITICAL: PointClass.SUPERCRITICAL,
    Criticality.SUBCRITICAL: PointClass.SUBCRITICAL,
    Criticality.DEGENERATE: PointClass.DEGENERATE,
}

MAX_GRID_POINTS = 4_000_000


@dataclass(frozen=True)
class Axis:
    """One axis of a map: parameter ``name`` from ``lo`` to ``hi`` in ``n`` points."""

    name: str
    lo: float
    hi: float
    n: int

    def __post_init__(self) -> None:
        if not (math.isfinite(self.lo) and math.isfinite(self.hi)) or not self.hi > self.lo:
            raise StudyError(f"axis {self.name}: need finite LO < HI, got {self.lo}..{self.hi}")
        if self.n < 2:
            raise StudyError(f"axis {self.name}: need at least 2 points, got {self.n}")

    @classmethod
    def parse(cls, text: str) -> Axis:
        """Read ``NAME:LO:HI:N``, e.g. ``k:0.5:2.0:81``."""
        parts = text.split(":")
        if len(parts) != 4:
            raise StudyError(f"axis {text!r}: expected NAME:LO:HI:N, e.g. k:0.5:2.0:81")
        name, lo, hi, n = parts
        try:
            return cls(name.strip(), float(lo), float(hi), int(n))
        except ValueError:
            raise StudyError(
                f"axis {text!r}: LO and HI must be numbers and N an integer (NAME:LO:HI:N)"
            ) from None

    @property
    def values(self) -> np.ndarray:
        return np.linspace(self.lo, self.hi, self.n)

    @property
    def step(self) -> float:
        return (self.hi - self.lo) / (self.n - 1)


@dataclass
class ParameterMap:
    """Result of :func:`parameter_map`. Grids have shape ``(y.n, x.n)``."""

    x: Axis
    y: Axis
    fixed: dict[str, float]
    classes: np.ndarray
    status: np.ndarray
    l1: np.ndarray
    critical_value: np.ndarray
    omega: np.ndarray
    status_names: dict[int, str]
    bifurcation: str = ""
    curve: np.ndarray = field(default_factory=lambda: np.empty((0, 2)))
    unresolved: int = 0
    traced: np.ndarray = field(default_factory=lambda: np.empty((0, 2)))
    """l1 = 0 traced by the predictor-corrector (bautin_curve.py); NaN rows between branches."""
    traced_stops: list[str] = field(default_factory=list)

    def counts(self) -> dict[str, int]:
        """Number of grid points per class (in words)."""
        return {c.words: int(np.count_nonzero(self.classes == c)) for c in PointClass}

    def summary(self) -> dict[str, Any]:
        """JSON-ready description (without the grids)."""
        return {
            "x": {"name": self.x.name, "lo": self.x.lo, "hi": self.x.hi, "n": self.x.n},
            "y": {"name": self.y.name, "lo": self.y.lo, "hi": self.y.hi, "n": self.y.n},
            "fixed": dict(self.fixed),
            "bifurcation": self.bifurcation,
            "counts": self.counts(),
            "zero_curve_points": int(len(self.curve)),
            "zero_curve_unresolved_segments": self.unresolved,
            "traced_curve": [
                [None, None] if np.isnan(a) else [float(a), float(b)] for a, b in self.traced
            ],
            "traced_curve_stops": list(self.traced_stops),
        }

    def save(self, path: str | Path) -> list[Path]:
        """Write the grid data: ``.npz`` (everything) or ``.csv`` (one row per grid point,
        plus ``<stem>_zero_curve.csv`` with the located l1 = 0 points). Returns the paths."""
        path = Path(path)
        if path.suffix == ".npz":
            np.savez_compressed(
                path,
                x=self.x.values,
                y=self.y.values,
                x_name=self.x.name,
                y_name=self.y.name,
                classes=self.classes,
                class_names=np.array([c.words for c in PointClass]),
                status=self.status,
                l1=self.l1,
                critical_value=self.critical_value,
                omega=self.omega,
                zero_curve=self.curve,
                traced_curve=self.traced,
            )
            return [path]
        if path.suffix != ".csv":
            raise StudyError(f"grid data file {path}: use a .csv or .npz suffix")
        xx, yy = np.meshgrid(self.x.values, self.y.values)
        with path.open("w", newline="") as fh:
            out = csv.writer(fh)
            out.writerow(
                [self.x.name, self.y.name, "class", "status", "l1", "critical_value", "omega"]
            )
            for idx in np.ndindex(self.classes.shape):
                out.writerow(
                    [
                        repr(float(xx[idx])),
                        repr(float(yy[idx])),
                        PointClass(int(self.classes[idx])).words,
                        self.status_names.get(int(self.status[idx]), str(int(self.status[idx]))),
                        repr(float(self.l1[idx])),
                        repr(float(self.critical_value[idx])),
                        repr(float(self.omega[idx])),
                    ]
                )
        curve_path = path.with_name(path.stem + "_zero_curve.csv")
        with curve_path.open("w", newline="") as fh:
            out = csv.writer(fh)
            out.writerow([self.x.name, self.y.name])
            out.writerows([[repr(float(a)), repr(float(b))] for a, b in self.curve])
        return [path, curve_path]


@dataclass(frozen=True)
class Switch:
    """A value of a parameter where l1 changes sign along a line.

    ``bracket`` holds the neighbouring sample values that enclose it. When root finding
    inside the bracket failed (no Hopf point found at some value in between), ``value``,
    ``critical_value`` and ``omega`` are NaN and :attr:`resolved` is False.
    """

    parameter: str
    value: float
    critical_value: float
    omega: float
    before: str
    after: str
    bracket: tuple[float, float]

    @property
    def resolved(self) -> bool:
        return math.isfinite(self.value)

    def to_dict(self) -> dict[str, Any]:
        return {
            "parameter": self.parameter,
            "resolved": self.resolved,
            "bracket": list(self.bracket),
            "value": self.value,
            "critical_value": self.critical_value,
            "omega": self.omega,
            "before": self.before,
            "after": self.after,
        }


_STATUS_NAMES = {int(s): s.label for s in Status}
_FAILURE = np.array(
    [_STATUS_NAMES.get(c) in SOLVER_FAILURES for c in range(max(_STATUS_NAMES) + 1)]
)


def classify(
    status: np.ndarray, criticality: np.ndarray, first_loss: np.ndarray | None = None
) -> np.ndarray:
    """Grid classes (:class:`PointClass` codes, int8) from batch status and criticality.

    With ``first_loss`` (the batch's flag: ok and no other unstable eigenvalue), ok points
    whose equilibrium is already unstable get their own class instead of an onset type.
    """
    status = np.asarray(status)
    classes = np.full(status.shape, PointClass.NO_HOPF, dtype=np.int8)
    known = (status >= 0) & (status < _FAILURE.size)
    classes[known & _FAILURE[np.clip(status, 0, _FAILURE.size - 1)]] = PointClass.SOLVER_FAILURE
    ok = status == Status.OK
    for code, cls in _CRITICALITY_CLASS.items():
        classes[ok & (criticality == code)] = cls
    if first_loss is not None:
        classes[ok & ~np.asarray(first_loss, bool)] = PointClass.UNSTABLE_EQUILIBRIUM
    return classes


def first_loss_of(batch: Any) -> np.ndarray:
    """The batch's first-loss-of-stability flags (ok, and stable on one side of onset)."""
    return np.asarray(batch.first_loss, bool)


def branch_changes(critical_value: np.ndarray, factor: float = BRANCH_JUMP_FACTOR) -> np.ndarray:
    """Points of a 2-D grid whose critical value jumps against a grid neighbour.

    A jump is a neighbour difference above ``factor`` times the larger of the two adjacent
    differences along the same grid line (plus a rounding floor): a steep but smooth slope
    has adjacent differences of its own size, a change of branch stands out from them.
    Where no adjacent difference is finite, the median difference along the axis serves.
    Both points of a jumping pair are marked, since either may be the one on the other
    branch. NaN points take no part.
    """
    crit = np.asarray(critical_value, float)
    marked = np.zeros(crit.shape, bool)
    floor = 1e-9 * (1.0 + np.nanmax(np.abs(crit), initial=0.0, where=np.isfinite(crit)))
    for axis in (0, 1):
        if crit.shape[axis] < 2:
            continue
        diff = np.moveaxis(np.abs(np.diff(crit, axis=axis)), axis, 0)
        finite = np.isfinite(diff)
        if not finite.any():
            continue
        padded = np.full((diff.shape[0] + 2,) + diff.shape[1:], np.nan)
        padded[1:-1] = diff
        around = np.fmax(padded[:-2], padded[2:])
        around = np.where(np.isfinite(around), around, float(np.median(diff[finite])))
        jump = np.moveaxis(finite & (diff > factor * around + floor), 0, axis)
        lo = [slice(None)] * 2
        hi = [slice(None)] * 2
        lo[axis], hi[axis] = slice(0, -1), slice(1, None)
        marked[tuple(lo)] |= jump
        marked[tuple(hi)] |= jump
    return marked


def _check_names(ev: Any, axes: list[str], fixed: Mapping[str, float]) -> None:
    """Axes must be parameters other than the bifurcation parameter; ``fixed`` may name any
    parameter (for the bifurcation parameter it is the starting guess of the search)."""
    if ev.bifurcation is None:
        raise StudyError(
            "a map needs a model with a bifurcation parameter (the onset is located at every point)"
        )
    for name in [*axes, *fixed]:
        if name not in ev.parameters:
            raise StudyError(
                f"unknown parameter {name!r}; the model has {', '.join(ev.parameters)}"
            )
    for name in axes:
        if name == ev.bifurcation:
            raise StudyError(
                f"{name!r} is the bifurcation parameter, which is solved for at every point; "
                "map over other parameters"
            )
        if name in fixed:
            raise StudyError(f"{name!r} is both an axis and a fixed value; drop one")


class _NoHopfHere(Exception):
    """The evaluator found no Hopf point inside a bracket (root finding abandoned)."""


def _l1_along(ev: Any, base: Mapping[str, float], name: str, guess: float):
    """l1 as a function of one parameter, the other values fixed; the bifurcation parameter
    starts from ``guess`` (the critical value at a bracket end keeps Newton on that branch)."""

    def l1(value: float) -> float:
        res = ev({**base, name: value, ev.bifurcation: guess})
        if not res.ok:
            raise _NoHopfHere
        return float(res.l1)

    return l1


def _bracket_root(
    ev: Any, base: Mapping[str, float], name: str, lo: float, hi: float, guess: float
) -> float | None:
    from scipy.optimize import brentq

    try:
        return float(
            brentq(
                _l1_along(ev, base, name, guess),
                lo,
                hi,
                xtol=1e-13 * max(1.0, abs(lo), abs(hi)),
                rtol=4 * np.finfo(float).eps,
            )
        )
    except (_NoHopfHere, ValueError):
        # ValueError: the compiled l1 at the bracket ends no longer differs in sign
        # (a different Hopf branch was found from this guess)
        return None


def _sign_changes(l1: np.ndarray) -> np.ndarray:
    """Indices i with finite l1[i], l1[i+1] of strictly opposite sign (along the last axis).

    Exact zeros never form such a bracket; :func:`_zero_points` reports them instead."""
    a, b = l1[..., :-1], l1[..., 1:]
    with np.errstate(invalid="ignore"):
        return np.isfinite(a) & np.isfinite(b) & (a * b < 0)


def _zero_points(l1: np.ndarray, criticality: np.ndarray) -> np.ndarray:
    """Grid points that are zeros of l1 themselves: l1 == 0 or classified degenerate."""
    return (np.asarray(l1) == 0) | (np.asarray(criticality) == Criticality.DEGENERATE)


def map_rows(
    ev: Any,
    fixed: Mapping[str, float],
    x: Axis,
    y: Axis,
    first: int,
    stop: int,
    threads: int | None,
) -> dict[str, np.ndarray]:
    """Evaluate grid rows ``first`` to ``stop - 1`` (y index): status, criticality, l1,
    critical value, omega and first_loss, each of shape ``(stop - first, x.n)``. Every point is
    evaluated on its own, so any split into row blocks gives the same bits."""
    xx, yy = np.meshgrid(x.values, y.values[first:stop])
    batch = ev.batch({**fixed, x.name: xx.ravel(), y.name: yy.ravel()}, threads=threads)
    return _grids(batch, xx.shape)


#: Why the l1 = 0 curve of a delay model is located but not traced: the tracer corrects
#: with the degenerate point, which delay kernels do not compute yet.
DELAY_TRACE_NOTE = (
    "not traced for models with delays (the tracer needs the degenerate point, not"
    " available for them yet); the located points above stand"
)


def parameter_map(
    ev: Any,
    x: Axis,
    y: Axis,
    fixed: Mapping[str, float] | None = None,
    *,
    locate_curve: bool = True,
    trace_curve: bool = True,
    follow_branch: bool = True,
    threads: int | None = None,
    client: Any = None,
) -> ParameterMap:
    """Classify every point of the ``x`` by ``y`` grid, then locate the l1 = 0 curve by
    brentq along the grid lines where l1 changes sign (grid points at l1 = 0 and
    degenerate points are on the curve themselves).

    ``fixed`` sets other parameters (default: nominal values). With ``follow_branch``
    each point is solved again from a solved neighbour's equilibrium and critical value
    (one batch call per row), so the branch found at the first row is followed across
    the plane; points
    where the critical value still jumps are classed ``BRANCH_CHANGE``.
    ``client`` (a
    ``distributed.Client``) evaluates blocks of grid rows on a Dask cluster, with the same
    grids bit for bit; the l1 = 0 curve is then located here.
    With ``trace_curve`` (and ``locate_curve``) the curve is also traced from the located
    points by a predictor-corrector (:mod:`.bautin_curve`) into ``traced``.
    """
    fixed = {k: float(v) for k, v in (fixed or {}).items()}
    _check_names(ev, [x.name, y.name], fixed)
    if x.name == y.name:
        raise StudyError(f"the two axes must be different parameters (both are {x.name!r})")
    if x.n * y.n > MAX_GRID_POINTS:
        raise StudyError(f"grid of {x.n * y.n} points is too large (at most {MAX_GRID_POINTS})")
    if client is None:
        grids = map_rows(ev, fixed, x, y, 0, y.n, threads)
    else:
        from lyacomp.studies.cluster import map_on_cluster

        grids = map_on_cluster(client, ev, fixed, x, y, threads)
    if follow_branch:
        # sequential by nature (row j starts from row j-1), so it runs here in both cases
        _follow_rows(ev, fixed, x, y, grids, threads)
    classes = classify(grids["status"], grids["criticality"], grids.get("first_loss"))
    if follow_branch:
        jumps = branch_changes(grids["critical_value"]) & (grids["status"] == Status.OK)
        classes[jumps] = PointClass.BRANCH_CHANGE
    pmap = ParameterMap(
        x=x,
        y=y,
        fixed=fixed,
        classes=classes,
        status=grids["status"],
        l1=grids["l1"],
        critical_value=grids["critical_value"],
        omega=grids["omega"],
        status_names=dict(_STATUS_NAMES),
        bifurcation=ev.bifurcation,
    )
    if locate_curve:
        _locate_zero_curve(ev, pmap, grids["criticality"])
        if trace_curve and len(pmap.curve) and ev.model.delays:
            pmap.traced_stops = [DELAY_TRACE_NOTE]
        elif trace_curve and len(pmap.curve):
            traced = trace_from_grid_points(
                ev, x.name, (x.lo, x.hi), y.name, (y.lo, y.hi), pmap.curve, fixed
            )
            pmap.traced, pmap.traced_stops = traced.points, traced.stops
    return pmap


_GRID_KEYS = ("status", "criticality", "l1", "critical_value", "omega")


def _grids(batch: Any, shape: tuple[int, ...]) -> dict[str, np.ndarray]:
    grids = {k: np.array(getattr(batch, k)).reshape(shape) for k in _GRID_KEYS}
    grids["l1"] = grids["l1"].astype(float)
    grids["first_loss"] = first_loss_of(batch).reshape(shape)
    equilibrium = np.asarray(batch.equilibrium, float)
    grids["equilibrium"] = equilibrium.reshape(shape + equilibrium.shape[-1:])
    return grids


def _from_neighbours(
    ev: Any,
    values: Mapping[str, Any],
    equilibrium: np.ndarray,
    critical_value: np.ndarray,
    threads: int | None,
) -> dict[str, np.ndarray]:
    """Solve points from solved neighbours: each starts from its neighbour's equilibrium
    (rows of ``equilibrium``) and critical value."""
    guess: dict[str, Any] = {s: equilibrium[:, k] for k, s in enumerate(ev.states)}
    guess[ev.bifurcation] = critical_value
    batch = ev.batch(dict(values), guess=guess, threads=threads)
    return _grids(batch, (len(critical_value),))


def _take(grids: dict[str, np.ndarray], where: tuple[Any, ...], row: dict[str, np.ndarray]):
    """Keep the neighbour-started solutions that are ok (in place)."""
    ok = row["status"] == Status.OK
    for key, values in row.items():
        if key in grids:
            target = tuple(np.asarray(w)[ok] if np.ndim(w) else w for w in where)
            grids[key][target] = values[ok]


def _follow_rows(
    ev: Any,
    fixed: Mapping[str, float],
    x: Axis,
    y: Axis,
    grids: dict[str, np.ndarray],
    threads: int | None,
) -> None:
    """Follow the Hopf branch across the grid from solved neighbours (in place): along the
    first row from its first solved point, point by point; then row j from row j - 1
    (one batch call per row), and a point whose upper neighbour is unsolved from its
    left neighbour. Each point starts from the neighbour's equilibrium and critical value;
    a neighbour-started solution replaces the first-pass one wherever it is ok. A
    progress bar shows on a terminal."""
    ok = grids["status"] == Status.OK

    def along_row(j: int, columns: Any) -> None:
        for i in columns:
            left = i - 1 if i > 0 and ok[j, i - 1] else None
            right = i + 1 if i + 1 < x.n and ok[j, i + 1] else None
            near = left if left is not None else right
            if near is None:
                continue
            row = _from_neighbours(
                ev,
                {**fixed, x.name: x.values[i : i + 1], y.name: float(y.values[j])},
                grids["equilibrium"][j, near : near + 1],
                grids["critical_value"][j, near : near + 1],
                threads=1,
            )
            _take(grids, (j, np.array([i])), row)
            ok[j, i] = ok[j, i] or bool(row["status"][0] == Status.OK)

    solved = np.flatnonzero(ok[0])
    if solved.size:
        along_row(0, range(solved[0] + 1, x.n))
        along_row(0, range(solved[0] - 1, -1, -1))
    rows: Any = range(1, y.n)
    if sys.stderr.isatty() and y.n > 50:
        try:
            from tqdm import tqdm

            rows = tqdm(rows, desc="map rows", unit="row", leave=False)
        except ImportError:
            pass
    for j in rows:
        seeded = np.flatnonzero(ok[j - 1])
        if seeded.size:
            row = _from_neighbours(
                ev,
                {**fixed, x.name: x.values[seeded], y.name: float(y.values[j])},
                grids["equilibrium"][j - 1, seeded],
                grids["critical_value"][j - 1, seeded],
                threads,
            )
            _take(grids, (j, seeded), row)
            ok[j, seeded] |= row["status"] == Status.OK
        along_row(j, np.flatnonzero(~ok[j - 1]))


def _locate_zero_curve(ev: Any, pmap: ParameterMap, criticality: np.ndarray) -> None:
    zero = _zero_points(pmap.l1, criticality) & (pmap.status == Status.OK)
    xx, yy = np.meshgrid(pmap.x.values, pmap.y.values)
    points: list[tuple[float, float]] = [
        (float(a), float(b)) for a, b in zip(xx[zero], yy[zero], strict=True)
    ]
    unresolved = 0
    # rows: y fixed, root in x; columns: x fixed, root in y
    for along, across, l1, crit, at_zero in (
        (pmap.x, pmap.y, pmap.l1, pmap.critical_value, zero),
        (pmap.y, pmap.x, pmap.l1.T, pmap.critical_value.T, zero.T),
    ):
        grid_along = along.values
        grid_across = across.values
        brackets = _sign_changes(l1) & ~at_zero[:, :-1] & ~at_zero[:, 1:]
        for j, i in zip(*np.nonzero(brackets), strict=True):
            base = {**pmap.fixed, across.name: float(grid_across[j])}
            root = _bracket_root(
                ev, base, along.name, grid_along[i], grid_along[i + 1], float(crit[j, i])
            )
            if root is None:
                unresolved += 1
                continue
            point = {along.name: root, across.name: float(grid_across[j])}
            points.append((point[pmap.x.name], point[pmap.y.name]))
    pmap.curve = np.array(points, float).reshape(-1, 2)
    pmap.unresolved = unresolved


def find_switches(
    ev: Any,
    name: str,
    lo: float,
    hi: float,
    n: int = 201,
    fixed: Mapping[str, float] | None = None,
    *,
    threads: int | None = None,
) -> list[Switch]:
    """Where along ``name`` in [lo, hi] does l1 change sign? One batch call on ``n`` points,
    then brentq inside every bracket; a sample point where l1 is zero (or degenerate) is a
    switch at that value itself. Each switch carries its critical value and frequency."""
    axis = Axis(name, float(lo), float(hi), int(n))
    fixed = {k: float(v) for k, v in (fixed or {}).items()}
    _check_names(ev, [name], fixed)
    values = axis.values
    batch = ev.batch({**fixed, name: values}, threads=threads)
    l1 = np.asarray(batch.l1, float)
    crit = np.asarray(batch.critical_value, float)
    omega = np.asarray(batch.omega, float)
    zero = _zero_points(l1, batch.criticality) & (np.asarray(batch.status) == Status.OK)
    nonzero = np.flatnonzero(np.isfinite(l1) & ~zero)
    found: list[tuple[float, Switch]] = []
    for k in np.flatnonzero(zero):
        # the onset type on either side: the nearest sample with a non-zero l1
        left, right = nonzero[nonzero < k], nonzero[nonzero > k]
        before = _onset_word(l1[left[-1]]) if left.size else "degenerate"
        after = _onset_word(l1[right[0]]) if right.size else "degenerate"
        value = float(values[k])
        sw = Switch(name, value, float(crit[k]), float(omega[k]), before, after, (value, value))
        found.append((value, sw))
    brackets = _sign_changes(l1) & ~zero[:-1] & ~zero[1:]
    for i in np.flatnonzero(brackets):
        before, after = _onset_word(l1[i]), _onset_word(l1[i + 1])
        bracket = (float(values[i]), float(values[i + 1]))
        root = _bracket_root(ev, fixed, name, *bracket, float(crit[i]))
        if root is None:
            found.append(
                (bracket[0], Switch(name, math.nan, math.nan, math.nan, before, after, bracket))
            )
            continue
        res = ev({**fixed, name: root, ev.bifurcation: float(crit[i])})
        crit_value, om = (res.critical_value, res.omega) if res.ok else (math.nan, math.nan)
        found.append(
            (root, Switch(name, root, float(crit_value), float(om), before, after, bracket))
        )
    return [sw for _, sw in sorted(found, key=lambda item: item[0])]


def _onset_word(l1: float) -> str:
    return "supercritical" if l1 < 0 else "subcritical"
