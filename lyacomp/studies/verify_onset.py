"""Extrapolate the cycle amplitudes measured at two offsets past onset to the onset itself.

Near a Hopf point the normal-form radius ``r`` of the cycle solves, one order beyond the
leading one, ``beta1 + l1 r^2 + l2 r^4 = 0`` (Bautin's normal form; Kuznetsov, *Elements
of Applied Bifurcation Theory*, 3rd ed., 2004, ch. 8), so ``beta1 / r^2 = -l1 - l2 r^2``.
Every state's half-range ``A_j`` is ``2 |q_j| r (1 + O(r^2))``, and ``beta1`` is
proportional to the offset ``|mu - mu0|`` to first order. Hence, per state,

    |mu - mu0| / A_j^2 = a_j + b_j A_j^2 + O(A_j^4),        a_j = 1 / K_j^2,

linear in the measured ``A_j^2`` (exactly so for the truncated planar form). Two offsets
fix ``a_j`` and ``b_j``; ``1 / sqrt(a_j)`` is the measured amplitude coefficient at onset,
free of the O(offset) bias of the raw ``A_j / sqrt(|mu - mu0|)``. docs/mathematics.md
("Check by simulation") has the derivation and when it fails.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

#: The extrapolation is trusted while the measured K^2 of the main state at the farther
#: offset differs from the extrapolated one by at most this fraction: the neglected
#: O(offset^2) terms are then (for a series whose next coefficient is of the size of the
#: square of the first) about a quarter of its square in K, 2% at the limit.
MAX_CORRECTION = 0.3
#: Reports mention the fitted fold of cycles when it lies within this many times the
#: farther offset (farther away the two-point fit says nothing about it).
FOLD_NOTE_RANGE = 10.0


@dataclass(frozen=True)
class OnsetFit:
    """The line ``offset / A_j^2 = a_j + b_j A_j^2`` through two measurements, per state.

    ``main`` is the state the verdict looks at (largest predicted amplitude)."""

    offsets: tuple[float, float]
    raw: tuple[np.ndarray, np.ndarray]
    """``A_j / sqrt(|offset|)`` at the farther and at the closer offset."""
    coefficient: np.ndarray
    """Extrapolated ``K_j = 1 / sqrt(a_j)`` (NaN where ``a_j <= 0``)."""
    slope: np.ndarray
    """``b_j``, the fitted slope of ``|offset| / A_j^2`` against ``A_j^2``."""
    period: float
    """The period extrapolated linearly in the main state's ``A^2`` to onset."""
    main: int

    @property
    def correction(self) -> float:
        """``K_far^2 / K^2 - 1`` for the main state: the bias the extrapolation removed."""
        return float((self.raw[0][self.main] / self.coefficient[self.main]) ** 2 - 1.0)

    @property
    def fold_offset(self) -> float | None:
        """Where the fitted truncated relation ``offset = A^2 (a + b A^2)`` turns back (a
        fold of cycles, ``-a^2 / (4 b)``) for the main state; None when it does not."""
        a, b = 1.0 / self.coefficient[self.main] ** 2, self.slope[self.main]
        if not (math.isfinite(a) and b < 0):
            return None
        return float(-(a * a) / (4.0 * b))

    @property
    def reason(self) -> str | None:
        """Why the extrapolated numbers cannot be trusted; None when they can."""
        if not math.isfinite(self.coefficient[self.main]):
            return (
                "the measured amplitudes do not shrink like sqrt(offset) between the two "
                "offsets (offset / amplitude^2 extrapolates to a non-positive value)"
            )
        if not abs(self.correction) <= MAX_CORRECTION:
            return (
                f"the measured K^2 moves by {100 * self.correction:+.0f}% between the farther "
                f"offset and onset (more than {100 * MAX_CORRECTION:.0f}%): the offsets are too "
                "large for a linear extrapolation"
            )
        return None

    @property
    def valid(self) -> bool:
        return self.reason is None


def extrapolate_to_onset(
    offsets: tuple[float, float],
    amplitudes: tuple[np.ndarray, np.ndarray],
    periods: tuple[float, float],
    main: int,
) -> OnsetFit:
    """Fit ``|offset| / A_j^2 = a_j + b_j A_j^2`` through the measurements at two offsets
    (farther first) and extrapolate to ``A = 0``; the period likewise, linearly in the main
    state's ``A^2``."""
    far, near = (abs(float(o)) for o in offsets)
    a_far, a_near = (np.asarray(a, float) for a in amplitudes)
    s_far, s_near = a_far**2, a_near**2
    with np.errstate(divide="ignore", invalid="ignore"):
        y_far, y_near = far / s_far, near / s_near
        slope = (y_far - y_near) / (s_far - s_near)
        intercept = y_far - slope * s_far
        coefficient = np.where(intercept > 0, 1.0 / np.sqrt(np.abs(intercept)), math.nan)
        raw = (a_far / math.sqrt(far), a_near / math.sqrt(near))
    ds = s_far[main] - s_near[main]
    t_far, t_near = periods
    period = t_near - (t_far - t_near) * s_near[main] / ds if ds != 0 else math.nan
    return OnsetFit((far, near), raw, coefficient, slope, float(period), main)
