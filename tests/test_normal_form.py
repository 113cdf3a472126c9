"""The Hopf normal form, where every quantity is known in closed form.

Model (Kuznetsov, Elements of Applied Bifurcation Theory, 3rd ed. 2004, Ch. 3, the normal
form of the Hopf bifurcation; Guckenheimer & Holmes 1983, Sec. 3.4; Strogatz, Nonlinear
Dynamics and Chaos, Sec. 8.2 (section number from memory)):

    x' = mu x - w y + s x (x^2 + y^2),    y' = w x + mu y + s y (x^2 + y^2).

In polar coordinates r' = mu r + s r^3, theta' = w: a cycle of radius sqrt(-mu/s) exists
where mu/s < 0 and its period is 2 pi / w exactly.

Exact l1 under the normalization of docs/mathematics.md: A = [[0, -w], [w, 0]] gives
q = (1, -i)/sqrt(2) (so <q, q> = 1) and p = q (then <p, q> = 1). Writing the state as
x = w_c q + conj(w_c q) gives x + i y = sqrt(2) w_c, and the equation for z = x + i y,
z' = (mu + i w) z + s z |z|^2, becomes w_c' = (mu + i w) w_c + 2 s w_c |w_c|^2. The
cubic coefficient is c1 = 2 s, so l1 = Re(c1)/w = 2 s / w. (The same value follows from
the planar formula of docs/mathematics.md: f_xxx + f_xyy + g_xxy + g_yyy = 16 s gives a = s and
l1 = 2 a / w.) With d = 1 (Re lambda = mu): |w_c|^2 = -mu/(w l1) = -mu/(2 s), and the x
amplitude 2 |q_1| |w_c| = sqrt(-mu/s) equals the exact radius, so K_x = K_y = 1.
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest
import sympy as sp

import lyacomp
from tests.reference.mp_hopf import MpHopf

EQUATIONS = {"x": "mu*x - w*y + s*x*(x**2 + y**2)", "y": "w*x + mu*y + s*y*(x**2 + y**2)"}
OMEGAS = (0.5, 1.0, 2.5)
TOL = 1e-12


def _model(bifurcation: str | None) -> lyacomp.Model:
    return lyacomp.Model(
        name="hopf_normal_form" if bifurcation else "hopf_normal_form_given",
        states={"x": 0.02, "y": -0.01},
        parameters={"mu": 0.0, "s": -1.0, "w": 1.0},
        equations=EQUATIONS,
        bifurcation=bifurcation,
    )


@pytest.fixture(scope="module")
def normal_form():
    return lyacomp.compile(_model("mu"))


@pytest.fixture(scope="module")
def given_point():
    return lyacomp.compile(_model(None))


@pytest.mark.parametrize("s", (1.0, -1.0))
@pytest.mark.parametrize("w", OMEGAS)
def test_exact_values(normal_form, s, w):
    # Exact values derived in the module docstring (Kuznetsov 2004, Ch. 3 normal form).
    r = normal_form(mu=0.07, s=s, w=w)  # mu is only the Newton starting guess
    assert r.ok, r.status
    assert r.l1 == pytest.approx(2 * s / w, rel=TOL)
    assert r.omega == pytest.approx(w, rel=TOL)
    assert r.period == pytest.approx(2 * math.pi / w, rel=TOL)
    assert abs(r.critical_value) <= TOL
    assert r.transversality == pytest.approx(1.0, rel=TOL)
    assert abs(r.equilibrium["x"]) <= TOL and abs(r.equilibrium["y"]) <= TOL
    assert r.amplitude["x"] == pytest.approx(1.0, rel=TOL)
    assert r.amplitude["y"] == pytest.approx(1.0, rel=TOL)
    # s < 0: the cycle exists for mu > 0 and is stable (supercritical); s > 0: for mu < 0,
    # unstable (subcritical). Kuznetsov 2004, Ch. 3 (normal form analysis).
    assert r.criticality == ("supercritical" if s < 0 else "subcritical")
    assert r.cycle_side == ("above" if s < 0 else "below")


@pytest.mark.parametrize("s", (1.0, -1.0))
def test_amplitude_gives_the_exact_cycle_radius(normal_form, s):
    # r' = mu r + s r^3 has the cycle r = sqrt(-mu/s) (Guckenheimer & Holmes 1983, Sec. 3.4);
    # for the normal form the near-onset amplitude K sqrt|mu - mu0| is exact at any mu.
    r = normal_form(mu=0.0, s=s, w=1.3)
    mu = 0.04 if r.cycle_side == "above" else -0.04
    radius = math.sqrt(-mu / s)
    assert r.amplitude["x"] * math.sqrt(abs(mu - r.critical_value)) == pytest.approx(
        radius, rel=TOL
    )


def test_batch_over_signs_and_frequencies(normal_form):
    # l1 = 2 s / w (derivation in the module docstring; Kuznetsov 2004, Ch. 3).
    s = np.array([1.0, -1.0] * len(OMEGAS))
    w = np.repeat(OMEGAS, 2)
    b = normal_form.batch({"s": s, "w": w, "mu": np.linspace(-0.1, 0.1, len(s))})
    assert b.ok.all(), b.status_counts()
    np.testing.assert_allclose(b.l1, 2 * s / w, rtol=TOL)
    np.testing.assert_allclose(b.omega, w, rtol=TOL)
    np.testing.assert_allclose(b.period, 2 * np.pi / w, rtol=TOL)
    np.testing.assert_allclose(b.transversality, 1.0, rtol=TOL)
    np.testing.assert_allclose(b.critical_value, 0.0, atol=TOL)
    np.testing.assert_allclose(b.amplitude, 1.0, rtol=TOL)
    assert list(b.criticality) == [
        int(lyacomp.Criticality.SUBCRITICAL if si > 0 else lyacomp.Criticality.SUPERCRITICAL)
        for si in s
    ]
    assert list(b.cycle_side) == [-1 if si > 0 else 1 for si in s]


def test_agrees_with_mpmath_reference(normal_form):
    # Cross-check of the same exact value through the independent 40-digit reference.
    x, y, mu, s, w = sp.symbols("x y mu s w")
    rhs = [sp.sympify(EQUATIONS["x"]), sp.sympify(EQUATIONS["y"])]
    ref = MpHopf(rhs, (x, y), (mu, s, w), mu).solve(
        {"mu": 0.05, "s": -1.0, "w": 0.8}, [0.02, -0.01]
    )
    with mpmath.workdps(40):
        assert abs(ref.l1 - 2 * -1 / mpmath.mpf(0.8)) < 1e-25
    r = normal_form(mu=0.05, s=-1.0, w=0.8)
    assert r.l1 == pytest.approx(float(ref.l1), rel=TOL)


@pytest.mark.parametrize("s", (1.0, -1.0))
def test_point_taken_as_given(given_point, s):
    # Without a bifurcation parameter the given point is analysed as it is: at mu = 0 it is
    # the Hopf point with l1 = 2 s / w (module docstring; Kuznetsov 2004, Ch. 3).
    ev = given_point
    r = ev(mu=0.0, s=s, w=2.0)
    assert r.ok, r.status
    assert r.l1 == pytest.approx(2 * s / 2.0, rel=TOL)
    assert r.omega == pytest.approx(2.0, rel=TOL)
    assert r.period == pytest.approx(math.pi, rel=TOL)
    assert r.criticality == ("supercritical" if s < 0 else "subcritical")
    # Off the Hopf point (Re lambda = mu = 0.1) there is nothing to classify.
    off = ev(mu=0.1, s=s, w=2.0)
    assert not off.ok
    assert off.status == lyacomp.Status.NOT_CRITICAL.label
