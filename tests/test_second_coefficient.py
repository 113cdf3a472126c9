"""The second Lyapunov coefficient l2 and the degenerate Hopf point (l1 = 0).

External checks, source beside each:
- the Bautin normal form after random linear changes of coordinates (docs/mathematics.md
  check values l1 = 2 beta2, l2 = 4 s, and the invariance l2_y = l2_x / |T^-1 q|^4;
  Kuznetsov, Elements of Applied Bifurcation Theory, 3rd ed. 2004, Ch. 8, the generalized
  Hopf normal form);
- a 40-digit series reference (tests/reference/mp_bautin.py, no lyacomp code) on 3-state
  models tuned to l1 = 0 by the reference itself;
- the planar formula of Guckenheimer & Holmes 1983, eq. 3.4.11 (equation number from
  memory), which gives the degenerate point of a planar family in closed form.
"""

from __future__ import annotations

import json
import math

import mpmath
import numpy as np
import pytest
import sympy as sp

import lyacomp
from lyacomp.errors import DegeneratePointError
from tests.reference.mp_bautin import normal_form_coefficients
from tests.reference.mp_hopf import MpHopf

# --- Bautin normal form in Cartesian coordinates, after x = T y --------------------------

_X = "(t11*y1 + t12*y2)"
_Y = "(t21*y1 + t22*y2)"
_R2 = f"({_X}**2 + {_Y}**2)"
_F1 = f"(b1*{_X} - w*{_Y} + b2*{_X}*{_R2} + s*{_X}*{_R2}**2)"
_F2 = f"(w*{_X} + b1*{_Y} + b2*{_Y}*{_R2} + s*{_Y}*{_R2}**2)"


@pytest.fixture(scope="module")
def bautin():
    # w' = (b1 + i w) w + b2 w|w|^2 + s w|w|^4 in (X, Y) = (Re w, Im w), then y = T^-1 X.
    params = {"b1": 0.01, "b2": 0.3, "s": -0.7, "w": 1.0}
    params |= {f"t{i}{j}": float(i == j) for i in (1, 2) for j in (1, 2)}
    params |= {f"u{i}{j}": float(i == j) for i in (1, 2) for j in (1, 2)}
    model = lyacomp.Model(
        name="bautin_normal_form",
        states={"y1": 0.0, "y2": 0.0},
        parameters=params,
        equations={"y1": f"u11*{_F1} + u12*{_F2}", "y2": f"u21*{_F1} + u22*{_F2}"},
        bifurcation="b1",
    )
    return lyacomp.compile(model)


def _transform(rng):
    while True:
        t = rng.normal(size=(2, 2))
        if abs(np.linalg.det(t)) > 0.3:
            return t


@pytest.mark.parametrize("seed", range(6))
def test_bautin_normal_form_after_linear_change(bautin, seed):
    rng = np.random.default_rng(seed)
    t = _transform(rng)
    u = np.linalg.inv(t)
    b2, s, w = rng.uniform(-1, 1), rng.uniform(-2, 2), rng.uniform(0.5, 2.0)
    values = {"b2": b2, "s": s, "w": w}
    values |= {f"t{i + 1}{j + 1}": t[i, j] for i in range(2) for j in range(2)}
    values |= {f"u{i + 1}{j + 1}": u[i, j] for i in range(2) for j in range(2)}
    r = bautin(values, l2=True)
    assert r.ok, r.status
    # docs/mathematics.md: for the normal form in (X, Y), l1 = 2 b2 / w and l2 = 4 s / w
    # (z = w/sqrt 2; the /w from l = Re c / omega); x = T y: l1 / |T^-1 q|^2, l2 / |T^-1 q|^4 with
    # q = (1, -i)/sqrt(2), the eigenvector of [[0, -w], [w, 0]] for i w (<q, q> = 1).
    q = np.array([1.0, -1.0j]) / math.sqrt(2)
    g = np.linalg.norm(u @ q)
    assert r.l1 == pytest.approx(2 * b2 / w / g**2, rel=1e-10)
    assert r.l2 == pytest.approx(4 * s / w / g**4, rel=1e-10)


@pytest.mark.parametrize("s", (-0.7, 0.9))
def test_degenerate_point_reports_l2_and_onset(bautin, s):
    # l1 = 2 b2 = 0: degenerate; l2 = 4 s decides (docs/mathematics.md: l2 < 0 soft, l2 > 0 hard).
    r = bautin(b2=0.0, s=s)
    assert r.criticality == "degenerate"
    # the plain library has no l2 stage: the evaluator fetched l2 from its extended twin
    assert not hasattr(bautin.lib, "lyc_second_coefficient")
    assert r.l2 == pytest.approx(4 * s, rel=1e-12)
    assert r.degenerate_onset == ("soft" if s < 0 else "hard")
    assert r.to_dict()["l2"] == pytest.approx(4 * s, rel=1e-12)
    assert "l2" not in bautin(b2=0.3).to_dict()  # only when asked or degenerate
    assert bautin.evaluate_l2(b2=0.3).l2 == pytest.approx(4 * -0.7, rel=1e-12)
    with pytest.raises(lyacomp.EvaluationError, match="True or False"):
        bautin(l2="yes")


def test_fold_of_cycles_from_the_normal_form(bautin):
    # r' = r (b1 + b2 r^2 + s r^4) in (X, Y) (docs/mathematics.md check form, T = I,
    # w = 1): two cycles merge where b2^2 = 4 s b1, at r^2 = -b2 / (2 s) (common practice,
    # no source: the double root of a quadratic).
    b2, s = 0.3, -0.7
    r = bautin(b2=b2, s=s, l2=True)
    fold = r.cycle_fold
    assert fold is not None and fold.outer_stable
    assert fold.value == pytest.approx(b2**2 / (4 * s), rel=1e-12)
    assert fold.amplitude["y1"] == pytest.approx(math.sqrt(-b2 / (2 * s)), rel=1e-12)
    assert bautin(b2=-0.3, s=s, l2=True).cycle_fold is None  # same signs: no fold
    soft_then_hard = bautin(b2=-0.3, s=0.7, l2=True).cycle_fold
    assert soft_then_hard is not None and not soft_then_hard.outer_stable


# --- against the series reference on 3-state models tuned to l1 = 0 ---------------------

FAMILIES = {
    "polynomial": {
        "u": "mu*u - v + a*u**3 + 0.7*u*v - u*w + 0.4*u**2 - 0.3*u**2*v**2 + 0.2*u*v**4",
        "v": "u + mu*v - 0.3*v**2 + 0.5*u*w + 0.6*(exp(u) - 1 - u)",
        "w": "-0.8*w + 0.6*u**2 - 0.4*u*v + sin(v) - v + 0.1*u**3*v",
    },
    # shifted equilibrium (0.3, -0.2, 0.1), mu entering nonlinearly, trigonometric terms
    "shifted": {
        "u": "mu*(u - 0.3) - 1.5*(v + 0.2) + a*(u - 0.3)**3 + 0.5*(u - 0.3)*(w - 0.1)"
        " + 0.2*mu**2*(v + 0.2) + 0.3*sin(u - 0.3)**2",
        "v": "1.5*(u - 0.3) + mu*(v + 0.2) - 0.4*(v + 0.2)**2*cos(w - 0.1) + 0.25*(u - 0.3)**4",
        "w": "-(w - 0.1) + 0.8*(u - 0.3)*(v + 0.2) + 0.3*(exp(u - 0.3) - 1 - (u - 0.3))",
    },
}
A_GUESS = {"polynomial": -0.3, "shifted": 0.5}
GUESS = {"polynomial": (0.0, 0.0, 0.0), "shifted": (0.3, -0.2, 0.1)}


def _reference(family: str):
    states = sp.symbols("u v w")
    mu, a = sp.symbols("mu a")
    names = {str(s): s for s in (*states, mu, a)}
    rhs = [sp.sympify(e, locals=names) for e in FAMILIES[family].values()]
    ref = MpHopf(rhs, states, (mu, a), mu)

    def coefficients(a_value):
        pt = ref.solve({"mu": 0.01, "a": a_value}, GUESS[family], dps=40)
        with mpmath.workdps(40):
            c1, c2 = normal_form_coefficients(
                rhs,
                states,
                {mu: pt.critical_value, a: mpmath.mpf(a_value)},
                pt.equilibrium,
                pt.omega,
                pt.q,
                pt.p,
            )
        return pt, c1 / pt.omega, c2 / pt.omega

    return coefficients


@pytest.mark.parametrize("family", sorted(FAMILIES))
def test_l2_and_degenerate_point_against_reference(family):
    coefficients = _reference(family)
    # The series reference reproduces the projection-formula l1 of mp_hopf (two
    # independent derivations inside the reference agree).
    pt, l1_series, _ = coefficients(A_GUESS[family])
    assert float(l1_series.real) == pytest.approx(float(pt.l1), rel=1e-12, abs=1e-14)
    with mpmath.workdps(40):
        a_star = mpmath.findroot(lambda v: coefficients(v)[1].real, mpmath.mpf(A_GUESS[family]))
        pt, l1_star, l2_star = coefficients(a_star)
    assert abs(l1_star.real) < 1e-25
    model = lyacomp.Model(
        name=f"bautin_ref_{family}",
        states=dict(zip("uvw", GUESS[family])),
        parameters={"mu": 0.01, "a": A_GUESS[family]},
        equations=FAMILIES[family],
        bifurcation="mu",
    )
    ev = lyacomp.compile(model)
    # l2 at the tuned point: lyacomp sees l1 = 0 to rounding and reports l2 itself.
    r = ev(a=float(a_star))
    assert r.criticality == "degenerate", r.l1
    assert r.l2 == pytest.approx(float(l2_star.real), rel=1e-9)
    # l2 away from l1 = 0 (on request), against the same reference.
    _, _, l2_off = coefficients(A_GUESS[family])
    assert ev(a=A_GUESS[family], l2=True).l2 == pytest.approx(float(l2_off.real), rel=1e-9)
    # The degenerate point located by lyacomp, from the guess, against the reference root.
    point = ev.degenerate_point("a")
    assert point.value == pytest.approx(float(a_star), rel=1e-9)
    assert point.critical_value == pytest.approx(float(pt.critical_value), rel=1e-9, abs=1e-12)
    assert point.omega == pytest.approx(float(pt.omega), rel=1e-9)
    assert point.l2 == pytest.approx(float(l2_star.real), rel=1e-9)
    # dl1/da there, exact in C (the derivative stage), against 40-digit central differences
    # of the reference l1 (h = 1e-15: truncation ~1e-30); a difference slope (error ~1e-7)
    # or a sign slip fails.
    with mpmath.workdps(40):
        h = mpmath.mpf("1e-15")
        ref_slope = (coefficients(a_star + h)[1].real - coefficients(a_star - h)[1].real) / (2 * h)
    assert point.slope == pytest.approx(float(ref_slope), rel=1e-9)

    # ... and against central differences of the compiled l1, to the difference formula's
    # error (Richardson: steps h and 2h; common practice, no source).
    def central(step: float) -> float:
        return (ev(a=point.value + step).l1 - ev(a=point.value - step).l1) / (2 * step)

    step = 1e-4 * max(1.0, abs(point.value))
    fine, coarse = central(step), central(2 * step)
    assert abs(point.slope - fine) <= 2.0 * abs(fine - coarse) / 3.0 + 1e-11 / step


# --- degenerate point in closed form: a planar family ------------------------------------


@pytest.fixture(scope="module")
def planar():
    model = lyacomp.Model(
        name="planar_degenerate",
        states={"x": 0.0, "y": 0.0},
        parameters={"mu": 0.01, "A": 0.1, "k": 0.6, "w": 1.3},
        equations={
            "x": "mu*x - w*y + x**2 + A*x**3 - x**5 + 0.2*x*y**4",
            "y": "w*x + mu*y + k*x**2 - y**5",
        },
        bifurcation="mu",
    )
    return lyacomp.compile(model)


@pytest.mark.parametrize(("k", "w"), [(0.6, 1.3), (-0.4, 0.8), (1.5, 2.0)])
def test_degenerate_point_in_closed_form(planar, k, w):
    # Guckenheimer & Holmes 1983, eq. 3.4.11 (number from memory), linear part
    # [[0, -w], [w, 0]]: f = x^2 + A x^3 + ..., g = k x^2 give f_xxx = 6A, f_xx = 2,
    # g_xx = 2k and 16 a = 6 A - (1/w) f_xx g_xx = 6 A - 4 k / w, so a = 0 at A = 2k/(3w).
    point = planar.degenerate_point("A", k=k, w=w)
    assert point.value == pytest.approx(2 * k / (3 * w), rel=1e-10)
    assert abs(point.critical_value) < 1e-12
    assert point.omega == pytest.approx(w, rel=1e-12)
    # slope of l1 = 2a/w in A: 2 * (6/16) / w (docs/mathematics.md: l1 = 2 a / omega); exact (the
    # derivative stage), where the former central difference was off by up to 6e-11.
    assert point.slope == pytest.approx(0.75 / w, rel=1e-13)
    # Newton with the exact slope needs no more steps than with the central difference
    # (2, 3 and 2 steps measured with it for these cases).
    assert point.steps <= {(0.6, 1.3): 2, (-0.4, 0.8): 3, (1.5, 2.0): 2}[(k, w)]


def test_degenerate_point_errors(planar):
    with pytest.raises(DegeneratePointError, match="bifurcation parameter"):
        planar.degenerate_point("mu")
    with pytest.raises(lyacomp.EvaluationError, match="unknown parameter"):
        planar.degenerate_point("nope")
    # With k = 0 the planar formula below gives l1 = 0.75 A / w: no root along w for A != 0.
    with pytest.raises(DegeneratePointError, match="no degenerate Hopf point"):
        planar.degenerate_point("w", k=0.0, A=0.1)


def test_cli_degenerate_in_json(tmp_path, capsys):
    path = tmp_path / "planar.toml"
    path.write_text(
        'name = "planar"\n[states]\nx = 0.0\ny = 0.0\n'
        "[parameters]\nmu = 0.01\nA = 0.1\nk = 0.6\nw = 1.3\n"
        '[equations]\nx = "mu*x - w*y + x**2 + A*x**3 - x**5"\n'
        'y = "w*x + mu*y + k*x**2 - y**5"\n'
        '[bifurcation]\nparameter = "mu"\nguess = 0.01\n'
    )
    from lyacomp.cli import main

    assert main(["eval", str(path), "--degenerate-in", "A", "--l2", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert set(out["degenerate_point"]) >= {"value", "critical_value", "omega", "l2"}
    # closed form A = 2k/(3w) (Guckenheimer & Holmes 1983, eq. 3.4.11, number from memory)
    assert out["degenerate_point"]["value"] == pytest.approx(2 * 0.6 / (3 * 1.3), rel=1e-10)
    assert "l2" in out


# --- simulation: the fold of cycles near the degenerate point ----------------------------


def test_simulation_shows_two_cycles_outer_stable(planar):
    # Near a degenerate point with l2 < 0, on the side l1 > 0 and between the fold and mu0,
    # a stable equilibrium, an unstable small cycle and a stable outer cycle coexist; past
    # the fold neither cycle exists (Kuznetsov 2004, Ch. 8, the generalized Hopf bifurcation;
    # here checked by direct simulation with scipy's solve_ivp, not by lyacomp's numbers).
    from scipy.integrate import solve_ivp

    k, w = 0.6, 1.3
    a_star = planar.degenerate_point("A", k=k, w=w).value
    r = planar(A=a_star + 0.5, k=k, w=w, l2=True)
    assert r.l1 > 0 and r.l2 < 0
    fold = r.cycle_fold
    assert fold is not None and fold.outer_stable and fold.value < r.critical_value

    def final_amplitude(mu, x0):
        def rhs(_t, z):
            x, y = z
            return [
                mu * x - w * y + x**2 + (a_star + 0.5) * x**3 - x**5 + 0.2 * x * y**4,
                w * x + mu * y + k * x**2 - y**5,
            ]

        sol = solve_ivp(rhs, (0, 3000), [x0, 0.0], rtol=1e-9, atol=1e-12, dense_output=True)
        assert sol.success
        tail = sol.sol(np.linspace(2900, 3000, 2000))
        return float(np.max(np.hypot(tail[0], tail[1])))

    mu = 0.5 * fold.value  # inside the bistable interval (fold.value, 0)
    beta1 = r.transversality * (mu - r.critical_value) / r.omega
    disc = r.l1**2 - 4 * r.l2 * beta1
    inner = (
        math.sqrt((-r.l1 + math.sqrt(disc)) / (2 * r.l2))
        * fold.amplitude["x"]
        / math.sqrt(-r.l1 / (2 * r.l2))
    )
    outer = (
        math.sqrt((-r.l1 - math.sqrt(disc)) / (2 * r.l2))
        * fold.amplitude["x"]
        / math.sqrt(-r.l1 / (2 * r.l2))
    )
    assert final_amplitude(mu, 0.5 * inner) < 1e-3  # inside the unstable cycle: decays
    big = final_amplitude(mu, 1.5 * inner)  # outside it: grows to the stable outer cycle
    assert big > 2 * inner
    assert final_amplitude(mu, 2.0 * outer) == pytest.approx(big, rel=1e-3)  # from outside too
    assert big == pytest.approx(outer, rel=0.3)  # truncated normal form: a rough estimate
    # past the fold no cycle is left: every start decays to the equilibrium
    assert final_amplitude(2.0 * fold.value, 1.5 * outer) < 1e-3


def test_time_rescaling_and_reversal():
    # docs/mathematics.md, Invariances: F -> k F (k > 0) leaves l2 unchanged; F -> -F flips
    # its sign.
    # (Normal form: w' = k(i omega w + c2 w|w|^4) gives c2 -> k c2, omega -> k omega.)
    eqs = {name: f"tk*({rhs})" for name, rhs in FAMILIES["polynomial"].items()}
    model = lyacomp.Model(
        name="bautin_time_scaled",
        states={"u": 0.0, "v": 0.0, "w": 0.0},
        parameters={"mu": 0.01, "a": -0.3, "tk": 1.0},
        equations=eqs,
        bifurcation="mu",
    )
    ev = lyacomp.compile(model)
    base = ev(l2=True)
    assert base.ok and math.isfinite(base.l2) and base.l2 != 0
    faster = ev(tk=2.5, l2=True)
    assert faster.omega == pytest.approx(2.5 * base.omega, rel=1e-12)
    assert faster.l2 == pytest.approx(base.l2, rel=1e-10)
    reversed_ = ev(tk=-1.0, l2=True)
    assert reversed_.ok, reversed_.status
    assert reversed_.l2 == pytest.approx(-base.l2, rel=1e-10)
