"""The size and sign of l1 measured by simulation at mu = mu0 (a 3-state model whose
quadratic terms and centre-manifold coupling all enter l1)."""

from __future__ import annotations

import numpy as np
import pytest

import lyacomp

integrate = pytest.importorskip("scipy.integrate")

EQUATIONS = {
    "x": "mu*x - 2*y + x*z + 0.3*x**2 - 0.2*x*y",
    "y": "2*x + mu*y + 0.8*y*z + 0.1*y**2 + 0.3*x**2",
    "z": "-z + b*(x**2 + 0.5*y**2 + 0.2*x*y)",
}


def _rhs(mu: float, b: float):
    def f(t, s):
        x, y, z = s
        return [
            mu * x - 2 * y + x * z + 0.3 * x**2 - 0.2 * x * y,
            2 * x + mu * y + 0.8 * y * z + 0.1 * y**2 + 0.3 * x**2,
            -z + b * (x**2 + 0.5 * y**2 + 0.2 * x * y),
        ]

    return f


@pytest.mark.parametrize("b, criticality", [(1.0, "subcritical"), (-1.0, "supercritical")])
def test_inverse_square_amplitude_falls_with_slope_two_omega_l1(b, criticality):
    """At mu = mu0 the flow on the centre manifold is, in the coordinate z of
    x = x0 + 2 Re(z q) + O(|z|^2) (q, p normalized as <q, q> = 1, <p, q> = 1), the
    normal form z' = i omega z + c1 z |z|^2 + O(|z|^4) with l1 = Re(c1) / omega
    (docs/mathematics.md; Kuznetsov, Elements of Applied Bifurcation Theory, 3rd ed.
    2004, ch. 3). Then d|z|^2/dt = 2 Re(c1) |z|^4 = 2 omega l1 |z|^4, so
    d(1/|z|^2)/dt = -2 omega l1 exactly for the truncated form: 1/|z|^2 falls linearly
    (grows, for l1 < 0). Along a simulated orbit z is <p, x - x0> up to O(|z|^2),
    which adds an oscillation of relative size O(|z|) that a straight-line fit over
    many periods averages out, and O(|z|^2) (here ~4e-4) to the slope. The reference is
    scipy's DOP853 (rtol 1e-11) with p, q from numpy.linalg.eig; the transient off the
    centre manifold (eigenvalue -1) is left out of the fit. Measured: ratio of slopes
    0.9988 (b = 1) and 1.0007 (b = -1).
    """
    ev = lyacomp.compile(
        lyacomp.Model(
            name="simulated onset",
            states={"x": 0.0, "y": 0.0, "z": 0.0},
            parameters={"mu": 0.05, "b": 1.0},
            equations=EQUATIONS,
            bifurcation="mu",
        )
    )
    r = ev(b=b)
    assert r.ok and r.criticality == criticality
    a = np.array([[0.0, -2.0, 0.0], [2.0, 0.0, 0.0], [0.0, 0.0, -1.0]])  # Jacobian at 0
    lam, right = np.linalg.eig(a)
    q = right[:, np.argmin(np.abs(lam - 2j))]
    q = q / np.linalg.norm(q)
    lam_t, left = np.linalg.eig(a.T)
    p = left[:, np.argmin(np.abs(lam_t + 2j))]
    p = p / np.conj(np.vdot(p, q))
    start = 2 * np.real(0.02 * q)
    sol = integrate.solve_ivp(
        _rhs(r.critical_value, b),
        (0.0, 400.0),
        start,
        method="DOP853",
        rtol=1e-11,
        atol=1e-14,
        dense_output=True,
    )
    assert sol.success
    t = np.linspace(30.0, 400.0, 20_000)
    w = np.conj(p) @ sol.sol(t)
    slope = np.polyfit(t, 1.0 / np.abs(w) ** 2, 1)[0]
    assert slope == pytest.approx(-2.0 * r.omega * r.l1, rel=1e-2)
    assert np.sign(slope) == -np.sign(r.l1)
