"""Issue 8, item 8: the bias of the smoothed hard-onset probability is what the docstring
of RobustStatistic says."""

from __future__ import annotations

import math

import pytest

stats = pytest.importorskip("scipy.stats")

import lyacomp  # noqa: E402
from lyacomp.studies.optimize import DesignSpace, RobustStatistic  # noqa: E402

# Hopf normal form: l1 = 2 s (Guckenheimer & Holmes 1983 eq. 3.4.11, number from memory,
# with l1 = 2 a / omega in our normalization, omega = 1).
NORMAL_FORM = dict(
    name="normal form",
    states={"x": 0.0, "y": 0.0},
    parameters={"mu": 0.0, "s": -1.0},
    equations={"x": "mu*x - y + s*x*(x**2 + y**2)", "y": "x + mu*y + s*y*(x**2 + y**2)"},
    bifurcation="mu",
)


def test_smoothing_bias_matches_the_docstring():
    ev = lyacomp.compile(lyacomp.Model(**NORMAL_FORM))
    space = DesignSpace(ev, ["s"])
    table = {"s": {"distribution": "normal", "sd": 0.5}}
    width = 0.3
    step = RobustStatistic(space, samples=20000, seed=3, uncertainty=table)
    smooth = RobustStatistic(space, samples=20000, seed=3, uncertainty=table, smoothing=width)
    # s ~ N(-0.5, 0.5), so l1 = 2 s ~ N(-1, 1): P(l1 > 0) = Phi(-1) (normal CDF, scipy)
    assert step([-0.5]) == pytest.approx(stats.norm.cdf(-1.0), abs=2e-3)
    # exact mean of expit(l1 / w) under N(-1, 1) by quadrature (scipy.integrate.quad)
    from scipy.integrate import quad
    from scipy.special import expit

    exact, _ = quad(lambda t: expit(t / width) * stats.norm.pdf(t, -1.0, 1.0), -12, 12)
    assert smooth([-0.5]) == pytest.approx(exact, abs=2e-3)
    # the docstring: bias ~ -(pi^2/6) w^2 f'(0), f'(0) = -phi(1) for N(-1, 1): over-estimate
    bias = smooth([-0.5]) - step([-0.5])
    predicted = (math.pi**2 / 6) * width**2 * stats.norm.pdf(1.0)
    assert bias > 0
    assert bias == pytest.approx(predicted, rel=0.25)
