"""Delay equations: the model syntax, its refusals, the ODE limit, statuses, warnings."""

from __future__ import annotations

import math
import shutil
import subprocess

import pytest
import sympy as sp

import lyacomp
from lyacomp import DelayError, ModelError
from lyacomp.model import model_from_dict

STATES = {"x": 0.0, "y": 0.0}
PARAMS = {"r": 1.5, "tau": 1.0, "a": 2.0}


def _model(equations, parameters=PARAMS, states=STATES, **extra) -> lyacomp.Model:
    return lyacomp.Model(
        name="delay input", states=states, parameters=parameters, equations=equations, **extra
    )


# --- syntax -------------------------------------------------------------------------------
def test_delayed_states_in_equations_and_definitions_share_one_delay_per_expression():
    m = model_from_dict(
        {
            "name": "syntax",
            "states": STATES,
            "parameters": PARAMS,
            "definitions": {"g": "tanh(x(t - tau))"},
            "equations": {
                "x": "-r*x(t-tau)*(1 + x) + g*y(t - 2*tau)",
                "y": "-y + x(t - (tau + tau)) + y(t)",
            },
        }
    )
    tau = sp.Symbol("tau", real=True)
    assert m.delays == (tau, 2 * tau)
    lagged = m.symbolic().lagged
    assert [str(s) for s in lagged[0]] == ["x(t-tau0)", "y(t-tau0)"]
    x, y = m.symbolic().states
    assert m.symbolic().rhs[1] == lagged[1][0]  # y(t) is y: -y + y cancels
    assert m.symbolic().rhs[0].has(lagged[0][0], lagged[1][1], x)
    assert not m.symbolic().rhs[0].has(y)


def test_sympy_spelling_gives_the_same_model_as_the_text():
    x, y, r, tau = sp.symbols("x y r tau")
    text = _model({"x": "-r*x(t - tau)*(1 + x)", "y": "-y + tanh(y(t - 2*tau))"})
    built = _model(
        {
            "x": -r * lyacomp.delayed(x, tau) * (1 + x),
            "y": -y + sp.tanh(lyacomp.delayed(y, 2 * tau)),
        }
    )
    assert built.symbolic().rhs == text.symbolic().rhs
    assert built.fingerprint() == text.fingerprint()


def test_an_ode_model_spelled_with_x_of_t_compiles_to_the_ode_kernel_byte_for_byte():
    # The ODE path is unchanged: x(t) is the state itself, no delay template is used.
    plain = _model({"x": "r*x - y - x**3", "y": "x"})
    spelled = _model({"x": "r*x(t) - y(t) - x**3", "y": "x(t)"})
    assert spelled.delays == ()
    assert lyacomp.generate(spelled).embedded == lyacomp.generate(plain).embedded
    assert "Delta(lambda)" not in lyacomp.generate(plain).embedded


def test_one_state_is_enough_with_a_delay_but_not_without():
    assert len(_model({"x": "-r*x(t - tau)"}, states={"x": 0.0}).delays) == 1
    with pytest.raises(ModelError, match="at least 2 states"):
        _model({"x": "-r*x"}, states={"x": 0.0})


# --- refusals (each message checked) -----------------------------------------------------
@pytest.mark.parametrize(
    ("equation", "message"),
    [
        ("x(t - y)", "depends on the state(s) or delayed state(s) 'y'; only constant delays"),
        ("x(t - y(t - tau))", "only constant delays (expressions of parameters)"),
        ("x(t + tau)", "is negative (-1) at the nominal values; a delay looks into the past"),
        ("x(t - tau + 1)", "is zero at the nominal values; write the state without delay"),
        ("r(t - tau)", "'r' is a declared symbol, not a function (only states can be delayed"),
        ("t*x", "'t' is time: it may appear only in a delayed state such as x(t - tau)"),
        ("x(t - tau + t)", "must be t - DELAY, with a delay that does not depend on time"),
        ("x(2*t)", "must be t - DELAY, with a delay that does not depend on time"),
        ("x(t - sin(t))", "must be t - DELAY, with a delay that does not depend on time"),
        ("x(t - log(a - 2))", "is not a finite number at the nominal values"),
    ],
)
def test_refused_delays_name_the_problem(equation, message):
    with pytest.raises(DelayError, match=message.replace("(", r"\(").replace(")", r"\)")):
        _model({"x": equation, "y": "-y"})


def test_refused_delay_in_a_definition_names_the_definition():
    with pytest.raises(DelayError, match=r"\[definitions\] g: the delay '-tau'"):
        _model({"x": "g", "y": "-y"}, definitions={"g": "x(t + tau)"})


def test_delay_on_a_definition_is_refused():
    with pytest.raises(DelayError, match="only states can be delayed"):
        _model({"x": "g(t - tau)", "y": "-y"}, definitions={"g": "x**2"})


def test_declared_t_cannot_be_used_with_delays():
    with pytest.raises(DelayError, match="'t' is declared as a name of the model; rename"):
        _model({"x": "x(t - tau)", "y": "-y"}, parameters={**PARAMS, "t": 1.0})
    # Without delayed states a parameter called t keeps working.
    assert _model({"x": "t*x - y", "y": "x"}, parameters={**PARAMS, "t": 1.0}).delays == ()


def test_sympy_spelling_refusals():
    x, y, r, tau = sp.symbols("x y r tau")
    with pytest.raises(DelayError, match="only states can be delayed"):
        _model({"x": lyacomp.delayed(r, tau), "y": -y})
    with pytest.raises(DelayError, match="only constant delays"):
        _model({"x": lyacomp.delayed(x, x + tau), "y": -y})
    with pytest.raises(DelayError, match="is negative"):
        _model({"x": lyacomp.delayed(x, -tau), "y": -y})
    with pytest.raises(DelayError, match="unknown symbol"):
        _model({"x": lyacomp.delayed(x, sp.Symbol("nope")), "y": -y})


# --- statuses ----------------------------------------------------------------------------
WRIGHT = {"x": "-r * x(t - tau) * (1 + x)"}


def _wright(**extra) -> lyacomp.Evaluator:
    model = lyacomp.Model(
        name="wright",
        states={"x": 0.0},
        parameters={"r": 1.4, "tau": 1.0, "a": 2.0},
        equations={"x": "-r * x(t - (tau*a - 1)) * (1 + x)"},
        **extra,
    )
    return lyacomp.compile(model)


def test_nonpositive_delay_is_a_status_at_sample_values():
    ev = _wright(bifurcation="r")
    assert ev().status == "ok"
    assert ev(a=0.5).status == "nonpositive_delay"  # tau * a - 1 = -0.5
    batch = ev.batch({"a": [2.0, 0.25, 0.5]})
    assert list(batch.status_labels()) == ["ok", "nonpositive_delay", "nonpositive_delay"]


def test_not_critical_and_given_hopf_point_without_bifurcation_parameter():
    ev = _wright()
    # Wright's equation: the equilibrium 0 is at onset for r tau = pi/2 (Hassard,
    # Kazarinoff & Wan 1981); here the delay is tau*a - 1 = 1.
    assert ev(r=1.4).status == "not_critical"
    res = ev(r=math.pi / 2)
    assert res.status == "ok"
    assert math.isclose(res.omega, math.pi / 2, rel_tol=1e-12)
    assert res.unstable_count == 0


def test_closed_form_critical_value_with_delay():
    ev = _wright(bifurcation="r", critical_value="pi/(2*(tau*a - 1))")
    res = ev(tau=1.25)  # delay 1.5: r0 = pi/3, omega = pi/3 (omega = r0 for Wright)
    assert res.status == "ok"
    assert math.isclose(res.critical_value, math.pi / 3, rel_tol=1e-13)
    assert math.isclose(res.omega, math.pi / 3, rel_tol=1e-12)


def test_delay_status_is_listed_only_in_delay_kernels():
    ode = lyacomp.generate(_model({"x": "r*x - y - x**3", "y": "x"}))
    dde = lyacomp.generate(_model({"x": "-r*x(t - tau)", "y": "-y"}))
    assert "ST_NONPOSITIVE_DELAY" not in ode.embedded
    assert "ST_NONPOSITIVE_DELAY" in dde.embedded


# --- the generated C ---------------------------------------------------------------------
def _delay_variant(mode: str) -> lyacomp.Model:
    equations = {
        "x": "y(t - tau) - a*x**3 + x*y(t - 2*tau)**2",
        "y": "-x + r*y - y(t - tau)*x**2",
    }
    extra: dict = {}
    if mode == "newton":
        extra["bifurcation"] = "r"
    elif mode == "delay_parameter":
        extra["bifurcation"] = "tau"
    elif mode == "closed_forms":
        extra.update(bifurcation="r", critical_value="0", equilibrium={"x": "0", "y": "0"})
    elif mode == "equilibrium_form":  # the operating search then follows mu alone
        extra.update(bifurcation="r", equilibrium={"x": "0", "y": "0"}, operating=0.0)
    elif mode == "four_states":  # the large-model paths of the shared stages
        ring = {f"x{i}": f"-x{i} - r*tanh(x{(i + 3) % 4}(t - tau))" for i in range(4)}
        return _model(ring, states=dict.fromkeys(ring, 0.0), bifurcation="r", operating=0.2)
    return _model(equations, **extra)


@pytest.mark.skipif(shutil.which("cc") is None, reason="needs a C compiler on PATH")
@pytest.mark.parametrize(
    "mode",
    [
        "newton",
        "delay_parameter",
        "no_bifurcation",
        "closed_forms",
        "equilibrium_form",
        "four_states",
    ],
)
def test_every_delay_template_variant_compiles_without_warnings(mode, tmp_path):
    # Common practice, no source: generated code must be warning-free under -Wall -Wextra.
    sources = lyacomp.generate(_delay_variant(mode), header_name="variant.h")
    (tmp_path / "variant.c").write_text(sources.standalone)
    (tmp_path / "variant.h").write_text(sources.header)
    cmd = ["cc", "-std=c99", "-O1", "-Wall", "-Wextra", "-Werror", "-pedantic", "-fopenmp"]
    build = subprocess.run(
        [*cmd, "-c", "variant.c", "-o", "variant.o"], cwd=tmp_path, capture_output=True, text=True
    )
    assert build.returncode == 0, build.stderr


def test_user_text_never_reaches_the_delay_kernel():
    # Model files are data: the kernel holds x[..] and p[..]; names appear only in the
    # standalone header's index table, checked by the whitelist (as for ODE models).
    model = lyacomp.Model(
        name="names",
        states={"Speedx": 0.0, "Slipx": 0.0},
        parameters={"Gainx": 1.0, "Lagx": 0.5},
        equations={
            "Speedx": "Slipx(t - Lagx)",
            "Slipx": "-Speedx + Gainx*Slipx(t - 2*Lagx)**3",
        },
        bifurcation="Gainx",
    )
    text = lyacomp.generate(model).embedded
    for name in ("Speedx", "Slipx", "Gainx", "Lagx", "(t-tau"):
        assert name not in text
