"""Statuses and values under states in mixed units within the critical pair, and time
rescaling: the guards on <p, q> and on resonance are relative to scale-free sizes."""

from __future__ import annotations

import math
import re

import pytest

import lyacomp

# The centre-manifold model of test_stability_context (l1 = 2ab/(lam w) + the effect of u)
# with u' = -u + x y + 0.3 z feeding back through 0.2 x u. The linear part at the origin
# is block triangular: the pair mu +- i w on (x, y) with q_x = (1, -i, 0, 0)/sqrt(2), and
# -lam, -1 (common practice, no source).
BASE = {
    "x": "mu*x - w*y + a*x*z + 0.2*x*u",
    "y": "w*x + mu*y + a*y*z",
    "z": "-lam*z + b*(x**2 + y**2)",
    "u": "-u + x*y + 0.3*z",
}
PARAMS = {"mu": 0.03, "a": 0.7, "b": -1.3, "lam": 2.0, "w": 1.5}


def _copy(units: dict[str, float], speed: float = 1.0) -> lyacomp.Evaluator:
    """x = s_x X, ... and t -> t / speed: X' = speed * F_x(s X) / s_x."""
    eqs = {}
    for name, text in BASE.items():
        for v in "xyzu":
            text = re.sub(rf"\b{v}\b", f"({units[v]!r}*{v.upper()})", text)
        eqs[name.upper()] = f"{speed!r}*({text})/{units[name]!r}"
    return lyacomp.compile(
        lyacomp.Model(
            name="mixed units",
            states={s.upper(): 0.0 for s in BASE},
            parameters=PARAMS,
            equations=eqs,
            bifurcation="mu",
        )
    )


@pytest.mark.parametrize(
    "units, speed",
    [
        ({"x": 1e6, "y": 1e-6, "z": 1e-6, "u": 1e6}, 1.0),  # refused before: <p, q> and resonance
        ({"x": 1.0, "y": 1.0, "z": 1e-9, "u": 1e9}, 1.0),
        ({"x": 1e6, "y": 1e-6, "z": 1e-6, "u": 1e6}, 1e4),
        ({"x": 1.0, "y": 1.0, "z": 1.0, "u": 1.0}, 1e-4),
    ],
)
def test_mixed_units_in_the_pair(units, speed):
    plain = _copy({s: 1.0 for s in BASE})()
    r = _copy(units, speed)()
    assert plain.ok and r.ok, r.status
    # x = T y with T = diag(units): l1_y = l1_x / |T^-1 q_x|^2 (|q_x| = 1); a time
    # rescaling leaves l1 alone and multiplies omega and d by the speed
    # (docs/mathematics.md, Invariances).
    t_inv_q = (1 / units["x"] ** 2 + 1 / units["y"] ** 2) / 2
    assert r.l1 == pytest.approx(plain.l1 / t_inv_q, rel=1e-8)
    assert r.omega == pytest.approx(speed * plain.omega, rel=1e-10)
    assert r.transversality == pytest.approx(speed * plain.transversality, rel=1e-8)
    assert r.critical_value == pytest.approx(plain.critical_value, abs=1e-12)
    assert r.criticality == plain.criticality and r.unstable_count == plain.unstable_count
    assert math.isfinite(r.period)
