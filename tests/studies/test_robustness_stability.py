"""Issue 8: the hard-onset probability counts only first-loss-of-stability samples."""

from __future__ import annotations

import pytest

stats = pytest.importorskip("scipy.stats")

import lyacomp  # noqa: E402
from lyacomp.studies.robustness import run_robustness, wilson_interval  # noqa: E402

# Hopf normal form in (x, y) (l1 = 2 s, Guckenheimer & Holmes 1983 eq. 3.4.11, number from
# memory, in our normalization) plus z' = g z: the eigenvalue g does not touch the pair,
# and for g > 0 the equilibrium is unstable on both sides of onset (common practice, no
# source). z enters the other equations at no order, so l1 stays 2 s.
THREE = dict(
    name="normal form with a third state",
    states={"x": 0.0, "y": 0.0, "z": 0.0},
    parameters={"mu": 0.0, "s": -1.0, "g": -1.0},
    equations={
        "x": "mu*x - y + s*x*(x**2 + y**2)",
        "y": "x + mu*y + s*y*(x**2 + y**2)",
        "z": "g*z",
    },
    bifurcation="mu",
)
UNCERTAINTY = {
    "s": {"distribution": "normal", "mean": -0.2, "sd": 0.5},
    "g": {"distribution": "uniform", "low": -1.0, "high": 0.6},
}


@pytest.fixture(scope="module")
def ev():
    return lyacomp.compile(lyacomp.Model(**THREE))


def test_counts_add_up_and_json_carries_them(ev):
    result = run_robustness(ev, 20_000, seed=5, uncertainty=UNCERTAINTY)
    assert result.first_loss + result.unstable_equilibrium == result.ok == result.samples
    doc = result.to_dict()
    assert doc["first_loss"] == result.first_loss
    assert doc["unstable_equilibrium"] == result.unstable_equilibrium


def test_unstable_equilibria_are_counted_apart(ev):
    n = 200_000
    result = run_robustness(ev, n, seed=11, uncertainty=UNCERTAINTY)
    # P(g > 0) = 0.6 / 1.6 for g ~ U(-1, 0.6) (definition of the uniform law)
    lo, hi = wilson_interval(result.unstable_equilibrium, n, 0.999)
    assert lo <= 0.375 <= hi
    # among first-loss samples s and g are independent: P(hard) = P(s > 0) = Phi(-0.2/0.5)
    exact = stats.norm.cdf(-0.2 / 0.5)
    lo, hi = wilson_interval(result.subcritical, result.first_loss, 0.999)
    assert lo <= exact <= hi
    assert "already unstable equilibrium" in result.summary()


def test_samples_off_the_nominal_branch_are_counted(two_wells):
    # The model and its exact critical value mu0 = c x0: the fixture's docstring. The
    # branch x0 = -a exists for every a > 0, so a sample is on it exactly when its critical
    # value is negative (c > 0). Solved directly from the nominal point, samples with
    # large a land on x0 = +a; the continuation check must mark exactly those.
    import numpy as np

    ev = two_wells
    uncertainty = {"a": {"distribution": "uniform", "low": 0.5, "high": 3.0}}
    result = run_robustness(ev, 400, seed=3, uncertainty=uncertainty, progress=False)
    other = int(np.count_nonzero(result.kept["critical_value"] > 0))
    assert result.quantile_basis == result.ok  # every ok sample kept
    assert other > 0 and result.ok - other > 0  # both kinds present: the check can fail
    assert result.off_branch == other
    assert result.to_dict()["off_branch"] == other
    assert f"in 4 steps ends elsewhere; counted above): {other}" in result.summary()
    unchecked = run_robustness(
        ev, 400, seed=3, uncertainty=uncertainty, progress=False, branch_steps=0
    )
    assert unchecked.off_branch == 0 and unchecked.ok == result.ok
