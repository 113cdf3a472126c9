"""Reliability index of a soft onset (first-order reliability method, FORM).

The uncertain parameters are written as images of independent standard normal scores
``u`` (the same Gaussian copula and marginals as the Monte Carlo study,
:mod:`lyacomp.studies.uncertainty`). The onset turns hard where ``l1(x(u)) = 0``. The
reliability index is the distance from the origin (the nominal design in scores) to the
nearest point of that surface, found by the Hasofer-Lind / Rackwitz-Fiessler iteration

    u_next = ((grad g . u - g(u)) / |grad g|^2) grad g,    g(u) = l1(x(u)),

with exact gradients (``derivatives=True``) chained through the score map. The index is
signed: positive when the nominal design is soft, negative when it is already hard; to
first order P(hard) ~ Phi(-beta). Sources: Hasofer & Lind, J. Eng. Mech. Div. ASCE 100
(1974); Rackwitz & Fiessler, Computers & Structures 9 (1978).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..errors import StudyError
from .uncertainty import (
    LogNormal,
    Normal,
    Triangular,
    TruncatedNormal,
    UncertaintySpec,
    Uniform,
    _cholesky,
    _special,
)

CAUTION_FORM = (
    "first-order estimate: Phi(-beta) linearizes the surface l1 = 0 at the design point; "
    "it agrees with the Monte Carlo probability only to first order (curved surfaces or "
    "several nearby design points make them differ)"
)


def score_slope(marginal: Any, z: np.ndarray, x: np.ndarray) -> np.ndarray:
    """dx/dz of one marginal's score map at scores ``z`` (values ``x = from_scores(z)``)."""
    sp = _special()
    phi = np.exp(-0.5 * z * z) / math.sqrt(2.0 * math.pi)
    if isinstance(marginal, Normal):
        return np.full_like(z, marginal.sd)
    if isinstance(marginal, LogNormal):
        return marginal.sigma * x
    if isinstance(marginal, Uniform):
        return (marginal.high - marginal.low) * phi
    if isinstance(marginal, TruncatedNormal):
        a = (marginal.low - marginal.mean) / marginal.sd
        b = (marginal.high - marginal.mean) / marginal.sd
        mass = sp.ndtr(-a) - sp.ndtr(-b) if a > 0.0 else sp.ndtr(b) - sp.ndtr(a)
        w = (x - marginal.mean) / marginal.sd
        return marginal.sd * mass * phi / (np.exp(-0.5 * w * w) / math.sqrt(2.0 * math.pi))
    if isinstance(marginal, Triangular):
        width = marginal.high - marginal.low
        # 1 / density: rising edge 2 (x - low) / (width (mode - low)), falling edge likewise.
        rising = x < marginal.mode
        inv_pdf = np.where(
            rising,
            width * (marginal.mode - marginal.low) / (2.0 * np.maximum(x - marginal.low, 1e-300)),
            width * (marginal.high - marginal.mode) / (2.0 * np.maximum(marginal.high - x, 1e-300)),
        )
        return phi * inv_pdf
    raise StudyError(f"no score map derivative for {marginal!r}")


@dataclass
class ScoreMap:
    """u (independent scores) -> z = L u (copula) -> x (marginals), with its Jacobian."""

    spec: UncertaintySpec
    chol: np.ndarray = field(init=False)

    def __post_init__(self) -> None:
        self.chol = (
            _cholesky(self.spec.correlation, self.spec.names)
            if self.spec.correlated
            else np.eye(self.spec.dimension)
        )

    def values(self, u: np.ndarray) -> np.ndarray:
        return self.spec.values(u[None, :])[0]

    def gradient(self, u: np.ndarray, x: np.ndarray, grad_x: np.ndarray) -> np.ndarray:
        """grad_u g from grad_x g (chain rule through the marginals and the copula)."""
        z = self.chol @ u
        slopes = np.array(
            [
                float(score_slope(m, np.array([z[j]]), np.array([x[j]]))[0])
                for j, m in enumerate(self.spec.marginals)
            ]
        )
        return self.chol.T @ (slopes * grad_x)


@dataclass(frozen=True)
class ReliabilityResult:
    """The FORM answer: signed index, design point, first-order probability of hard onset."""

    reliability_index: float
    design_point: dict[str, float]
    design_scores: tuple[float, ...]
    probability_hard: float
    iterations: int
    converged: bool
    nominal_l1: float
    importance: dict[str, float]
    """Direction cosines alpha_j = u*_j / |u*| (the share of each score in beta)."""

    def to_dict(self) -> dict[str, Any]:
        def num(v: float) -> float | None:
            return float(v) if math.isfinite(v) else None

        return {
            "reliability_index": num(self.reliability_index),
            "design_point": {k: num(v) for k, v in self.design_point.items()},
            "probability_hard_first_order": num(self.probability_hard),
            "iterations": self.iterations,
            "converged": self.converged,
            "importance": {k: num(v) for k, v in self.importance.items()},
        }

    def summary_lines(self) -> list[str]:
        point = ", ".join(f"{k} = {v:.6g}" for k, v in self.design_point.items())
        state = "" if self.converged else " (NOT converged: treat as a rough guess)"
        return [
            f"Reliability index (FORM): beta = {self.reliability_index:+.6g}{state}"
            f" after {self.iterations} iteration(s); P(hard) ~ Phi(-beta) ="
            f" {self.probability_hard:.6g}",
            f"  most probable hard-onset point: {point}",
            f"  note: {CAUTION_FORM}",
        ]


def _l1_and_gradient(
    ev: Any, names: tuple[str, ...], base: Mapping[str, float], x: np.ndarray
) -> tuple[float, np.ndarray, str]:
    # One scalar call per iteration; ``ev.__call__`` spelled out so that stand-ins which
    # forward attribute lookups to an evaluator (as in the tests) forward this one too.
    values = {**base, **dict(zip(names, map(float, x), strict=True))}
    result = ev.__call__(values, derivatives=True)
    if not result.ok or result.derivatives is None:
        return math.nan, np.full(len(names), math.nan), result.status
    grad = np.array([result.derivatives["l1"][n] for n in names])
    return result.l1, grad, "ok"


def reliability_index(
    ev: Any,
    spec: UncertaintySpec,
    fixed: Mapping[str, float] | None = None,
    *,
    tol: float = 1e-8,
    max_iter: int = 50,
) -> ReliabilityResult:
    """Hasofer-Lind / Rackwitz-Fiessler iteration from the origin of the scores.

    ``fixed`` overrides nominal values of parameters that are not uncertain. A step that
    lands where no Hopf point is found is halved (up to 20 times). Raises StudyError when
    the model has no bifurcation parameter or the nominal design has no usable Hopf point.
    """
    if ev.bifurcation is None:
        raise StudyError(
            "the reliability index follows the Hopf point as parameters change: the model "
            "needs a bifurcation parameter"
        )
    base = {k: float(v) for k, v in (fixed or {}).items() if k not in spec.names}
    smap = ScoreMap(spec)
    d = spec.dimension
    u = np.zeros(d)
    x = smap.values(u)
    g, grad_x, status = _l1_and_gradient(ev, spec.names, base, x)
    if status != "ok":
        raise StudyError(
            f"no usable Hopf point at the nominal design ({status}); the reliability index "
            "needs one"
        )
    nominal_l1 = g
    converged = False
    iterations = 0
    for count in range(1, max_iter + 1):
        iterations = count
        grad = smap.gradient(u, x, grad_x)
        norm2 = float(grad @ grad)
        if not norm2 > 0.0:
            break
        target = ((grad @ u - g) / norm2) * grad
        step = target - u
        for _ in range(20):
            trial = u + step
            x_trial = smap.values(trial)
            g_t, grad_t, status = _l1_and_gradient(ev, spec.names, base, x_trial)
            if status == "ok":
                break
            step = 0.5 * step
        else:
            break
        u, x, g, grad_x = trial, x_trial, g_t, grad_t
        size = float(np.linalg.norm(step))
        if size <= tol * (1.0 + float(np.linalg.norm(u))):
            # A vanishing step at a point off the surface would be a stalled iteration.
            grad_norm = float(np.linalg.norm(smap.gradient(u, x, grad_x)))
            converged = abs(g) <= 1e-6 * grad_norm * (1.0 + float(np.linalg.norm(u)))
            break
    radius = float(np.linalg.norm(u))
    beta = radius if nominal_l1 < 0.0 else -radius
    if nominal_l1 == 0.0:
        beta = 0.0
    importance = {
        n: (float(u[j] / radius) if radius > 0 else math.nan) for j, n in enumerate(spec.names)
    }
    return ReliabilityResult(
        reliability_index=beta,
        design_point=dict(zip(spec.names, map(float, x), strict=True)),
        design_scores=tuple(float(v) for v in u),
        probability_hard=float(_special().ndtr(-beta)),
        iterations=iterations,
        converged=converged,
        nominal_l1=float(nominal_l1),
        importance=importance,
    )


@dataclass(frozen=True)
class Sensitivity:
    """Local sensitivity of l1 to one uncertain parameter at the nominal design."""

    name: str
    derivative: float
    """dl1/dp (exact)."""
    spread: float
    """dp/dz at the nominal scores: the standard deviation for a normal parameter."""

    @property
    def scaled(self) -> float:
        """The change of l1 for a one-score move of the parameter (derivative * spread)."""
        return self.derivative * self.spread

    def to_dict(self) -> dict[str, Any]:
        return {
            "parameter": self.name,
            "derivative": self.derivative,
            "spread": self.spread,
            "scaled": self.scaled,
        }


def local_sensitivities(
    ev: Any, spec: UncertaintySpec, fixed: Mapping[str, float] | None = None
) -> list[Sensitivity]:
    """Uncertain parameters ranked by |dl1/dp * spread| at the nominal design, largest first.

    Empty when the model has no bifurcation parameter or no usable Hopf point there.
    """
    if ev.bifurcation is None:
        return []
    base = {k: float(v) for k, v in (fixed or {}).items() if k not in spec.names}
    z0 = np.zeros(spec.dimension)
    x0 = spec.values(z0[None, :])[0]
    _, grad, status = _l1_and_gradient(ev, spec.names, base, x0)
    if status != "ok":
        return []
    out = []
    for j, (name, marginal) in enumerate(zip(spec.names, spec.marginals, strict=True)):
        slope = float(score_slope(marginal, np.array([0.0]), np.array([x0[j]]))[0])
        out.append(Sensitivity(name, float(grad[j]), slope))
    return sorted(out, key=lambda s: -abs(s.scaled))
