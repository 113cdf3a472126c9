"""Redesign a duct flap (examples/duct_flap.toml) from a hard to a soft flutter onset.

An invented scenario with invented values. The starting design flutters with a hard
onset (l1 > 0). We look for the smallest relative change of the hinge damping c,
the cubic damper c3 and the spring k such that

* the onset is soft with a margin, l1 <= -0.02, and
* the flutter speed (the critical value of U) stays at or above 1.1, 10 % above
  the highest operating speed 1.0;

then, because the flow coupling a and the hinge geometry are uncertain, we redo it
robustly: the 95 % quantile of l1 over the declared tolerances must stay below
-0.01 (common random numbers make this a deterministic constraint). The
probability of a hard onset is checked before and after with an independent Monte
Carlo run. Run it with:  python examples/design_for_soft_onset.py

Caution: a local, near-onset analysis of an invented model; no substitute for
testing and for the codes and licensed practice of the field.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from scipy.optimize import minimize

import lyacomp
from lyacomp.studies.optimize import DesignSpace, RobustStatistic
from lyacomp.studies.robustness import run_robustness

MODEL = Path(__file__).with_name("duct_flap.toml")
FREE = ("c", "c3", "k")
BOUNDS = [(0.5, 3.0), (0.01, 1.0), (0.5, 4.0)]
SPEED_LIMIT = 1.1  # lowest acceptable flutter speed
L1_MARGIN = -0.02  # nominal design: l1 at most this
ROBUST_L1 = -0.01  # robust design: 95 % of built flaps have l1 below this


def describe(ev: lyacomp.Evaluator, space: DesignSpace, x: np.ndarray, samples: int) -> dict:
    """Nominal onset and the Monte Carlo probability of a hard onset at design x."""
    point = space.point(x)
    r = ev(**point)
    mc = run_robustness(ev, samples, seed=2024, fixed=point, progress=False)
    lo, hi = mc.interval
    print("  design:  " + ", ".join(f"{k} = {v:.4f}" for k, v in point.items()))
    print(
        f"  onset:   l1 = {r.l1:+.4f} ({r.criticality}), flutter speed U = "
        f"{r.critical_value:.4f} (limit {SPEED_LIMIT}), frequency {r.omega:.4f}"
    )
    print(
        f"  P(hard onset) over the tolerances: {mc.probability_subcritical:.4f} "
        f"(95% interval {lo:.4f} .. {hi:.4f}, {mc.samples} samples)"
    )
    return {
        "design": point,
        "l1": r.l1,
        "critical_value": r.critical_value,
        "criticality": r.criticality,
        "p_hard": mc.probability_subcritical,
        "interval": (lo, hi),
    }


def main(samples: int = 200_000) -> dict:
    """Run the three steps; returns the before/after figures."""
    ev = lyacomp.compile(lyacomp.load_model(MODEL))
    space = DesignSpace(ev, FREE)
    x0 = space.x0

    def change(x: np.ndarray) -> float:
        """Size of the redesign: sum of squared relative changes."""
        return float(np.sum(((x - x0) / x0) ** 2))

    def change_jac(x: np.ndarray) -> np.ndarray:
        return 2.0 * (x - x0) / x0**2

    speed = space.constraint("critical_value", lower=SPEED_LIMIT)
    print("Starting design")
    before = describe(ev, space, x0, samples)

    print(f"\nStep 1: smallest change with l1 <= {L1_MARGIN} and flutter speed >= {SPEED_LIMIT}")
    soft = space.constraint("l1", upper=L1_MARGIN)
    step1 = minimize(
        change, x0, jac=change_jac, bounds=BOUNDS, constraints=[soft, speed], method="SLSQP"
    )
    if not step1.success:
        raise SystemExit(f"step 1 failed: {step1.message}")
    nominal = describe(ev, space, step1.x, samples)

    print(f"\nStep 2: robust, the 95% quantile of l1 <= {ROBUST_L1} over the tolerances")
    q95 = RobustStatistic(space, statistic="quantile", level=0.95, samples=4000, seed=7)
    step2 = minimize(
        change,
        step1.x,
        jac=change_jac,
        bounds=BOUNDS,
        constraints=[q95.constraint(upper=ROBUST_L1), speed],
        method="SLSQP",
    )
    if not step2.success:
        raise SystemExit(f"step 2 failed: {step2.message}")
    after = describe(ev, space, step2.x, samples)

    print("\nBefore -> after (robust design)")
    print(f"  l1            {before['l1']:+.4f} -> {after['l1']:+.4f}")
    print(f"  flutter speed {before['critical_value']:.4f} -> {after['critical_value']:.4f}")
    print(f"  P(hard onset) {before['p_hard']:.4f} -> {after['p_hard']:.4f}")
    print(
        "\nCaution: a local, near-onset analysis of an invented model; no substitute for"
        " testing and for the codes and licensed practice of the field."
    )
    return {"before": before, "nominal_design": nominal, "after": after}


if __name__ == "__main__":
    main()
