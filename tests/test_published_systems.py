"""Classical systems whose Hopf points are published: Lorenz, Brusselator, van der Pol.

Each check names its source. Values without a published closed form are compared with the
independent 40-digit reference in tests/reference/mp_hopf.py.
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest
import sympy as sp

import lyacomp
from tests.reference.mp_hopf import MpHopf

RTOL = 1e-9

# --- Lorenz --------------------------------------------------------------------------------
# Lorenz, "Deterministic nonperiodic flow", J. Atmos. Sci. 20 (1963) 130-141:
#   x' = sigma (y - x),  y' = r x - y - x z,  z' = x y - b z.
# The nonzero equilibria C+- = (+-sqrt(b (r - 1)), +-sqrt(b (r - 1)), r - 1) lose stability at
# r_H = sigma (sigma + b + 3) / (sigma - b - 1) (Lorenz 1963; Strogatz, Nonlinear Dynamics and
# Chaos, Sec. 9.2), about 24.74 for sigma = 10, b = 8/3, and the Hopf bifurcation there is
# subcritical (Strogatz, Sec. 9.2, from memory; first shown by Marsden & McCracken, The Hopf
# Bifurcation and Its Applications, Springer 1976, from memory).

SIGMA, B_LORENZ = 10.0, 8.0 / 3.0
R_HOPF = SIGMA * (SIGMA + B_LORENZ + 3) / (SIGMA - B_LORENZ - 1)
LORENZ = {"x": "sigma*(y - x)", "y": "r*x - y - x*z", "z": "x*y - b*z"}


def _lorenz(sign: int) -> lyacomp.Model:
    return lyacomp.Model(
        name=f"lorenz_{'plus' if sign > 0 else 'minus'}",
        states={"x": 8.3 * sign, "y": 7.6 * sign, "z": 23.0},
        parameters={"sigma": SIGMA, "b": B_LORENZ, "r": 24.0},
        equations=LORENZ,
        bifurcation="r",
    )


def _lorenz_transversality(sigma: float, b: float, r: float) -> float:
    """Re d(lambda)/dr from the characteristic polynomial at C+- (common practice, no source).

    p(lambda, r) = lambda^3 + (sigma + b + 1) lambda^2 + b (sigma + r) lambda + 2 b sigma (r - 1)
    (Strogatz, Sec. 9.2, from memory); implicit differentiation gives -p_r / p_lambda.
    """
    omega = math.sqrt(b * (sigma + r))
    lam = 1j * omega
    p_r = b * lam + 2 * b * sigma
    p_lam = 3 * lam**2 + 2 * (sigma + b + 1) * lam + b * (sigma + r)
    return (-p_r / p_lam).real


@pytest.fixture(scope="module")
def lorenz_reference():
    x, y, z, sigma, b, r = sp.symbols("x y z sigma b r")
    rhs = [sp.sympify(LORENZ[k]) for k in ("x", "y", "z")]
    return MpHopf(rhs, (x, y, z), (sigma, b, r), r)


@pytest.mark.parametrize("sign", (1, -1), ids=("C+", "C-"))
def test_lorenz_hopf_point(sign, lorenz_reference):
    ev = lyacomp.compile(_lorenz(sign))
    res = ev(r=24.0)
    assert res.ok, res.status
    # Lorenz 1963: r_H = sigma (sigma + b + 3) / (sigma - b - 1) = 470/19 for sigma=10, b=8/3.
    assert res.critical_value == pytest.approx(R_HOPF, rel=RTOL)
    assert R_HOPF == pytest.approx(470 / 19, rel=1e-15)
    # At r_H the characteristic polynomial has lambda = +-i omega with omega^2 = b (sigma + r)
    # (Routh-Hurwitz; common practice, no source).
    assert res.omega == pytest.approx(math.sqrt(B_LORENZ * (SIGMA + R_HOPF)), rel=RTOL)
    c = math.sqrt(B_LORENZ * (R_HOPF - 1))
    assert res.equilibrium["x"] == pytest.approx(sign * c, rel=RTOL)
    assert res.equilibrium["y"] == pytest.approx(sign * c, rel=RTOL)
    assert res.equilibrium["z"] == pytest.approx(R_HOPF - 1, rel=RTOL)
    assert res.transversality == pytest.approx(
        _lorenz_transversality(SIGMA, B_LORENZ, R_HOPF), rel=RTOL
    )
    # Subcritical (Strogatz Sec. 9.2 from memory; Marsden & McCracken 1976 from memory).
    assert res.l1 > 0
    assert res.criticality == "subcritical"
    # The unstable cycle coexists with the stable equilibria below r_H (Strogatz Sec. 9.2).
    assert res.transversality > 0 and res.cycle_side == "below"
    ref = lorenz_reference.solve(
        {"sigma": SIGMA, "b": B_LORENZ, "r": 24.0}, [8.3 * sign, 7.6 * sign, 23.0]
    )
    assert res.l1 == pytest.approx(float(ref.l1), rel=RTOL)
    assert res.transversality == pytest.approx(float(ref.transversality), rel=RTOL)
    for name, expected in zip("xyz", ref.amplitude, strict=True):
        assert res.amplitude[name] == pytest.approx(float(expected), rel=RTOL)


def test_lorenz_symmetry_and_other_parameters(lorenz_reference):
    # (x, y, z) -> (-x, -y, z) maps the Lorenz system to itself (Lorenz 1963), so both
    # equilibria have the same l1. Away from sigma = 10 compare with the mpmath reference and
    # with the closed-form critical value.
    plus, minus = lyacomp.compile(_lorenz(1)), lyacomp.compile(_lorenz(-1))
    sigmas = np.array([6.0, 10.0, 16.0, 25.0])
    bs = np.array([1.0, 8.0 / 3.0, 2.0, 3.5])
    guess = sigmas * (sigmas + bs + 3) / (sigmas - bs - 1) * 1.02
    bp = plus.batch({"sigma": sigmas, "b": bs, "r": guess})
    bm = minus.batch({"sigma": sigmas, "b": bs, "r": guess})
    assert bp.ok.all() and bm.ok.all(), (bp.status_counts(), bm.status_counts())
    np.testing.assert_allclose(bp.l1, bm.l1, rtol=RTOL)
    np.testing.assert_allclose(
        bp.critical_value, sigmas * (sigmas + bs + 3) / (sigmas - bs - 1), rtol=RTOL
    )
    for i, (sigma, b) in enumerate(zip(sigmas, bs, strict=True)):
        r_h = sigma * (sigma + b + 3) / (sigma - b - 1)
        c = math.sqrt(b * (r_h - 1))
        ref = lorenz_reference.solve({"sigma": sigma, "b": b, "r": guess[i]}, [c, c, r_h - 1])
        assert bp.l1[i] == pytest.approx(float(ref.l1), rel=RTOL), (sigma, b)


# --- Brusselator -----------------------------------------------------------------------------
# Prigogine & Lefever, J. Chem. Phys. 48 (1968) 1695 (from memory); Strogatz, Nonlinear
# Dynamics and Chaos, Exercise 8.3.1 (exercise number from memory):
#   x' = A - (B + 1) x + x^2 y,  y' = B x - x^2 y,  equilibrium (A, B/A),
# Jacobian [[B - 1, A^2], [-B, -A^2]] with trace B - 1 - A^2 and determinant A^2, so the Hopf
# point is B = 1 + A^2 with omega = A and Re lambda = (B - 1 - A^2)/2, i.e. d = 1/2.
# Closed form of l1 under the normalization of docs/mathematics.md, derived for this test
# (not published):
# with T = [[1, A], [0, -(1 + A^2)/A]] the change x = x0 + T u brings the linear part to
# [[0, -A], [A, 0]]; the planar formula of Guckenheimer & Holmes 1983 (eq. 3.4.11, number
# from memory) on the transformed field gives a = -(A^2 + 1)(A^2 + 2)/(8 A^2), so
# l1_u = 2 a / A for q_u = (1, -i)/sqrt(2). In x, q = T q_u / |T q_u| with
# |T q_u|^2 = (A^2 + 1)(2 A^2 + 1)/(2 A^2), and l1 scales with 1/|T q_u|^2:
#   l1 = -(A^2 + 2) / (2 A (2 A^2 + 1)).
# Then |q_1|^2 = A^2/(2 A^2 + 1), |q_2|^2 = (A^2 + 1)/(2 A^2 + 1), and
#   K_x = 2 A / sqrt(A^2 + 2),  K_y = 2 sqrt((A^2 + 1)/(A^2 + 2)).
# It is supercritical for every A > 0 (Strogatz, Exercise 8.3.1, from memory).

BRUSSELATOR = {"x": "A - (B + 1)*x + x**2*y", "y": "B*x - x**2*y"}


def test_brusselator_closed_form():
    model = lyacomp.Model(
        name="brusselator",
        states={"x": 1.1, "y": 1.8},
        parameters={"A": 1.0, "B": 2.0},
        equations=BRUSSELATOR,
        bifurcation="B",
    )
    ev = lyacomp.compile(model)
    a = np.array([0.5, 0.8, 1.0, 1.05])
    b = ev.batch({"A": a, "B": 1 + a**2 + 0.15})
    assert b.ok.all(), b.status_counts()
    np.testing.assert_allclose(b.critical_value, 1 + a**2, rtol=RTOL)
    np.testing.assert_allclose(b.omega, a, rtol=RTOL)
    np.testing.assert_allclose(b.transversality, 0.5, rtol=RTOL)
    np.testing.assert_allclose(b.equilibrium[:, 0], a, rtol=RTOL)
    np.testing.assert_allclose(b.equilibrium[:, 1], (1 + a**2) / a, rtol=RTOL)
    np.testing.assert_allclose(b.l1, -(a**2 + 2) / (2 * a * (2 * a**2 + 1)), rtol=RTOL)
    np.testing.assert_allclose(b.amplitude[:, 0], 2 * a / np.sqrt(a**2 + 2), rtol=RTOL)
    np.testing.assert_allclose(b.amplitude[:, 1], 2 * np.sqrt((a**2 + 1) / (a**2 + 2)), rtol=RTOL)
    assert (b.criticality == int(lyacomp.Criticality.SUPERCRITICAL)).all()
    # Stable cycle for B > 1 + A^2 (Strogatz, Exercise 8.3.1, from memory).
    assert (b.cycle_side == 1).all()
    # The same numbers from the independent mpmath reference.
    xs, ys, asym, bsym = sp.symbols("x y A B")
    rhs = [sp.sympify(BRUSSELATOR["x"]), sp.sympify(BRUSSELATOR["y"])]
    ref = MpHopf(rhs, (xs, ys), (asym, bsym), bsym).solve({"A": 0.8, "B": 1.8}, [1.1, 1.8])
    assert b.l1[1] == pytest.approx(float(ref.l1), rel=RTOL)
    assert float(ref.l1) == pytest.approx(-(0.64 + 2) / (1.6 * (2 * 0.64 + 1)), rel=1e-14)


# --- van der Pol -----------------------------------------------------------------------------
# van der Pol's equation x'' - (mu - eps x^2) x' + x = 0, written as
#   x' = y,  y' = -x + mu y - eps x^2 y.
# With x = sqrt(mu/eps) X it is X'' - mu (1 - X^2) X' + X = 0, whose cycle has amplitude 2
# for small mu (Strogatz, Nonlinear Dynamics and Chaos, Example 7.6.2, averaging; example
# number from memory). So a stable cycle of amplitude 2 sqrt(mu/eps) is born at mu = 0:
# supercritical, d = 1/2 (trace mu), omega = 1, K_x = 2/sqrt(eps). In y = x' the amplitude is
# the same at omega = 1, K_y = 2/sqrt(eps). Planar formula (Guckenheimer & Holmes 1983,
# eq. 3.4.11, from memory; the linear part is clockwise, which only flips the quadratic group,
# here zero): g_xxy = -2 eps gives a = -eps/8 and l1 = 2 a / omega = -eps/4.

VAN_DER_POL = {"x": "y", "y": "-x + mu*y - eps*x**2*y"}


def test_van_der_pol():
    model = lyacomp.Model(
        name="van_der_pol",
        states={"x": 0.01, "y": 0.0},
        parameters={"mu": 0.1, "eps": 1.0},
        equations=VAN_DER_POL,
        bifurcation="mu",
    )
    ev = lyacomp.compile(model)
    eps = np.array([0.25, 1.0, 3.0])
    b = ev.batch({"eps": eps, "mu": np.array([0.1, -0.2, 0.05])})
    assert b.ok.all(), b.status_counts()
    np.testing.assert_allclose(b.critical_value, 0.0, atol=1e-12)
    np.testing.assert_allclose(b.omega, 1.0, rtol=RTOL)
    np.testing.assert_allclose(b.transversality, 0.5, rtol=RTOL)
    np.testing.assert_allclose(b.l1, -eps / 4, rtol=RTOL)
    np.testing.assert_allclose(b.amplitude[:, 0], 2 / np.sqrt(eps), rtol=RTOL)
    np.testing.assert_allclose(b.amplitude[:, 1], 2 / np.sqrt(eps), rtol=RTOL)
    assert (b.criticality == int(lyacomp.Criticality.SUPERCRITICAL)).all()
    assert (b.cycle_side == 1).all()
    x, y, mu, e = sp.symbols("x y mu eps")
    rhs = [sp.sympify(VAN_DER_POL["x"]), sp.sympify(VAN_DER_POL["y"])]
    ref = MpHopf(rhs, (x, y), (mu, e), mu).solve({"mu": 0.1, "eps": 3.0}, [0.01, 0.0])
    with mpmath.workdps(40):
        assert abs(ref.l1 + mpmath.mpf(3) / 4) < 1e-25
    assert b.l1[2] == pytest.approx(float(ref.l1), rel=RTOL)
