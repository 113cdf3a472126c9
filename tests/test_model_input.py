"""Stage 1: model parsing and validation; bad input gives clear errors, never a crash."""

from __future__ import annotations

import math
import textwrap

import numpy as np
import pytest

import lyacomp
from lyacomp.errors import ModelError
from lyacomp.model import model_from_dict


def _model(**overrides):
    doc = {
        "name": "probe",
        "states": {"x": 0.0, "y": 0.0},
        "parameters": {"mu": 0.0, "a": 1.0},
        "equations": {"x": "mu*x - y - a*x**3", "y": "x + mu*y"},
    }
    doc.update(overrides)
    return model_from_dict(doc, source="probe.toml")


@pytest.mark.parametrize(
    ("change", "fragment"),
    [
        ({"equations": {"x": "mu*x - z", "y": "x"}}, "unknown name 'z'"),
        ({"equations": {"x": "y"}}, "no equation for state 'y'"),
        ({"equations": {"x": "y", "y": "x", "w": "x"}}, "'w' is not a declared state"),
        ({"parameters": {"x": 1.0}}, "declared in both [states] and [parameters]"),
        ({"definitions": {"f": "g + x", "g": "f*2"}}, "cyclic: f -> g -> f"),
        ({"equations": {"x": "abs(x)", "y": "x"}}, "abs() is not smooth"),
        ({"equations": {"x": "min(x, y)", "y": "x"}}, "min() is not smooth"),
        ({"equations": {"x": "sign(x)", "y": "x"}}, "sign() is not smooth"),
        ({"equations": {"x": "floor(x)", "y": "x"}}, "floor() is not smooth"),
        ({"equations": {"x": "x if y > 0 else y", "y": "x"}}, "conditionals are not allowed"),
        ({"equations": {"x": "x > y", "y": "x"}}, "conditionals are not allowed"),
        ({"equations": {"x": "x^2", "y": "x"}}, "'^' is not a power"),
        ({"equations": {"x": "x*(y", "y": "x"}}, "syntax error"),
        ({"equations": {"x": "foo(x)", "y": "x"}}, "unknown function 'foo'"),
        ({"equations": {"x": "exp(x, y)", "y": "x"}}, "exp() takes 1 argument"),
        ({"equations": {"x": "mu(x)", "y": "x"}}, "declared symbol, not a function"),
        ({"equations": {"x": "'text'", "y": "x"}}, "only real numbers"),
        ({"equations": {"x": "1/0", "y": "x"}}, "division by zero"),
        ({"equations": {"x": "", "y": "x"}}, "empty expression"),
        ({"states": {"x": 0.0}, "equations": {"x": "x"}}, "at least 2 states"),
        ({"states": {"x": "zero", "y": 0.0}}, "expected a number"),
        ({"bifurcation": {"parameter": "nu"}}, "'nu' is not a declared parameter"),
        ({"bifurcation": {"guess": 1.0}}, "needs 'parameter"),
        ({"bifurcation": {"parameter": "mu", "critical_value": "x + a"}}, "unknown name 'x'"),
        ({"equilibrium": {"x": "0"}}, "no expression for 'y'"),
        ({"states": {"x y": 0.0, "y": 0.0}}, "not a valid name"),
        ({"colour": "red"}, "unknown top-level key"),
    ],
)
def test_bad_models_name_the_problem(change, fragment):
    with pytest.raises(ModelError) as info:
        _model(**change)
    assert fragment in str(info.value)
    assert "probe.toml" in str(info.value)


@pytest.mark.parametrize(
    "attack",
    [
        "__import__('os').system('echo pwned')",
        "x.__class__.__bases__",
        "(lambda: 1)()",
        "[c for c in ()]",
        "globals()",
        "exec('1')",
        "x; import os",
        "open('/etc/passwd')",
        "x\n import os",
    ],
)
def test_code_injection_in_expressions_is_rejected(attack, tmp_path):
    marker = tmp_path / "pwned"
    with pytest.raises(ModelError):
        _model(equations={"x": attack.replace("echo pwned", f"touch {marker}"), "y": "x"})
    assert not marker.exists()


@pytest.mark.parametrize(
    "bad_name", ["x; system('ls')", "a*/b", "__x", "_private", "x-y", "é", "1x", ""]
)
def test_names_that_are_not_identifiers_are_rejected(bad_name):
    with pytest.raises(ModelError, match="not a valid name"):
        _model(parameters={bad_name: 1.0, "mu": 0.0, "a": 1.0})


def test_keywords_and_sympy_names_work_as_plain_symbols():
    # Common practice, no source: engineers name parameters E, I, S, N, lambda, gamma ...
    m = _model(
        parameters={
            "mu": 0.0,
            "lambda": 2.0,
            "int": 3.0,
            "return": 5.0,
            "E": 7.0,
            "I": 11.0,
            "S": 13.0,
            "N": 17.0,
            "beta": 19.0,
            "re": 23.0,
            "double": 29.0,
        },
        equations={
            "x": "mu*x - y + lambda*int*return*E*I*S*N*beta*re*double*x**3",
            "y": "x + mu*y",
        },
    )
    rhs = m.symbolic().rhs[0]
    coefficient = rhs.coeff(m.symbolic().states[0] ** 3)
    values = {s: v for s, v in zip(m.symbolic().parameters, m.parameters.values())}
    assert float(coefficient.subs(values)) == 2 * 3 * 5 * 7 * 11 * 13 * 17 * 19 * 23 * 29


def test_pi_is_the_constant_unless_declared():
    m = _model(equations={"x": "mu*x - y + pi*x**3", "y": "x + mu*y"})
    assert m.symbolic().rhs[0].coeff(m.symbolic().states[0] ** 3) == __import__("sympy").pi
    with pytest.warns(UserWarning, match="declares 'pi'"):
        _model(parameters={"mu": 0.0, "a": 1.0, "pi": 3.0})


def test_definitions_chain_into_each_other():
    m = _model(
        definitions={"g": "2*f", "f": "a*x**3"}, equations={"x": "mu*x - y - g", "y": "x + mu*y"}
    )
    x = m.symbolic().states[0]
    assert m.symbolic().rhs[0].coeff(x**3) == -2 * m.symbolic().parameters[1]


def test_toml_file_errors_name_the_file(tmp_path):
    path = tmp_path / "broken.toml"
    path.write_text('name = "b"\n[states]\nx = 0\nx = 1\n')
    with pytest.raises(ModelError, match="broken.toml: not valid TOML"):
        lyacomp.load_model(path)
    with pytest.raises(ModelError, match="model file not found"):
        lyacomp.load_model(tmp_path / "missing.toml")


def test_minimal_file_from_the_format_description(tmp_path):
    # The minimal file of the documented format must work as written.
    path = tmp_path / "rig.toml"
    path.write_text(
        textwrap.dedent("""
        name = "two-mass test rig"
        [states]        # state name = starting guess for the equilibrium
        x = 0.0
        y = 0.0
        [parameters]    # name = nominal value
        k = 1.0
        E = 2.0
        [definitions]   # optional named sub-expressions
        force = "E*x**3"
        [equations]     # time derivative of each state
        x = "y"
        y = "-k*x + (k - 1)*y - force"
        [bifurcation]   # optional: the parameter solved for at onset
        parameter = "k"
        guess = 1.0
    """)
    )
    ev = lyacomp.compile(lyacomp.load_model(path))
    r = ev(k=1.3)
    assert r.ok
    # Hopf condition trace A = k - 1 = 0 with det A = k > 0 (common practice, no source).
    assert r.critical_value == pytest.approx(1.0, abs=1e-12)
    assert r.omega == pytest.approx(1.0, rel=1e-12)
    assert r.transversality == pytest.approx(0.5, rel=1e-12)  # d(trace/2)/dk
    # A cubic restoring force with no velocity-dependent nonlinearity gives l1 = 0: all
    # terms of the planar formula of Guckenheimer & Holmes (1983, eq. 3.4.11, equation
    # number from memory) vanish for f = 0, g = -E x^3.
    assert r.criticality == "degenerate"
    assert abs(r.l1) < 1e-12
    assert math.isnan(r.amplitude["x"]) and r.cycle_side is None


def test_sympy_expressions_are_accepted():
    import sympy as sp

    x, y, mu = sp.symbols("x y mu")
    m = lyacomp.Model(
        name="sym",
        states={"x": 0.0, "y": 0.0},
        parameters={"mu": 0.1},
        equations={"x": mu * x - y - x * (x**2 + y**2), "y": x + mu * y - y * (x**2 + y**2)},
        bifurcation="mu",
    )
    r = lyacomp.compile(m)()
    # Normal form with cubic coefficient -1, omega = 1: l1 = 2*(-1)/1 (docs/mathematics.md).
    assert r.l1 == pytest.approx(-2.0, rel=1e-12)
    with pytest.raises(ModelError, match="unknown symbol"):
        lyacomp.Model(
            name="sym",
            states={"x": 0.0, "y": 0.0},
            parameters={},
            equations={"x": sp.Symbol("q") * x, "y": x},
        )
    assert np.isfinite(r.omega)
