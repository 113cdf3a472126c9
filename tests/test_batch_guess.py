"""Batch calls with a starting point per sample (``Evaluator.batch(..., guess=...)``)."""

from __future__ import annotations

import numpy as np
import pytest

import lyacomp
from lyacomp.errors import EvaluationError


@pytest.fixture(scope="module")
def wells():
    # x' = y, y' = x - x^3 + (mu - c x) y: equilibria x0 = -1, 0, 1; at x0 = +-1 the trace is
    # mu - c x0 and the determinant 2, so the Hopf point is mu0 = c x0; at 0 a saddle
    # (planar Hopf condition trace = 0, det > 0; common practice, no source).
    return lyacomp.compile(
        lyacomp.Model(
            name="two wells",
            states={"x": 1.0, "y": 0.0},
            parameters={"mu": 0.4, "c": 0.5},
            equations={"x": "y", "y": "x - x**3 + (mu - c*x)*y"},
            bifurcation="mu",
        )
    )


def test_each_sample_starts_from_its_own_guess(wells):
    c = np.array([0.5, 0.5, 0.3, 0.8])
    x = np.array([1.1, -1.1, -0.9, 0.9])
    b = wells.batch({"c": c}, guess={"x": x, "mu": c * np.sign(x)})
    assert b.ok.all(), b.status_counts()
    np.testing.assert_allclose(b.equilibrium[:, 0], np.sign(x), rtol=1e-12)
    np.testing.assert_allclose(b.critical_value, c * np.sign(x), rtol=1e-12)
    # without guesses every sample starts from the nominal solution, on x0 = +1
    b = wells.batch({"c": c})
    np.testing.assert_allclose(b.equilibrium[:, 0], 1.0, rtol=1e-12)
    # per-sample guesses give the same bits as one call per sample
    together = wells.batch({"c": c}, guess={"x": x, "mu": c * np.sign(x)})
    for k in range(len(c)):
        one = wells.batch({"c": c[k : k + 1]}, guess={"x": x[k], "mu": c[k] * np.sign(x[k])})
        assert one.critical_value[0] == together.critical_value[k]


def test_guess_shapes_broadcast(wells):
    b = wells.batch(guess={"x": np.array([[-1.0], [1.0]]), "y": 0.0, "mu": 0.0})
    assert b.critical_value.shape == (2, 1)
    np.testing.assert_allclose(b.critical_value[:, 0], [-0.5, 0.5], rtol=1e-12)


@pytest.mark.parametrize(
    "guess, words",
    [
        ({"z": 1.0}, "unknown name(s) ['z']"),
        ({"x": [1.0, np.nan]}, "must be finite"),
        ({"x": "1"}, "real number"),
        ([1.0], "mapping"),
    ],
)
def test_bad_guesses_are_refused(wells, guess, words):
    with pytest.raises(EvaluationError) as info:
        wells.batch(guess=guess)
    assert words in str(info.value)
