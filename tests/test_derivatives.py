"""Exact parameter derivatives (``derivatives=True``) against two outside references.

1. Central differences of the compiled l1, critical value and omega: they must agree to the
   difference formula's own error (truncation estimated from two step sizes, plus rounding).
   Source: common practice, no source (Richardson's estimate of the O(h^2) error).
2. An independent 40-digit reference: tests/reference/mp_hopf.py (sympy + mpmath, Kuznetsov
   2004, Ch. 3 projection formula, its own Hopf location), differentiated by central
   differences at 40 digits with h = 1e-12 (truncation ~1e-24, rounding ~1e-28), compared at
   1e-8 relative to the largest derivative of the same quantity.

Models: M2 (2 states) and M3 (3 states) of benchmarks/models, critical values by Newton
(no closed form); an invented 3-state model in which the bifurcation parameter enters
nonlinearly (mu**2, exp(mu/2)); the 6-state random family of test_reference_mpmath.py.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import mpmath
import numpy as np
import pytest

import lyacomp
from lyacomp.errors import EvaluationError
from tests.reference.mp_hopf import MpHopf
from tests.test_reference_mpmath import build_family, draw_parameters

ROOT = Path(__file__).resolve().parent.parent
QUANTITIES = ("l1", "critical_value", "omega")
RTOL = 1e-8

NONLINEAR_MU = lyacomp.Model(
    name="reed_heat",  # invented: a reed whose damping and coupling depend on mu nonlinearly
    states={"u": 0.3, "v": 0.0, "w": 0.3},
    parameters={"mu": 1.0, "g": 1.0, "c": 0.6, "k": 1.0, "f": 0.3, "r": 1.0, "s": 0.2},
    equations={
        "u": "v",
        "v": "f*mu - k*sin(u) - u**3/3 + (g*mu**2 - c - u**2)*v - 0.3*v**3 + s*w",
        "w": "-r*w + exp(mu/2)*u - u**2",
    },
    bifurcation="mu",
)


def _file_model(name: str) -> lyacomp.Model:
    return lyacomp.load_model(ROOT / "benchmarks" / "models" / name)


def _six_state():
    family = build_family(6, 37, 2)
    values = draw_parameters(family, np.random.default_rng(1037))
    model = family.model("random6d")
    model = lyacomp.Model(
        name=model.name,
        states=model.states,
        parameters=values,
        equations={str(s): f for s, f in zip(family.states, family.rhs, strict=True)},
        bifurcation=str(family.bifurcation),
    )
    # Derivatives w.r.t. a few coefficients of each kind (the reference costs two 40-digit
    # solves per parameter).
    return model, ["a01", "b10", "g2", "h3", "c4_1", "m0"]


CASES = {
    "m2": lambda: (_file_model("m2_towed_sensor.toml"), None),
    "m3": lambda: (_file_model("m3_servo_integral.toml"), None),
    "mu_nonlinear": lambda: (NONLINEAR_MU, None),
    "six_states": _six_state,
}


@pytest.fixture(scope="module", params=sorted(CASES))
def case(request):
    model, names = CASES[request.param]()
    ev = lyacomp.compile(model)
    result = ev(derivatives=True)
    assert result.ok, result.status
    return request.param, model, ev, result, names or list(ev.derivative_parameters)


def _reference_derivatives(model: lyacomp.Model, result, names: list[str]) -> dict:
    sym = model.symbolic()
    ref = MpHopf(sym.rhs, sym.states, sym.parameters, sym.bifurcation)
    guess = [result.equilibrium[s] for s in model.state_names]
    out: dict[str, dict[str, mpmath.mpf]] = {q: {} for q in QUANTITIES}
    with mpmath.workdps(40):
        h = mpmath.mpf("1e-12")
        for name in names:
            base = {k: mpmath.mpf(v) for k, v in model.nominal.items()}
            base[model.bifurcation] = mpmath.mpf(result.critical_value)
            step = h * max(1, abs(base[name]))
            plus = ref.solve({**base, name: base[name] + step}, guess, result.omega)
            minus = ref.solve({**base, name: base[name] - step}, guess, result.omega)
            for q in QUANTITIES:
                out[q][name] = (getattr(plus, q) - getattr(minus, q)) / (2 * step)
    return out


def test_derivatives_match_high_precision_reference(case):
    # Source: independent 40-digit mpmath reference (tests/reference/mp_hopf.py; Kuznetsov
    # 2004, Ch. 3 formulas), differentiated by 40-digit central differences.
    label, model, ev, result, names = case
    reference = _reference_derivatives(model, result, names)
    for q in QUANTITIES:
        scale = max(abs(float(v)) for v in reference[q].values())
        assert scale > 0.0, (label, q)
        for name in names:
            exact = result.derivatives[q][name]
            expected = float(reference[q][name])
            assert abs(exact - expected) <= RTOL * scale, (label, q, name, exact, expected)


def _central(ev, name: str, value: float, step: float) -> dict[str, float]:
    plus, minus = ev({name: value + step}), ev({name: value - step})
    assert plus.ok and minus.ok
    return {q: (getattr(plus, q) - getattr(minus, q)) / (2 * step) for q in QUANTITIES}


def test_derivatives_match_central_differences_of_compiled_code(case):
    # Source: common practice, no source: the O(h^2) error of a central difference is
    # estimated by comparing steps h and 2h (Richardson); rounding adds ~eps |Q| / h.
    label, model, ev, result, names = case
    for name in names:
        value = ev.nominal[name]
        h = 1e-4 * max(1.0, abs(value))
        fine, coarse = _central(ev, name, value, h), _central(ev, name, value, 2 * h)
        for q in QUANTITIES:
            truncation = abs(fine[q] - coarse[q]) / 3.0
            rounding = 1e-11 * max(1.0, abs(getattr(result, q))) / h
            error = abs(result.derivatives[q][name] - fine[q])
            assert error <= 2.0 * truncation + rounding, (label, q, name, error, truncation)


def test_equilibrium_derivatives_solve_the_linearized_equations(case):
    # Source: common practice, no source: differentiating F(x0(p), mu0(p), p) = 0 gives
    # A x0' + F_mu mu0' + F_p = 0; checked here by differences of F in the compiled rhs.
    label, model, ev, result, names = case
    lib, ffi = ev.lib, ev.ffi
    x0 = [result.equilibrium[s] for s in ev.states]
    params = dict(ev.nominal)
    params[ev.bifurcation] = result.critical_value
    n = len(x0)
    for name in names:
        k = ev.parameters.index(name)
        step = 1e-6 * max(1.0, abs(params[name]))
        f = []
        for sign in (1.0, -1.0):
            p = [params[q] for q in ev.parameters]
            p[k] += sign * step
            p[ev.parameters.index(ev.bifurcation)] += (
                sign * step * result.derivatives["critical_value"][name]
            )
            x = [
                x0[j] + sign * step * result.derivatives["equilibrium"][s][name]
                for j, s in enumerate(ev.states)
            ]
            out = ffi.new("double[]", n)
            lib.lyc_rhs(x, p, out)
            f.append(np.array(list(out)))
        # F vanishes to first order along the predicted motion: only O(step^2) is left.
        assert np.max(np.abs(f[0])) < 1e-9 and np.max(np.abs(f[1])) < 1e-9, (label, name, f)


def test_batch_derivatives_match_single_calls():
    # Source: common practice, no source (batch and scalar paths compute the same numbers).
    ev = lyacomp.compile(_file_model("m3_servo_integral.toml"))
    # A plain build has no derivative entry points (no cost); the first request builds them.
    assert not hasattr(ev.lib, "lyc_evaluate_derivatives")
    eager = lyacomp.compile(_file_model("m3_servo_integral.toml"), derivatives=True)
    assert hasattr(eager.lib, "lyc_evaluate_derivatives")
    drive = np.array([1.9, 2.0, 2.1, 1e6])
    batch = ev.batch(drive=drive, derivatives=True)
    names = ev.derivative_parameters
    assert names == ("drive", "kd", "c", "w", "r")
    assert batch.derivatives["l1"].shape == (4, len(names))
    assert batch.derivatives["equilibrium"].shape == (4, len(names), 3)
    for i, value in enumerate(drive):
        single = ev(drive=float(value), derivatives=True)
        if not single.ok:
            assert np.isnan(batch.derivatives["l1"][i]).all()
            continue
        for q in QUANTITIES:
            row = [single.derivatives[q][p] for p in names]
            assert np.allclose(batch.derivatives[q][i], row, rtol=1e-13, atol=1e-15), q
    plain = ev.batch(drive=drive)
    assert plain.derivatives is None
    # The derivative batch runs the plain batch (SIMD lanes for a 3-state model) and then
    # the derivative stage at its solved points: within one library its results are the
    # plain batch's, exactly; the plain library is compiled apart from the one with the
    # derivative stage, so the two agree to rounding.
    own = eager.batch(drive=drive)
    with_derivatives = eager.batch(drive=drive, derivatives=True)
    for key in ("status", "l1", "critical_value", "omega", "equilibrium", "amplitude"):
        np.testing.assert_array_equal(
            getattr(own, key), getattr(with_derivatives, key), err_msg=key
        )
    np.testing.assert_allclose(plain.l1, batch.l1, rtol=1e-14, atol=0)
    assert list(plain.status) == list(batch.status)


def test_derivatives_need_a_bifurcation_parameter():
    model = lyacomp.Model(
        name="no_mu",
        states={"x": 0.0, "y": 0.0},
        parameters={"a": -1.0},
        equations={"x": "-y + a*x**3", "y": "x"},
    )
    ev = lyacomp.compile(model)
    with pytest.raises(EvaluationError, match="bifurcation parameter"):
        ev(derivatives=True)
    with pytest.raises(EvaluationError, match="bifurcation parameter"):
        ev.batch(a=[1.0], derivatives=True)


def test_cli_json_derivatives_key_only_with_flag():
    model = str(ROOT / "benchmarks" / "models" / "m2_towed_sensor.toml")

    def run(*extra: str) -> dict:
        proc = subprocess.run(
            [sys.executable, "-m", "lyacomp", "eval", model, "--json", *extra],
            capture_output=True,
            text=True,
            check=True,
        )
        return json.loads(proc.stdout)

    plain, with_flag = run(), run("--derivatives")
    assert "derivatives" not in plain
    assert set(with_flag["derivatives"]) == set(QUANTITIES)
    for q in QUANTITIES:
        assert set(with_flag["derivatives"][q]) == {"bias", "stiff", "drag", "cubic"}
        assert all(math.isfinite(v) for v in with_flag["derivatives"][q].values())


@pytest.mark.parametrize("solved", [0, 2, 4])
def test_batch_derivative_arrays_leave_out_the_bifurcation_parameter(solved):
    # Common practice, no source: numpy's fancy indexing as the reference for which rows of
    # the parameter-major buffers reach the user (views when the kept rows are one run).
    from lyacomp.runtime.derivatives import SCALAR_QUANTITIES, batch_derivatives

    n_params, n, count = 5, 2, 7
    rng = np.random.default_rng(solved)
    arrays = {q: rng.normal(size=(n_params, count)) for q in SCALAR_QUANTITIES}
    arrays["equilibrium"] = rng.normal(size=(n_params, n, count))
    arrays["status"] = np.zeros(count, dtype=np.int32)
    arrays["status"][3] = 5
    expected = {q: arrays[q].copy() for q in (*SCALAR_QUANTITIES, "equilibrium")}
    keep = [k for k in range(n_params) if k != solved]
    out = batch_derivatives(arrays, keep, (count,))
    for q in SCALAR_QUANTITIES:
        want = expected[q][keep].T
        want[3] = np.nan
        np.testing.assert_array_equal(out[q], want, err_msg=q)
    want = np.moveaxis(expected["equilibrium"][keep], -1, 0)
    want[3] = np.nan
    np.testing.assert_array_equal(out["equilibrium"], want)
