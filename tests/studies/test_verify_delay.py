"""The simulation check on delay models: published onset data of scalar delay equations
against the delay integrator (no compiler needed: the predictions are given)."""

from __future__ import annotations

import dataclasses
import math
from types import SimpleNamespace

import numpy as np
import pytest

pytest.importorskip("scipy")

import lyacomp  # noqa: E402
from lyacomp.studies.verify import check_by_simulation  # noqa: E402
from lyacomp.studies.verify_delay import (  # noqa: E402
    critical_root,
    numeric_delay_model,
    radius_estimator,
)

PI = math.pi


class KnownOnset:
    """Stands in for a compiled evaluator: returns given onset data at every call."""

    def __init__(self, bifurcation: str, nominal: dict, **onset):
        self.bifurcation = bifurcation
        self.nominal = nominal
        self.onset = onset

    def __call__(self, _overrides):
        d, l1, omega = self.onset["transversality"], self.onset["l1"], self.onset["omega"]
        side = "above" if -d * l1 > 0 else "below"
        return SimpleNamespace(
            ok=True,
            status="ok",
            criticality="supercritical" if l1 < 0 else "subcritical",
            cycle_side=side,
            amplitude={"x": 2 * math.sqrt(abs(d / (omega * l1)))},  # |q| = 1, one state
            period=2 * math.pi / omega,
            **self.onset,
        )


def scalar_model(equation: str) -> lyacomp.Model:
    return lyacomp.Model(
        name="scalar_delay",
        states={"x": 0.0},
        parameters={"r": 1.5},
        equations={"x": equation},
        bifurcation="r",
    )


def test_critical_root_and_radius_of_the_linear_delay_equation():
    # x' = -r x(t - 1) at r = pi/2 has the roots +-i pi/2 (exp(-i pi/2) = -i; common
    # practice, no source); past onset the root follows W_0(-r)/1 (Asl & Ulsoy 2003)
    from scipy.special import lambertw

    r = 1.7
    ndm = numeric_delay_model(scalar_model("-r*x(t - 1)*(1 + x)"), {"r": r})
    lam, q, p = critical_root(ndm, np.zeros(1), PI / 2)
    assert lam == pytest.approx(complex(lambertw(-r, 0)), rel=1e-12)
    assert abs(q[0]) == pytest.approx(1.0)
    # <p, Delta'(lambda) q> = 1 with Delta' = 1 - r exp(-lambda) (docs/mathematics.md)
    assert np.conj(p[0]) * (1 - r * np.exp(-lam)) * q[0] == pytest.approx(1.0)
    # on x = 2 Re(z q e^{i w t}) the estimate returns |z| at every phase
    est = radius_estimator(q, 2.0)
    for phase in np.linspace(0, 2 * PI, 7):
        z = 0.3 * np.exp(1j * phase)
        dx = 2 * np.real(z * q)
        rate = 2 * np.real(2.0j * z * q)
        assert est(dx, rate) == pytest.approx(0.3, rel=1e-12)


def test_wright_equation_amplitude_agrees_within_five_percent():
    # Wright's equation x' = -r x(t-1)(1 + x): Hopf at r = pi/2, omega = pi/2,
    # l1 = -2(3 pi - 2)/(5(4 + pi^2)), d = 2 pi/(4 + pi^2), cycle amplitude^2 ~
    # 40 (r - pi/2)/(3 pi - 2) (Hassard, Kazarinoff & Wan 1981; Chow & Mallet-Paret 1977)
    ev = KnownOnset(
        "r",
        {"r": 1.5},
        l1=-2 * (3 * PI - 2) / (5 * (4 + PI**2)),
        transversality=2 * PI / (4 + PI**2),
        omega=PI / 2,
        critical_value=PI / 2,
        equilibrium={"x": 0.0},
    )
    check = check_by_simulation(scalar_model("-r*x(t - 1)*(1 + x)"), growth=0.01, evaluator=ev)
    assert check.measured is not None and check.measured.settled
    published = math.sqrt(40 * check.offset / (3 * PI - 2))
    assert check.predicted_amplitude[0] == pytest.approx(published, rel=1e-12)
    assert abs(check.amplitude_error[0]) < 0.05, check.to_dict()
    assert abs(check.period_error) < 0.02
    assert check.agrees
    # a prediction 10% too large is refused (the bound can fail)
    far = dataclasses.replace(check.far, predicted_amplitude=1.1 * check.predicted_amplitude)
    wrong = dataclasses.replace(check, far=far)
    assert abs(wrong.amplitude_error[0]) > 0.05 and not wrong.agrees


def test_subcritical_cubic_delay_feedback_brackets_the_unstable_cycle():
    """x' = -r x(t-1) + b x(t-1)^3, derived by hand from the formula of docs/mathematics.md
    (Hassard, Kazarinoff & Wan 1981): at r = pi/2, q = 1, Delta' = 1 - r e^{-i pi/2} =
    1 + i pi/2, C(Q, Q, conj Q) = 6 b e^{-i pi/2} = -6 b i, so c1 = -3 b i / (1 + i pi/2),
    Re c1 = -6 pi b / (4 + pi^2) and l1 = -12 b / (4 + pi^2): b < 0 is subcritical.
    The linear part is Wright's: d = 2 pi / (4 + pi^2) (Hassard, Kazarinoff & Wan 1981)."""
    b = -0.5
    ev = KnownOnset(
        "r",
        {"r": 1.5},
        l1=-12 * b / (4 + PI**2),
        transversality=2 * PI / (4 + PI**2),
        omega=PI / 2,
        critical_value=PI / 2,
        equilibrium={"x": 0.0},
    )
    check = check_by_simulation(
        scalar_model("-r*x(t - 1) - 0.5*x(t - 1)**3"), growth=0.01, evaluator=ev
    )
    assert check.criticality == "subcritical" and check.value < PI / 2
    outcomes = {run.label: run.outcome for run in check.runs}
    assert outcomes == {"inside": "returned", "outside": "escaped"}
    assert check.agrees


def test_compiled_wright_predictions_agree_with_the_simulation():
    # the same published case (Hassard, Kazarinoff & Wan 1981), now with the compiled
    # evaluator's predictions and from a model file's syntax
    model = scalar_model("-r*x(t - 1)*(1 + x)")
    check = check_by_simulation(model, growth=0.01)
    assert check.critical_value == pytest.approx(PI / 2, rel=1e-9)
    assert check.predicted_period == pytest.approx(4.0, rel=1e-9)
    assert check.measured is not None and check.measured.settled
    assert abs(check.amplitude_error[0]) < 0.05, check.to_dict()
    assert check.agrees
