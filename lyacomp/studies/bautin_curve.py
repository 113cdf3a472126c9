"""Tracing the curve l1 = 0 (degenerate Hopf points) in a plane of two parameters.

A predictor-corrector in the plane scaled to the unit square: from a point located by the
C Newton (``Evaluator.degenerate_point``), step along the tangent of l1 = 0 and correct
with Newton on (l1 = 0, the step's pseudo-arclength condition), the Hopf point solved at
every evaluation. The gradient of l1 is exact (``derivatives=True``: the implicit function
theorem in C, one batch call per Newton step with l1 itself); a model without a
bifurcation parameter has no exact derivatives, and its gradient is a central difference
(step 1e-6 of the plane). Tracing stops at the edges of the plane (the last point moved
onto the edge) or where the Hopf point is lost (an evaluation fails).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..errors import LyacompError

_H = 1e-6


@dataclass
class TracedCurve:
    """Points (x, y) of l1 = 0 in order along the curve, and why each end stopped."""

    points: np.ndarray = field(default_factory=lambda: np.empty((0, 2)))
    stops: list[str] = field(default_factory=list)


class _Plane:
    def __init__(self, ev: Any, x: str, y: str, xr, yr, fixed: Mapping[str, float]):
        self.ev, self.x, self.y, self.fixed = ev, x, y, dict(fixed)
        self.lo = np.array([xr[0], yr[0]], float)
        self.span = np.array([xr[1] - xr[0], yr[1] - yr[0]], float)
        # Exact derivatives follow the Hopf point, so they need a bifurcation parameter
        # (and are taken with respect to the other parameters).
        self.exact = ev.bifurcation is not None and ev.bifurcation not in (x, y)

    def physical(self, u: np.ndarray) -> np.ndarray:
        return self.lo + u * self.span

    def l1(self, us: np.ndarray) -> np.ndarray:
        pts = self.physical(np.atleast_2d(us))
        batch = self.ev.batch({**self.fixed, self.x: pts[:, 0], self.y: pts[:, 1]}, threads=1)
        return np.where(batch.ok, batch.l1, np.nan)

    def l1_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        """l1 at u and its gradient in plane coordinates (NaN where no Hopf point)."""
        if self.exact:
            pt = self.physical(u)
            batch = self.ev.batch_derivatives(
                {**self.fixed, self.x: pt[:1], self.y: pt[1:]}, threads=1
            )
            if not batch.ok[0]:
                return np.nan, np.full(2, np.nan)
            names = batch.derivative_parameters
            row = batch.derivatives["l1"][0]
            grad = np.array([row[names.index(self.x)], row[names.index(self.y)]])
            return float(batch.l1[0]), grad * self.span
        e = np.eye(2) * _H
        vals = self.l1(np.array([u, u + e[0], u - e[0], u + e[1], u - e[1]]))
        return vals[0], np.array([vals[1] - vals[2], vals[3] - vals[4]]) / (2 * _H)


def _correct(
    plane: _Plane, u_pred: np.ndarray, t: np.ndarray
) -> tuple[np.ndarray, np.ndarray] | None:
    """Newton from the predicted point; the corrected point and the gradient of its last
    step (within 1e-10 of the point: good for the next tangent)."""
    u = u_pred.copy()
    for _ in range(10):
        g, grad = plane.l1_and_gradient(u)
        if not (np.isfinite(g) and np.all(np.isfinite(grad))):
            return None
        jac = np.array([grad, t])
        rhs = -np.array([g, t @ (u - u_pred)])
        try:
            du = np.linalg.solve(jac, rhs)
        except np.linalg.LinAlgError:
            return None
        u = u + du
        if np.linalg.norm(du) < 1e-10:
            return u, grad
    return None


def _onto_edge(plane: _Plane, u: np.ndarray, axis: int) -> np.ndarray | None:
    """The point of l1 = 0 on the edge through ``u`` (coordinate ``axis`` fixed there):
    Newton in the other coordinate."""
    free = 1 - axis
    u = u.copy()
    for _ in range(10):
        g, grad = plane.l1_and_gradient(u)
        slope = grad[free]
        if not (np.isfinite(g) and np.isfinite(slope)) or slope == 0:
            return None
        du = -g / slope
        u[free] += du
        if not 0.0 <= u[free] <= 1.0:
            return None
        if abs(du) < 1e-12:
            return u
    return None


def _walk(plane: _Plane, u0: np.ndarray, direction: float, ds: float, max_points: int):
    points, u = [], u0
    grad = plane.l1_and_gradient(u)[1]
    t = direction * np.array([-grad[1], grad[0]]) / np.linalg.norm(grad)
    for _ in range(max_points):
        step = ds
        while True:
            corrected = _correct(plane, u + step * t, t)
            if corrected is not None:
                new, grad = corrected
                break
            step *= 0.5
            if step < ds / 64:
                return points, "the Hopf point is lost (or the curve turns too sharply)"
        if np.any(new < 0) or np.any(new > 1):
            # onto the edge: the last part of the chord, cut where it leaves the square
            d = new - u
            with np.errstate(divide="ignore", invalid="ignore"):
                cuts = [((b - u[a]) / d[a], a, b) for a in (0, 1) for b in (0.0, 1.0)]
            s, axis, side = min(c for c in cuts if np.isfinite(c[0]) and 0 <= c[0] <= 1)
            at_edge = u + s * d
            at_edge[axis] = side
            edge = _onto_edge(plane, at_edge, axis)
            if edge is not None:
                points.append(edge)
            return points, "edge of the plane"
        t_new = np.array([-grad[1], grad[0]]) / np.linalg.norm(grad)
        t = t_new if t_new @ t >= 0 else -t_new
        points.append(new)
        u = new
    return points, "maximum number of points"


def trace_zero_curve(
    ev: Any,
    x: str,
    x_range: tuple[float, float],
    y: str,
    y_range: tuple[float, float],
    start: tuple[float, float],
    fixed: Mapping[str, float] | None = None,
    step: float = 0.02,
    max_points: int = 400,
) -> TracedCurve:
    """Trace l1 = 0 through the plane from near ``start`` (x, y): the C Newton first puts
    the start onto the curve along ``x``, then the curve is followed both ways."""
    plane = _Plane(ev, x, y, x_range, y_range, fixed or {})
    try:
        point = ev.degenerate_point(x, {**plane.fixed, x: start[0], y: start[1]})
    except LyacompError as exc:
        return TracedCurve(stops=[f"no start: {exc}"])
    u0 = (np.array([point.value, start[1]]) - plane.lo) / plane.span
    ahead, stop_a = _walk(plane, u0, 1.0, step, max_points)
    back, stop_b = _walk(plane, u0, -1.0, step, max_points)
    ordered = list(reversed(back)) + [u0] + ahead
    return TracedCurve(plane.physical(np.array(ordered)), [stop_b, stop_a])


def trace_from_grid_points(
    ev: Any,
    x: str,
    x_range: tuple[float, float],
    y: str,
    y_range: tuple[float, float],
    seeds: np.ndarray,
    fixed: Mapping[str, float] | None = None,
    max_branches: int = 4,
) -> TracedCurve:
    """Trace every branch of l1 = 0 through the seeds (points located on the grid): a seed
    farther than 2% of the plane from the curves traced so far starts a new branch.
    Branches are joined with a row of NaN between them (a break in a polyline)."""
    lo = np.array([x_range[0], y_range[0]], float)
    span = np.array([x_range[1] - x_range[0], y_range[1] - y_range[0]], float)
    pieces: list[np.ndarray] = []
    stops: list[str] = []
    for seed in np.asarray(seeds, float).reshape(-1, 2):
        if len(pieces) >= max_branches:
            break
        if pieces:
            traced = (np.concatenate(pieces) - lo) / span
            if np.min(np.linalg.norm(traced - (seed - lo) / span, axis=1)) < 0.02:
                continue
        branch = trace_zero_curve(ev, x, x_range, y, y_range, (seed[0], seed[1]), fixed)
        stops += branch.stops
        if len(branch.points):
            pieces.append(branch.points)
    if not pieces:
        return TracedCurve(stops=stops)
    gap = np.full((1, 2), np.nan)
    joined = [row for piece in pieces for row in (piece, gap)][:-1]
    return TracedCurve(np.concatenate(joined), stops)
