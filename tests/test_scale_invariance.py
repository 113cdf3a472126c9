"""Statuses and values do not depend on the units of time, states or the parameter.

Invariance rules (Kuznetsov, Elements of Applied Bifurcation Theory, 3rd ed. 2004, Ch. 3;
common practice): time rescaling F -> k F keeps l1 and multiplies omega and d by k;
states x = s y give l1_y = s^2 l1_x with omega, d and mu0 unchanged.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest
import sympy as sp

import lyacomp

ROOT = Path(__file__).resolve().parent.parent

# Equilibria away from the origin so that the guesses carry the units.
BASE = {
    2: (
        {
            "x": "mu*(x - 1) - (y - 2) - (x - 1)*((x - 1)**2 + (y - 2)**2)",
            "y": "(x - 1) + mu*(y - 2) + 0.5*(x - 1)**2",
        },
        {"x": 1.01, "y": 1.98},
    ),
    3: (
        {
            "x": "mu*(x - 1) - 1.5*(y - 2) + 0.7*(x - 1)*(z - 3)",
            "y": "1.5*(x - 1) + mu*(y - 2) + 0.7*(y - 2)*(z - 3)",
            "z": "-2*(z - 3) - 1.3*((x - 1)**2 + (y - 2)**2)",
        },
        {"x": 1.01, "y": 1.98, "z": 3.01},
    ),
    4: (
        {
            "x": "mu*(x - 1) - 1.5*(y - 2) + 0.7*(x - 1)*(z - 3) + (u - 4)*(x - 1)",
            "y": "1.5*(x - 1) + mu*(y - 2) + 0.7*(y - 2)*(z - 3)",
            "z": "-2*(z - 3) - 1.3*((x - 1)**2 + (y - 2)**2) + 0.2*(u - 4)",
            "u": "-(u - 4) + (x - 1)*(y - 2)",
        },
        {"x": 1.01, "y": 1.98, "z": 3.01, "u": 4.0},
    ),
}


def _compile(equations, guesses, scales=None, k=1.0, mu_unit=1.0, mu_guess=0.05):
    """The model in new units: x = scales[x] * y, t -> t/k, mu = mu_unit * nu."""
    scales = scales or {}
    syms = {s: sp.Symbol(s) for s in equations}
    mu = sp.Symbol("mu")
    subs = {syms[s]: scales.get(s, 1.0) * syms[s] for s in equations}
    subs[mu] = mu_unit * mu
    eqs = {
        s: str(
            k
            * sp.sympify(e, locals={**syms, "mu": mu}).subs(subs, simultaneous=True)
            / scales.get(s, 1.0)
        )
        for s, e in equations.items()
    }
    model = lyacomp.Model(
        name="scaled",
        states={s: g / scales.get(s, 1.0) for s, g in guesses.items()},
        parameters={"mu": mu_guess / mu_unit},
        equations=eqs,
        bifurcation="mu",
    )
    return lyacomp.compile(model)


@pytest.mark.parametrize("n", [2, 3, 4])
def test_time_and_state_rescaling(n):
    equations, guesses = BASE[n]
    ref = _compile(equations, guesses)()
    assert ref.ok, ref.status
    for k in (1e4, 1e-4):
        r = _compile(equations, guesses, k=k)()
        assert r.status == ref.status and r.criticality == ref.criticality
        assert r.l1 == pytest.approx(ref.l1, rel=1e-8)
        assert r.omega == pytest.approx(k * ref.omega, rel=1e-10)
        assert r.transversality == pytest.approx(k * ref.transversality, rel=1e-8)
        assert r.critical_value == pytest.approx(ref.critical_value, abs=1e-10)
        assert r.unstable_count == ref.unstable_count and r.stable_side == ref.stable_side
    for s in (1e6, 1e-6):
        r = _compile(equations, guesses, scales=dict.fromkeys(equations, s))()
        assert r.status == ref.status and r.criticality == ref.criticality
        assert r.l1 == pytest.approx(s**2 * ref.l1, rel=1e-8)
        assert r.omega == pytest.approx(ref.omega, rel=1e-10)
        assert r.transversality == pytest.approx(ref.transversality, rel=1e-8)
        for name, value in ref.equilibrium.items():
            assert r.equilibrium[name] == pytest.approx(value / s, rel=1e-10)
        assert r.unstable_count == ref.unstable_count and r.stable_side == ref.stable_side


@pytest.mark.parametrize("n", [3, 4])
def test_mixed_state_units(n):
    # States of sizes 1e-6 ... 1e6 (and one near 1e-7): a diagonal change of states keeps
    # omega, d, mu0 and the sign of l1 (Kuznetsov 2004, Ch. 3: l1_y = l1_x / |T^-1 q|^2).
    equations, guesses = BASE[n]
    scales = dict(zip(equations, (1e-6, 1.0, 1e6, 1e-7)))
    ref = _compile(equations, guesses)()
    r = _compile(equations, guesses, scales=scales)()
    assert r.ok, r.status
    assert r.criticality == ref.criticality
    assert r.omega == pytest.approx(ref.omega, rel=1e-8)
    assert r.transversality == pytest.approx(ref.transversality, rel=1e-6)
    assert r.critical_value == pytest.approx(ref.critical_value, abs=1e-10)


def test_parameter_in_small_units():
    # mu = 1e-8 nu: d = Re lambda'(nu0) = 1e-8 d_mu, still an ordinary Hopf point.
    equations, guesses = BASE[2]
    ref = _compile(equations, guesses)()
    r = _compile(equations, guesses, mu_unit=1e-8)()
    assert r.ok, r.status
    assert r.transversality == pytest.approx(1e-8 * ref.transversality, rel=1e-8)
    assert r.l1 == pytest.approx(ref.l1, rel=1e-8)


def test_fast_oscillator():
    # x'' + K x = (mu - x^2) x' with K = 1e8: omega = sqrt(K) = 1e4 at mu0 = 0, and the
    # cycle is stable (supercritical): the Rayleigh/van der Pol type damping -x^2 x'
    # (common practice, no source). Its time rescaling t -> 1e4 t is the K = 1 case up to
    # the units of mu, so l1 has the K = 1 sign and d = 1/2 in both.
    slow = lyacomp.Model(
        name="slow",
        states={"x": 0.0, "y": 0.0},
        parameters={"mu": 0.01, "K": 1.0},
        equations={"x": "y", "y": "-K*x + (mu - x**2)*y"},
        bifurcation="mu",
    )
    ev = lyacomp.compile(slow)
    r1, r2 = ev(K=1.0), ev(K=1e8)
    assert r1.ok and r2.ok, (r1.status, r2.status)
    assert r2.omega == pytest.approx(1e4) and r2.criticality == "supercritical"
    assert r2.transversality == pytest.approx(0.5) and r1.transversality == pytest.approx(0.5)
    assert r2.unstable_count == 0 and r2.stable_side == "below"


def test_belt_friction_pad_with_a_stiff_spring():
    out = subprocess.run(
        [
            sys.executable,
            "-m",
            "lyacomp",
            "eval",
            str(ROOT / "examples/belt_friction_pad.toml"),
            "--set",
            "k=1.5e8",
            "--json",
        ],
        capture_output=True,
        text=True,
        check=False,
    )
    assert '"status": "ok"' in out.stdout, out.stdout + out.stderr


def test_planar_equilibrium_far_from_the_origin():
    # The BASE[2] model shifted to the equilibrium (130, 2): a shift of the states changes
    # nothing (common practice, no source).
    equations, guesses = BASE[2]
    shifted = {s: e.replace("(x - 1)", "(x - 130)") for s, e in equations.items()}
    ref = _compile(equations, guesses)()
    r = _compile(shifted, {"x": 130.2, "y": 1.98})()
    assert r.ok, r.status
    assert r.equilibrium["x"] == pytest.approx(130.0)
    assert r.l1 == pytest.approx(ref.l1, rel=1e-8)
    assert r.omega == pytest.approx(ref.omega, rel=1e-10)
