"""Compiled l1 against the planar formula of Guckenheimer & Holmes on random planar fields.

Source: Guckenheimer & Holmes, Nonlinear Oscillations, Dynamical Systems, and Bifurcations
of Vector Fields, Springer 1983, eq. 3.4.11 (equation number from memory), as written in
docs/mathematics.md. For x' = -w y + f(x, y), y' = w x + g(x, y) (f, g of order >= 2):

    16 a = f_xxx + f_xyy + g_xxy + g_yyy
           + (1/w) [f_xy (f_xx + f_yy) - g_xy (g_xx + g_yy) - f_xx g_xx + f_yy g_yy]

and l1 = 2 a / w under docs/mathematics.md's normalization (the 2 comes from <q, q> = 1; see
tests/test_normal_form.py for the derivation on the normal form).

Orientation (docs/mathematics.md): the formula assumes the linear part [[0, -w], [w, 0]]. For the
clockwise linear part [[0, w], [-w, 0]] it holds with w replaced by -w inside the bracket,
while l1 = 2 a / |w| (a is the radial coefficient of r' = a r^3, whose sign does not depend
on the sense of rotation).

Each orientation is one compiled model whose quadratic and cubic coefficients are parameters;
mu enters as mu * (x, y), so the Hopf point is mu = 0 at the origin.
"""

from __future__ import annotations

import numpy as np
import pytest
import sympy as sp

import lyacomp

# Coefficient suffix ij -> monomial x^i y^j (quadratic and cubic terms).
MONOMIALS = {k: (int(k[0]), int(k[1])) for k in ("20", "11", "02", "30", "21", "12", "03")}
DRAWS = 24
RTOL = 1e-10


def _model(orientation: int) -> lyacomp.Model:
    x, y, mu, w = sp.symbols("x y mu w")
    f = sum(sp.Symbol(f"f{k}") * x**i * y**j for k, (i, j) in MONOMIALS.items())
    g = sum(sp.Symbol(f"g{k}") * x**i * y**j for k, (i, j) in MONOMIALS.items())
    params = {"mu": 0.0, "w": 1.0}
    params.update({f"{c}{k}": 0.0 for c in "fg" for k in MONOMIALS})
    return lyacomp.Model(
        name=f"planar_{'ccw' if orientation > 0 else 'cw'}",
        states={"x": 0.01, "y": -0.02},
        parameters=params,
        equations={
            "x": mu * x - orientation * w * y + f,
            "y": orientation * w * x + mu * y + g,
        },
        bifurcation="mu",
    )


def planar_a(c: dict[str, np.ndarray], w_signed: np.ndarray) -> np.ndarray:
    """The Guckenheimer-Holmes cubic coefficient a from the monomial coefficients."""
    # Partial derivatives at the origin of f = sum f_ij x^i y^j: d^(i+j) f = i! j! f_ij.
    f_xx, f_xy, f_yy = 2 * c["f20"], c["f11"], 2 * c["f02"]
    g_xx, g_xy, g_yy = 2 * c["g20"], c["g11"], 2 * c["g02"]
    f_xxx, f_xyy = 6 * c["f30"], 2 * c["f12"]
    g_xxy, g_yyy = 2 * c["g21"], 6 * c["g03"]
    bracket = f_xy * (f_xx + f_yy) - g_xy * (g_xx + g_yy) - f_xx * g_xx + f_yy * g_yy
    return (f_xxx + f_xyy + g_xxy + g_yyy + bracket / w_signed) / 16


@pytest.mark.parametrize("orientation", (1, -1), ids=("counterclockwise", "clockwise"))
def test_l1_equals_planar_formula(orientation):
    # Guckenheimer & Holmes 1983, eq. 3.4.11 (number from memory), orientation per
    # docs/mathematics.md.
    rng = np.random.default_rng(20 + orientation)
    coeffs = {f"{c}{k}": rng.uniform(-2.0, 2.0, DRAWS) for c in "fg" for k in MONOMIALS}
    w = rng.uniform(0.3, 3.0, DRAWS)
    a = planar_a(coeffs, orientation * w)
    expected = 2 * a / w
    # A draw whose terms nearly cancel would test rounding rather than the formula.
    assert np.all(np.abs(a) > 1e-3)
    ev = lyacomp.compile(_model(orientation))
    b = ev.batch({**coeffs, "w": w, "mu": rng.uniform(-0.2, 0.2, DRAWS)})
    assert b.ok.all(), b.status_counts()
    np.testing.assert_allclose(b.l1, expected, rtol=RTOL)
    np.testing.assert_allclose(b.omega, w, rtol=RTOL)
    np.testing.assert_allclose(b.critical_value, 0.0, atol=1e-12)
    # d = Re lambda'(0) = 1 for the linear part mu*I + rotation (common practice, no source).
    np.testing.assert_allclose(b.transversality, 1.0, rtol=RTOL)
    assert np.array_equal(b.criticality == int(lyacomp.Criticality.SUPERCRITICAL), expected < 0)
    assert np.array_equal(b.criticality == int(lyacomp.Criticality.SUBCRITICAL), expected > 0)


def test_orientation_matters_for_the_quadratic_group():
    # docs/mathematics.md: with the clockwise linear part the quadratic bracket changes
    # sign. A field with only quadratic terms tells the two orientations apart, so a
    # compiler that ignored the sense of rotation would fail one of the two checks below.
    coeffs = {f"{c}{k}": 0.0 for c in "fg" for k in MONOMIALS}
    coeffs.update(f20=1.0, f11=0.5, g11=-0.7, g02=0.9)
    single = {k: np.array([v]) for k, v in coeffs.items()}
    for orientation in (1, -1):
        expected = 2 * planar_a(single, np.array([orientation * 1.5])) / 1.5
        r = lyacomp.compile(_model(orientation))(**coeffs, w=1.5, mu=0.1)
        assert r.ok, r.status
        assert r.l1 == pytest.approx(expected[0], rel=RTOL)
    ccw = planar_a(single, np.array([1.5]))[0]
    cw = planar_a(single, np.array([-1.5]))[0]
    assert ccw == pytest.approx(-cw) and abs(ccw) > 0.01
