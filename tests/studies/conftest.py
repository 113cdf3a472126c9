"""Models shared by the study tests (invented scenarios)."""

from __future__ import annotations

import pytest

import lyacomp


@pytest.fixture(scope="session")
def two_wells() -> lyacomp.Evaluator:
    """x' = y, y' = x - x^3/a^2 + (mu - c x) y: equilibria x0 = +-a (and a saddle at 0);
    at (x0, 0) the trace is mu - c x0 and the determinant 2, so the Hopf point is at
    mu0 = c x0 (planar Hopf condition trace = 0, det > 0; common practice, no source). The
    nominal point (a = 1, guess x = -1) is on x0 = -a, a branch that exists for every
    a > 0; started from the nominal point alone, samples with large a land on x0 = +a."""
    return lyacomp.compile(
        lyacomp.Model(
            name="two wells",
            states={"x": -1.0, "y": 0.0},
            parameters={"mu": -0.5, "c": 0.5, "a": 1.0},
            equations={"x": "y", "y": "x - x**3/a**2 + (mu - c*x)*y"},
            bifurcation="mu",
        )
    )
