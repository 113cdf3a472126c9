"""A design optimization whose optimum lies inside the feasible set, through the Newton
search, checked against scipy on an l1 computed independently (sympy, planar formula)."""

from __future__ import annotations

import numpy as np
import pytest
import sympy as sp

import lyacomp
from lyacomp.studies.optimize import DesignSpace

optimize = pytest.importorskip("scipy.optimize")

# x' = (mu - a) x - y + f, y' = x + (mu - a) y + g: the Hopf point moves with the design
# (mu0 = a, found by Newton: the model gives no closed form), omega = 1.
F = "a*x**2 + x*y + c*y**2 - x*(x**2 + y**2)"
G = "-a*x**2 + c*y**2 - y*(x**2 + y**2)"


def _reference_l1():
    """l1(a, c) = 2 a3 / omega from the planar formula for 16 a3 (Guckenheimer & Holmes
    1983, eq. 3.4.11, from memory; docs/mathematics.md), by sympy on f and g: here
    16 a3 = -16 + 2a + 2c + 4a^2 + 4c^2, convex with its minimum at a = c = -1/4."""
    x, y, a, c = sp.symbols("x y a c", real=True)
    names = {"x": x, "y": y, "a": a, "c": c}
    f, g = sp.sympify(F, locals=names), sp.sympify(G, locals=names)

    def d(e, *vs):
        return sp.diff(e, *vs).subs({x: 0, y: 0})

    a16 = (
        d(f, x, x, x)
        + d(f, x, y, y)
        + d(g, x, x, y)
        + d(g, y, y, y)
        + d(f, x, y) * (d(f, x, x) + d(f, y, y))
        - d(g, x, y) * (d(g, x, x) + d(g, y, y))
        - d(f, x, x) * d(g, x, x)
        + d(f, y, y) * d(g, y, y)
    )
    assert sp.expand(a16 - (-16 + 2 * a + 2 * c + 4 * a**2 + 4 * c**2)) == 0
    return sp.lambdify((a, c), 2 * a16 / 16, "numpy")


def test_interior_optimum_matches_an_independent_minimization():
    ev = lyacomp.compile(
        lyacomp.Model(
            name="interior design",
            states={"x": 0.0, "y": 0.0},
            parameters={"mu": 0.5, "a": 0.5, "c": 0.5},
            equations={"x": f"(mu - a)*x - y + {F}", "y": f"x + (mu - a)*y + {G}"},
            bifurcation="mu",
        )
    )
    reference = _reference_l1()
    bounds = [(-1.0, 1.0), (-1.0, 1.0)]
    space = DesignSpace(ev, ["a", "c"])
    l1 = space.output("l1")
    for point in ([0.5, 0.5], [-0.8, 0.3]):
        assert l1(point) == pytest.approx(float(reference(*point)), rel=1e-10)
    ours = optimize.minimize(l1, [0.5, 0.5], jac=l1.jac, method="L-BFGS-B", bounds=bounds)
    theirs = optimize.minimize(
        lambda v: float(reference(*v)),
        [0.5, 0.5],
        method="Nelder-Mead",
        options={"xatol": 1e-10, "fatol": 1e-14},
    )
    assert ours.success and theirs.success
    assert ours.x == pytest.approx(theirs.x, abs=1e-5)
    assert ours.x == pytest.approx([-0.25, -0.25], abs=1e-5)  # calculus on 16 a3
    assert ours.fun == pytest.approx(theirs.fun, rel=1e-9)
    assert ours.fun == pytest.approx(2 * (-16.5) / 16, rel=1e-9)
    # inside the box, not on a bound: the gradient vanishes there
    assert all(lo + 0.5 < v < hi - 0.5 for v, (lo, hi) in zip(ours.x, bounds, strict=True))
    assert np.abs(l1.jac(ours.x)).max() < 1e-5
    # the critical value came from the Newton search and moves with the design
    assert space.output("critical_value")(ours.x) == pytest.approx(ours.x[0], abs=1e-12)
