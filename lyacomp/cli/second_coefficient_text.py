"""Report lines about l2, the fold of cycles and the degenerate point (`lyacomp eval`)."""

from __future__ import annotations

from ..runtime import HopfResult
from ..runtime.degenerate import DegeneratePoint


def _fmt(value: float) -> str:
    return f"{value:.10g}"


def l2_lines(result: HopfResult) -> list[str]:
    """What l2 says: the onset at a degenerate point, the fold of cycles near the switch."""
    if result.l2 is None or not result.ok:
        return []
    lines = [f"  second Lyapunov coefficient l2 = {_fmt(result.l2)}"]
    onset = result.degenerate_onset
    if onset is not None:
        lines.append(
            f"  l1 = 0 here, so l2 decides: {onset.upper()} onset "
            + ("(l2 < 0: a small stable cycle)" if onset == "soft" else "(l2 > 0: a jump)")
        )
    fold = result.cycle_fold
    if fold is not None:
        mu = result.bifurcation_parameter or "beta1"
        where = (
            f"{mu} = {_fmt(fold.value)}"
            if fold.value is not None
            else f"beta1 = {_fmt(fold.offset)}"
        )
        amp = ", ".join(f"{k}: {_fmt(v)}" for k, v in fold.amplitude.items())
        if fold.outer_stable:
            lines.append(
                f"  l1 > 0 but l2 < 0: a fold of cycles near {where} bounds the jump (small "
                f"hysteresis): the state jumps to a nearby stable cycle, which with the "
                f"unstable one vanishes at the fold (amplitude there {amp})"
            )
        else:
            lines.append(
                f"  l1 < 0 but l2 > 0: the soft cycle ends at a fold of cycles near {where} "
                f"(amplitude there {amp}); beyond it the state jumps away (hard)"
            )
        lines.append("  (fold estimated from the truncated normal form: valid near the switch)")
    return lines


def degenerate_lines(point: DegeneratePoint) -> list[str]:
    """The located degenerate Hopf point."""
    onset = "soft" if point.l2 < 0 else "hard" if point.l2 > 0 else "undecided (l2 = 0)"
    lines = [
        f"degenerate Hopf point (l1 = 0) along {point.parameter}: "
        f"{point.parameter} = {_fmt(point.value)}",
    ]
    if point.critical_value is not None and point.hopf.bifurcation_parameter:
        mu = point.hopf.bifurcation_parameter
        lines.append(f"  there {mu}_c = {_fmt(point.critical_value)}")
    lines += [
        f"  omega = {_fmt(point.omega)}, l2 = {_fmt(point.l2)} (onset there: {onset})",
        f"  l1 > 0 (hard onset) for {point.parameter} {point.hard_side} {_fmt(point.value)}",
    ]
    return lines
