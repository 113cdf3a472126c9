"""A robustness study whose answer runs through the Newton search and has a closed form:
the Brusselator with an uncertain A."""

from __future__ import annotations

import math

import numpy as np
import pytest
import sympy as sp

import lyacomp
from lyacomp.studies.robustness import run_robustness


def _brusselator_l1():
    """l1 of x' = A - (B + 1) x + x^2 y, y' = B x - x^2 y at its Hopf point, by sympy.

    The equilibrium is (A, B/A); the Jacobian there has trace B - 1 - A^2 and
    determinant A^2, so the Hopf point is B = 1 + A^2 with omega = A (Prigogine &
    Lefever 1968). With q = u + i v = (A^2, i A - A^2) (A q = i omega q) the states
    x = x0 + T (alpha, beta), T = [u, -v], bring the linear part to [[0, -omega],
    [omega, 0]]; the planar formula for 16 a (Guckenheimer & Holmes 1983, eq. 3.4.11,
    from memory) gives l1_y = 2 a / omega in (alpha, beta), and the rule for a linear
    change of states (l1_y = l1_x / |T^-1 q_x|^2 with |q_x| = 1, docs/mathematics.md)
    gives l1_x = l1_y * 2 / |q|^2, since T^-1 q = (1, -i). Result:
    l1 = -(A^2 + 2) / (2 A (2 A^2 + 1)), negative and increasing for A > 0.
    """
    a_sym = sp.symbols("A", positive=True)
    al, be = sp.symbols("alpha beta", real=True)
    b_sym = 1 + a_sym**2
    w = a_sym
    q = sp.Matrix([a_sym**2, sp.I * w - a_sym**2])
    t = sp.Matrix.hstack(q.applyfunc(sp.re), -q.applyfunc(sp.im))
    x = sp.Matrix([a_sym, b_sym / a_sym]) + t * sp.Matrix([al, be])
    rhs = sp.Matrix(
        [a_sym - (b_sym + 1) * x[0] + x[0] ** 2 * x[1], b_sym * x[0] - x[0] ** 2 * x[1]]
    )
    f, g = (sp.expand(e) for e in t.inv() * rhs - sp.Matrix([-w * be, w * al]))

    def d(e, *vs):
        return sp.diff(e, *vs).subs({al: 0, be: 0})

    a16 = (
        d(f, al, al, al)
        + d(f, al, be, be)
        + d(g, al, al, be)
        + d(g, be, be, be)
        + (
            d(f, al, be) * (d(f, al, al) + d(f, be, be))
            - d(g, al, be) * (d(g, al, al) + d(g, be, be))
            - d(f, al, al) * d(g, al, al)
            + d(f, be, be) * d(g, be, be)
        )
        / w
    )
    l1 = sp.simplify((2 * a16 / 16 / w) * 2 / (q.H * q)[0])
    assert sp.simplify(l1 + (a_sym**2 + 2) / (2 * a_sym * (2 * a_sym**2 + 1))) == 0
    return sp.lambdify(a_sym, l1, "numpy")


def test_probability_of_l1_above_a_threshold():
    # A ~ uniform(0.5, 2). l1(A) increases, and l1(1) = -1/2, so
    # P(l1 > -1/2) = P(A > 1) = (2 - 1) / 1.5 = 2/3 (closed form in A's distribution).
    l1_of = _brusselator_l1()
    ev = lyacomp.compile(
        lyacomp.Model(
            name="brusselator",
            states={"x": 1.0, "y": 1.5},
            parameters={"A": 1.0, "B": 1.9},
            equations={"x": "A - (B + 1)*x + x**2*y", "y": "B*x - x**2*y"},
            bifurcation="B",  # no closed-form critical value: Newton finds B = 1 + A^2
        )
    )
    n = 4000
    result = run_robustness(
        ev,
        n,
        seed=11,
        uncertainty={"A": {"distribution": "uniform", "low": 0.5, "high": 2.0}},
        progress=False,
    )
    assert result.ok == result.first_loss == n and result.off_branch == 0
    a, l1 = result.kept["A"], result.kept["l1"]
    assert len(a) == n
    np.testing.assert_allclose(result.kept["critical_value"], 1 + a**2, rtol=1e-10)
    np.testing.assert_allclose(l1, l1_of(a), rtol=1e-9)
    fraction = np.count_nonzero(l1 > -0.5) / n
    # 4 binomial standard deviations (common practice, no source)
    assert abs(fraction - 2 / 3) < 4 * math.sqrt(2 / 3 * (1 / 3) / n)
    assert result.probability_subcritical == 0.0  # l1 < 0 for every A > 0
    # the median of l1 is l1 at the median of A, 1.25 (l1 is monotone in A)
    median = result.quantiles["l1"]["0.5"]
    assert median == pytest.approx(float(l1_of(1.25)), rel=0.05)
