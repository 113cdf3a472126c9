"""The second Lyapunov coefficient l2 and what it says near the switch of onset type.

The numbers come from the compiled kernel (templates/stage_l2.c.j2); this module only
reads the truncated normal form (docs/mathematics.md, "Second Lyapunov coefficient"):
with tau = omega t, r' = r (beta1 + l1 r^2 + l2 r^4), beta1 = d (mu - mu0) / omega.
"""

from __future__ import annotations

import math
from dataclasses import dataclass


@dataclass(frozen=True)
class CycleFold:
    """Where two cycles merge and vanish, estimated from the truncated normal form.

    ``value`` is the bifurcation parameter at the fold (None without one), ``offset``
    its distance ``mu_fold - mu0``, ``amplitude`` state by state the amplitude of the
    cycle at the fold; ``outer_stable`` tells whether the outer of the two cycles is the
    stable one (l2 < 0: the jump of a hard onset lands on it).
    """

    value: float | None
    offset: float
    amplitude: dict[str, float]
    outer_stable: bool

    def to_dict(self) -> dict[str, object]:
        return {
            "value": self.value,
            "offset": self.offset,
            "amplitude": dict(self.amplitude),
            "outer_stable": self.outer_stable,
        }


def cycle_fold(
    l1: float,
    l2: float,
    omega: float,
    transversality: float | None,
    critical_value: float | None,
    radius_gain: dict[str, float],
) -> CycleFold | None:
    """The fold of cycles near a Hopf point where l1 and l2 have opposite signs, else None.

    Cycles of the normal form satisfy beta1 + l1 s + l2 s^2 = 0 (s = r^2); two of them
    merge where the discriminant vanishes: beta1 = l1^2 / (4 l2), s = -l1 / (2 l2).
    Without a bifurcation parameter (or d = 0) the offset is in units of beta1.
    """
    if not all(math.isfinite(v) for v in (l1, l2, omega)) or not l1 * l2 < 0.0:
        return None
    beta1 = l1 * l1 / (4.0 * l2)
    radius = math.sqrt(-l1 / (2.0 * l2))
    amplitude = {k: g * radius for k, g in radius_gain.items()}
    if transversality is None or not math.isfinite(transversality) or transversality == 0.0:
        return CycleFold(None, beta1, amplitude, l2 < 0.0)
    offset = beta1 * omega / transversality
    value = None if critical_value is None else critical_value + offset
    return CycleFold(value, offset, amplitude, l2 < 0.0)
