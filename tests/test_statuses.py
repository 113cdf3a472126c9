"""Every failure status is reachable and reported per sample, never raised."""

from __future__ import annotations

import numpy as np
import pytest

import lyacomp
from lyacomp import Status


def _compile(equations, parameters, bifurcation="mu", states=("x", "y"), **extra):
    model = lyacomp.Model(
        name="status probe",
        states={s: 0.0 for s in states},
        parameters=parameters,
        equations=equations,
        bifurcation=bifurcation,
        **extra,
    )
    return lyacomp.compile(model)


def test_neutral_saddle_is_not_a_hopf_point():
    # trace A = mu vanishes at mu = 0 but det A = -1 < 0: eigenvalues +-1, a neutral saddle
    # (common practice, no source).
    ev = _compile({"x": "mu*x + y + x**2", "y": "x - x*y"}, {"mu": 0.3})
    assert ev().status == "neutral_saddle"


def test_zero_eigenvalue():
    # A pair +-i on the axis next to an eigenvalue 0 (common practice, no source); the
    # equilibrium is given in closed form since Newton cannot isolate it.
    ev = _compile(
        {"x": "-y - x**3", "y": "x", "z": "x*z"},
        {},
        bifurcation=None,
        states=("x", "y", "z"),
        equilibrium={"x": "0", "y": "0", "z": "0"},
    )
    assert ev().status == "zero_eigenvalue"


def test_zero_transversality():
    # trace A = 2 mu^2 touches zero at mu = 0 without crossing: d = 0 (common practice).
    ev = _compile({"x": "mu**2*x - y - x**3", "y": "x + mu**2*y"}, {"mu": 0.05})
    assert ev().status == "zero_transversality"


def test_not_critical_without_bifurcation_parameter():
    equations = {"x": "mu*x - y - x**3", "y": "x + mu*y"}
    ev = _compile(equations, {"mu": 0.1}, bifurcation=None)
    assert ev().status == "not_critical"
    assert ev(mu=0.0).status == "ok"


def test_extra_critical_eigenvalue():
    # Two pairs on the imaginary axis (+-i and +-2i): l1 alone does not decide.
    ev = _compile(
        {"x": "-y - x**3", "y": "x", "u": "-2*w", "w": "2*u + u**2"},
        {},
        bifurcation=None,
        states=("x", "y", "u", "w"),
    )
    assert ev().status == "extra_critical_eigenvalue"


def test_no_oscillatory_pair():
    # Real eigenvalues -1 ... -4 at the start, nothing complex to follow (four states: the
    # augmented system starts from an eigenpair; two and three states need none).
    ev = _compile(
        {"x": "-x + mu*y + x**3", "y": "-2*y", "z": "-3*z", "w": "-4*w"},
        {"mu": 0.0},
        states=("x", "y", "z", "w"),
    )
    assert ev().status == "no_oscillatory_pair"


def test_nonfinite_input_and_domain_errors_in_batch():
    ev = _compile({"x": "mu*x - y + a*x**3", "y": "x + mu*y + log(a)*y**3"}, {"mu": 0.1, "a": 1.0})
    b = ev.batch({"a": np.array([1.0, np.nan, np.inf, -1.0, -2.0])})
    assert b.status.tolist() == [
        Status.OK,
        Status.NONFINITE_INPUT,
        Status.NONFINITE_INPUT,
        Status.NONFINITE_RESULT,
        Status.NONFINITE_RESULT,
    ]
    assert np.isnan(b.l1[1:]).all() and np.isfinite(b.l1[0])
    assert b.status_counts() == {"ok": 1, "nonfinite_input": 2, "nonfinite_result": 2}


def test_no_convergence_is_a_status():
    # exp(-mu) never reaches the trace condition from far away: Newton gives up cleanly.
    ev = _compile({"x": "(exp(-mu) - 1e-300)*x - y - x**3", "y": "x"}, {"mu": 50.0})
    assert ev().status == "no_convergence"


@pytest.mark.parametrize("status", list(Status))
def test_every_status_has_an_explanation(status):
    assert len(status.explanation) > 20


def test_hopf_point_found_when_no_equilibrium_exists_at_the_guess():
    # x' = y, y' = mu - x^2 + (nu - x) y: equilibria x = +-sqrt(mu) exist only for mu > 0;
    # trace A = nu - x vanishes at x = nu, where det A = 2 x > 0: a Hopf point at
    # (x, mu) = (nu, nu^2) (common practice, no source). From mu = -0.5 there is no
    # equilibrium to start from; solving F = 0 and trace A = 0 together still finds it.
    ev = _compile({"x": "y", "y": "mu - x**2 + (nu - x)*y"}, {"mu": 1.0, "nu": 1.0})
    r = ev.with_guess(x=0.8)(mu=-0.5)
    assert r.status == "ok"
    assert r.critical_value == pytest.approx(1.0, rel=1e-12)
    assert r.equilibrium["x"] == pytest.approx(1.0, rel=1e-12)
