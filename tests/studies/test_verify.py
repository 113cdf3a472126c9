"""The simulation check: cycle measurement on exactly solvable ODEs, then the compiled
predictions against DOP853 integration on models with published onsets."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

pytest.importorskip("scipy")

import lyacomp  # noqa: E402
from lyacomp.errors import StudyError  # noqa: E402
from lyacomp.studies.verify import (  # noqa: E402
    NumericModel,
    check_by_simulation,
    critical_direction,
    measure_cycle,
    numeric_model,
    settle_on_cycle,
)


def _radial_normal_form(mu: float) -> NumericModel:
    """x' = mu x - y - x r^2, y' = x + mu y - y r^2 (a plain numpy ODE, no compiler)."""

    def rhs(_t: float, z: np.ndarray) -> np.ndarray:
        x, y = z
        r2 = x * x + y * y
        return np.array([mu * x - y - x * r2, x + mu * y - y * r2])

    def jac(z: np.ndarray) -> np.ndarray:
        x, y = z
        return np.array(
            [[mu - 3 * x * x - y * y, -1 - 2 * x * y], [1 - 2 * x * y, mu - x * x - 3 * y * y]]
        )

    return NumericModel(("x", "y"), rhs, jac)


def test_measure_cycle_on_sampled_sine():
    # amplitude and period of 0.3 + 2 sin(3 t) are 2 and 2 pi / 3 by definition
    t = np.linspace(0.0, 20.0, 20001)
    x = np.column_stack([0.3 + 2.0 * np.sin(3.0 * t), np.cos(3.0 * t)])
    amp, period = measure_cycle(t, x, reference=0)
    assert amp == pytest.approx([2.0, 1.0], rel=1e-5)
    assert period == pytest.approx(2 * math.pi / 3.0, rel=1e-7)


def test_settles_on_exact_cycle_of_radial_normal_form():
    # In polar form r' = r (mu - r^2), theta' = 1: the cycle is r = sqrt(mu), period 2 pi
    # exactly, and radial deviations decay like exp(-2 mu t) (common practice, no source).
    mu = 0.04
    nm = _radial_normal_form(mu)
    _, meas = settle_on_cycle(
        nm, np.array([0.1, 0.0]), 2 * math.pi, 10.0 / (2 * mu), 0.2, reference=0
    )
    assert meas.settled
    assert meas.amplitude == pytest.approx([math.sqrt(mu)] * 2, rel=1e-5)
    assert meas.period == pytest.approx(2 * math.pi, rel=1e-7)


def test_critical_direction_normalization():
    # A rotation-dilation [[a, -w], [w, a]] has eigenvalue a + i w with eigenvector
    # (1, -i)/sqrt(2) up to phase (common practice, no source); docs/mathematics.md fixes
    # <q, q> = 1 and <p, q> = 1.
    jac = np.array([[0.1, -2.0], [2.0, 0.1]])
    q, p = critical_direction(jac)
    assert np.vdot(q, q).real == pytest.approx(1.0)
    assert np.vdot(p, q) == pytest.approx(1.0)
    assert jac @ q == pytest.approx((0.1 + 2.0j) * q)
    assert abs(q[0]) == pytest.approx(1 / math.sqrt(2))


def tilted_normal_form(a: float, b: float, s: float, w: float, m: float) -> lyacomp.Model:
    """A Hopf normal form with frequency w, onset at mu = m and quadratic terms a x^2, b x^2.

    Guckenheimer & Holmes (1983) eq. 3.4.11 (equation number from memory), as written in
    docs/mathematics.md: f = a x^2 + s x r^2, g = b x^2 + s y r^2 give 16 A = 16 s - 4 a b / w, and
    l1 = 2 A / w = 2 s / w - a b / (2 w^2).
    """
    return lyacomp.Model(
        name="tilted_normal_form",
        states={"x": 0.0, "y": 0.0},
        parameters={"mu": m, "m": m, "w": w, "a": a, "b": b, "s": s},
        equations={
            "x": "(mu - m)*x - w*y + a*x**2 + s*x*(x**2 + y**2)",
            "y": "w*x + (mu - m)*y + b*x**2 + s*y*(x**2 + y**2)",
        },
        bifurcation="mu",
    )


def brusselator(a: float, b_guess: float) -> lyacomp.Model:
    """x' = A - (B + 1) x + x^2 y, y' = B x - x^2 y: equilibrium (A, B/A), Hopf at
    B = 1 + A^2 with omega = A, supercritical (Prigogine & Lefever 1968, from memory)."""
    return lyacomp.Model(
        name="brusselator",
        states={"x": a, "y": b_guess / a},
        parameters={"A": a, "B": b_guess},
        equations={"x": "A - (B + 1)*x + x**2*y", "y": "B*x - x**2*y"},
        bifurcation="B",
    )


def lorenz(sigma: float = 10.0, beta: float = 8.0 / 3.0) -> lyacomp.Model:
    """Lorenz (1963): the equilibria (+-sqrt(beta (rho - 1)), same, rho - 1) lose stability at
    rho_H = sigma (sigma + beta + 3) / (sigma - beta - 1) in a subcritical Hopf bifurcation
    (Marsden & McCracken 1976, ch. 4B; chapter from memory)."""
    rho_h = sigma * (sigma + beta + 3) / (sigma - beta - 1)
    c = math.sqrt(beta * (rho_h - 1))
    return lyacomp.Model(
        name="lorenz",
        states={"x": c, "y": c, "z": rho_h - 1},
        parameters={"sigma": sigma, "rho": rho_h, "beta": beta},
        equations={"x": "sigma*(y - x)", "y": "rho*x - y - x*z", "z": "x*y - beta*z"},
        bifurcation="rho",
    )


@pytest.mark.parametrize(
    "model",
    [
        tilted_normal_form(a=2.0, b=1.5, s=0.1, w=1.3, m=0.2),
        tilted_normal_form(a=0.5, b=-0.8, s=-0.4, w=0.7, m=-1.0),
    ],
    ids=["tilted-a", "tilted-b"],
)
def test_supercritical_amplitude_and_period_agree(model):
    check = check_by_simulation(model)
    assert check.criticality == "supercritical"
    assert check.measured is not None and check.measured.settled
    # the acceptance bound: amplitude within 10% a small distance past onset
    assert np.all(np.abs(check.amplitude_error) < 0.10), check.to_dict()
    # the period at onset is 2 pi / omega; past onset it moves by O(growth)
    assert abs(check.period_error) < 0.05
    assert check.agrees


def test_brusselator_cycle_agrees_and_onset_matches_closed_form():
    a = 1.5
    check = check_by_simulation(brusselator(a=a, b_guess=3.0))
    # Hopf at B = 1 + A^2 with period 2 pi / A (Prigogine & Lefever 1968, from memory)
    assert check.critical_value == pytest.approx(1 + a * a, rel=1e-9)
    assert check.predicted_period == pytest.approx(2 * math.pi / a, rel=1e-9)
    assert check.criticality == "supercritical"
    assert check.value > check.critical_value  # the stable cycle lives above onset
    assert check.measured is not None and check.measured.settled
    assert np.all(np.abs(check.amplitude_error) < 0.10), check.to_dict()
    assert abs(check.period_error) < 0.05


def test_subcritical_lorenz_brackets_the_unstable_cycle():
    check = check_by_simulation(lorenz())
    assert check.criticality == "subcritical"
    assert check.value < check.critical_value  # unstable cycles coexist with stable C+ below
    outcomes = {run.label: run.outcome for run in check.runs}
    assert outcomes == {"inside": "returned", "outside": "escaped"}
    assert check.agrees


def test_numeric_model_uses_verbatim_names():
    # names that clash with sympy/numpy builtins must survive lambdify (dummify=True)
    model = lyacomp.Model(
        name="names",
        states={"E": 0.0, "I": 0.0},
        parameters={"lambda": 0.5, "beta": -1.0},
        equations={"E": "lambda*E - I + beta*E**3", "I": "E + lambda*I"},
        bifurcation="lambda",
    )
    nm = numeric_model(model, {"lambda": 0.5, "beta": -1.0})
    assert nm.rhs(0.0, np.array([1.0, 2.0])) == pytest.approx([0.5 - 2.0 - 1.0, 1.0 + 1.0])


def test_bad_requests_are_study_errors():
    model = tilted_normal_form(a=0.0, b=0.0, s=-1.0, w=1.0, m=0.0)
    with pytest.raises(StudyError):
        check_by_simulation(model, growth=-1.0)
    with pytest.raises(StudyError, match="offset"):
        check_by_simulation(model, offset=1e-9)


BRUSSELATOR_TOML = """
name = "brusselator"
[states]
x = 1.5
y = 2.0
[parameters]
A = 1.5
B = 3.0
[equations]
x = "A - (B + 1)*x + x**2*y"
y = "B*x - x**2*y"
[bifurcation]
parameter = "B"
"""


def test_verify_command_reports_agreement(tmp_path, capsys):
    from lyacomp.cli import main

    model = tmp_path / "brusselator.toml"
    model.write_text(BRUSSELATOR_TOML)
    png = tmp_path / "check.png"
    code = main(["verify", str(model), "--set", "A=1.2", "--plot", str(png), "--json"])
    out = json.loads(capsys.readouterr().out)
    assert code == 0 and out["agrees"]
    # Hopf at B = 1 + A^2 (Prigogine & Lefever 1968, from memory)
    assert out["critical_value"] == pytest.approx(1 + 1.2**2, rel=1e-9)
    assert abs(out["relative_error"]["amplitude"]["x"]) < 0.1
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_verify_command_errors_are_one_line(tmp_path, capsys):
    from lyacomp.cli import main

    model = tmp_path / "brusselator.toml"
    model.write_text(BRUSSELATOR_TOML)
    code = main(["verify", str(model), "--growth", "0.01", "--offset", "0.1"])
    err = capsys.readouterr().err
    assert code == 2
    assert err.startswith("lyacomp: error:") and err.count("\n") == 1


class _PeriodOff:
    """An evaluator whose results report a period 1.5 times the true one (as a compiled
    period with a bug would): verify must compare the simulation with that number."""

    class _Result:
        def __init__(self, res):
            self._res = res

        def __getattr__(self, name):
            return getattr(self._res, name)

        @property
        def period(self):
            return 1.5 * self._res.period

    def __init__(self, ev):
        self._ev = ev

    def __getattr__(self, name):
        return getattr(self._ev, name)

    def __call__(self, *args, **kwargs):
        return self._Result(self._ev(*args, **kwargs))


def test_verify_compares_with_the_compiled_period(caplog):
    model = tilted_normal_form(a=2.0, b=1.5, s=0.1, w=1.3, m=0.2)
    ev = lyacomp.compile(model)
    with caplog.at_level("INFO", logger="lyacomp.progress"):
        honest = check_by_simulation(model, evaluator=ev)
    assert honest.predicted_period == ev().period
    assert any("simulating the model" in r.getMessage() for r in caplog.records)
    wrong = check_by_simulation(model, evaluator=_PeriodOff(ev))
    assert wrong.predicted_period == 1.5 * ev().period
    # the simulation still measures the true period (2 pi / omega near onset; common
    # practice, no source), so the comparison shows the disagreement
    assert wrong.period_error == pytest.approx(1 / 1.5 - 1, abs=0.05)
    assert not wrong.agrees
