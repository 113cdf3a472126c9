"""FORM reliability index (lyacomp.studies.reliability) against exact answers and Monte Carlo.

Planar normal form x' = mu x - y + b (x^2 + y^2) x, y' = x + mu y + b (x^2 + y^2) y has
l1 = 2 b (docs/mathematics.md check value: l1 = 2 beta2 for w' = (beta1 + i) w + beta2 w |w|^2), so
l1 is linear in the coefficients that make up b.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys

import numpy as np
import pytest
from scipy import stats

import lyacomp
from lyacomp.errors import StudyError
from lyacomp.studies.reliability import local_sensitivities, reliability_index, score_slope
from lyacomp.studies.robustness import run_robustness, study_setup
from lyacomp.studies.uncertainty import LogNormal, Normal, Triangular, TruncatedNormal, Uniform

LINEAR = lyacomp.Model(
    name="form_linear",
    states={"x": 0.0, "y": 0.0},
    parameters={"mu": 0.1, "b1": -0.5, "b2": 0.2},
    equations={
        "x": "mu*x - y + (b1 - b2)*(x**2 + y**2)*x",
        "y": "x + mu*y + (b1 - b2)*(x**2 + y**2)*y",
    },
    bifurcation="mu",
)


@pytest.fixture(scope="module")
def linear():
    return lyacomp.compile(LINEAR)


def _spec(ev, table):
    return study_setup(ev, table, None)[0]


@pytest.mark.parametrize("rho", [0.0, 0.5, -0.3])
def test_linear_normal_limit_state_gives_exact_index(linear, rho):
    # Source: Hasofer & Lind, J. Eng. Mech. Div. ASCE 100 (1974): for a limit state linear in
    # normal variables the index is mean/sd of the margin M = b2 - b1, exactly, and the
    # design point is mu - Sigma a (a.mu)/(a^T Sigma a).
    s1, s2 = 0.2, 0.3
    table = {
        "b1": {"distribution": "normal", "sd": s1},
        "b2": {"distribution": "normal", "sd": s2, "correlation": {"b1": rho}},
    }
    form = reliability_index(linear, _spec(linear, table))
    mean = np.array([-0.5, 0.2])
    cov = np.array([[s1**2, rho * s1 * s2], [rho * s1 * s2, s2**2]])
    a = np.array([-1.0, 1.0])
    beta = (a @ mean) / math.sqrt(a @ cov @ a)
    assert form.converged
    assert form.reliability_index == pytest.approx(beta, rel=1e-10)
    assert form.probability_hard == pytest.approx(stats.norm.cdf(-beta), rel=1e-8)
    point = mean - cov @ a * (a @ mean) / (a @ cov @ a)
    got = np.array([form.design_point["b1"], form.design_point["b2"]])
    np.testing.assert_allclose(got, point, rtol=1e-9, atol=1e-12)


def test_index_is_negative_when_the_nominal_design_is_hard(linear):
    # Source: the sign convention of the issue (beta < 0 when nominal is hard); the size
    # is again mean/sd of the margin (Hasofer & Lind 1974).
    table = {
        "b1": {"distribution": "normal", "mean": 0.3, "sd": 0.2},
        "b2": {"distribution": "normal", "mean": -0.1, "sd": 0.3},
    }
    form = reliability_index(linear, _spec(linear, table))
    assert form.reliability_index == pytest.approx(-0.4 / math.sqrt(0.13), rel=1e-10)
    assert form.probability_hard > 0.5


@pytest.mark.parametrize(
    ("table", "exact"),
    [
        # hard iff b1 > b2 = 0.2: P = P(ln b1 > ln 0.2) with ln b1 ~ N(ln 0.1, 0.4)
        (
            {"b1": {"distribution": "lognormal", "median": 0.1, "sigma": 0.4}},
            1 - stats.norm.cdf(math.log(2) / 0.4),
        ),
        # P(b1 > 0.2) for b1 uniform on [-0.5, 0.25]
        ({"b1": {"distribution": "uniform", "low": -0.5, "high": 0.25}}, 0.05 / 0.75),
    ],
)
def test_one_variable_monotone_limit_state_is_exact_in_scores(linear, table, exact):
    # Source: common practice, no source: a limit state monotone in one variable is a plane
    # in that variable's normal score, so FORM is exact there (Rackwitz & Fiessler 1978 map
    # non-normal variables to scores); checks the score-map chain rule.
    form = reliability_index(linear, _spec(linear, table))
    assert form.converged
    assert form.probability_hard == pytest.approx(exact, rel=1e-8)
    assert form.design_point["b1"] == pytest.approx(0.2, rel=1e-9)


@pytest.mark.parametrize(
    "marginal",
    [
        Normal(1.0, 0.3),
        LogNormal(2.0, 0.25),
        Uniform(-1.0, 3.0),
        TruncatedNormal(1.0, 0.5, 0.2, 2.5),
        TruncatedNormal(0.0, 1.0, 1.0, 3.0),
        Triangular(0.0, 0.2, 0.5),
    ],
)
def test_score_slopes_match_differences_of_the_score_map(marginal):
    # Source: common practice, no source (central differences, error O(h^2)).
    z = np.array([-1.7, -0.4, 0.0, 0.3, 1.2])
    h = 1e-6
    numeric = (marginal.from_scores(z + h) - marginal.from_scores(z - h)) / (2 * h)
    exact = score_slope(marginal, z, marginal.from_scores(z))
    np.testing.assert_allclose(exact, numeric, rtol=1e-6)


def test_nonlinear_case_against_monte_carlo(examples_dir):
    # Source: Monte Carlo of the same model (2e5 samples here; 1e7 in
    # benchmarks/form_vs_monte_carlo.py). FORM agrees only to first order; the example's
    # surface is mildly curved, so the two probabilities are close but not equal.
    ev = lyacomp.compile(examples_dir / "duct_flap.toml")
    result = run_robustness(ev, 200_000, seed=11, progress=False)
    form = result.reliability
    assert form is not None and form.converged
    assert form.reliability_index < 0  # the nominal flap is hard
    assert abs(form.probability_hard - result.probability_subcritical) < 0.01
    # The design point lies on the surface l1 = 0 (exactly, to the iteration's tolerance).
    at = ev(form.design_point)
    assert abs(at.l1) < 1e-8


def test_local_sensitivity_ranking(linear):
    # Source: l1 = 2 (b1 - b2) (docs/mathematics.md check value): dl1/db1 = 2, dl1/db2 = -2,
    # scaled by sd.
    table = {
        "b1": {"distribution": "normal", "sd": 0.2},
        "b2": {"distribution": "normal", "sd": 0.3},
    }
    ranking = local_sensitivities(linear, _spec(linear, table))
    assert [s.name for s in ranking] == ["b2", "b1"]
    assert ranking[0].scaled == pytest.approx(-0.6, rel=1e-12)
    assert ranking[1].scaled == pytest.approx(0.4, rel=1e-12)


def test_no_bifurcation_parameter_is_refused():
    model = lyacomp.Model(
        name="form_no_mu",
        states={"x": 0.0, "y": 0.0},
        parameters={"a": -1.0},
        equations={"x": "-y + a*x**3", "y": "x"},
    )
    ev = lyacomp.compile(model)
    spec = _spec(ev, {"a": {"distribution": "normal", "sd": 0.1}})
    with pytest.raises(StudyError, match="bifurcation parameter"):
        reliability_index(ev, spec)
    assert local_sensitivities(ev, spec) == []


def test_robustness_json_carries_index_and_design_point(examples_dir):
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "lyacomp",
            "robustness",
            str(examples_dir / "duct_flap.toml"),
            "--samples",
            "2000",
            "--seed",
            "3",
            "--json",
        ],
        capture_output=True,
        text=True,
        check=True,
    )
    doc = json.loads(proc.stdout)
    assert doc["reliability_index"] < 0
    assert set(doc["design_point"]) == {"a", "c3", "k2", "e"}
    assert doc["reliability"]["converged"] is True
    assert [s["parameter"] for s in doc["sensitivity"]][0] == "a"
