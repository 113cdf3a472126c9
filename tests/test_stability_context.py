"""Stability context of a Hopf point: the unstable eigenvalues besides the critical pair,
the side on which the equilibrium is stable, and the verdict "first loss of stability"."""

from __future__ import annotations

import json

import numpy as np
import pytest

import lyacomp
from lyacomp.cli.eval_cmd import report


def _compile(equations, parameters, states, bifurcation="mu"):
    model = lyacomp.Model(
        name="stability probe",
        states=states,
        parameters=parameters,
        equations=equations,
        bifurcation=bifurcation,
    )
    return lyacomp.compile(model)


OSCILLATOR = {
    "x": "mu*x - y - x*(x**2 + y**2)",
    "y": "x + mu*y - y*(x**2 + y**2)",
}


@pytest.mark.parametrize("rate, unstable", [(0.5, 1), (-0.5, 0)])
def test_extra_state_decides_the_verdict(rate, unstable):
    # z' = rate z + x^2 adds the eigenvalue `rate` to the pair mu +- i (block triangular
    # Jacobian at the origin; common practice, no source). rate = 0.5: unstable on both
    # sides of mu0 = 0, so no soft onset although l1 < 0.
    eqs = dict(OSCILLATOR, z=f"{rate}*z + x**2")
    ev = _compile(eqs, {"mu": 0.05}, {"x": 0.0, "y": 0.0, "z": 0.0})
    r = ev()
    assert r.ok, r.status
    assert r.criticality == "supercritical"
    assert r.unstable_count == unstable
    text = report(r, "probe")
    data = r.to_dict()
    json.dumps(data)
    assert data["unstable_count"] == unstable
    if unstable:
        assert r.stable_side is None and data["stable_side"] is None
        assert not r.first_loss_of_stability
        assert "soft onset" not in text and "hard onset" not in text
        assert "supercritical" in text and "UNSTABLE" in text
    else:
        # d = 1 > 0: the pair mu +- i is stable for mu < 0 (common practice, no source).
        assert r.stable_side == "below" and data["stable_side"] == "below"
        assert r.first_loss_of_stability
        assert "soft onset" in text
    b = ev.batch({"mu": np.array([0.05, 0.02])})
    assert (b.unstable_count == unstable).all()
    assert (b.stable_side == (0 if unstable else -1)).all()
    assert (b.first_loss == (unstable == 0)).all()


def test_stable_side_follows_the_sign_of_d():
    # mu -> -mu reverses d: the pair -mu +- i is stable for mu > 0 (common practice, no source).
    eqs = {k: v.replace("mu*", "(-mu)*") for k, v in OSCILLATOR.items()}
    r = _compile(eqs, {"mu": -0.05}, {"x": 0.0, "y": 0.0})()
    assert r.ok and r.transversality == pytest.approx(-1.0)
    assert r.unstable_count == 0 and r.stable_side == "above"


def test_failed_evaluation_has_no_stability_context():
    # A damped oscillator (trace -1 for every mu) has no Hopf point (common practice).
    ev = _compile({"x": "y", "y": "-x - y + mu*x**3"}, {"mu": 0.1}, {"x": 0.0, "y": 0.0})
    r = ev()
    assert not r.ok
    assert r.unstable_count is None and r.stable_side is None and not r.first_loss_of_stability
    b = ev.batch({"mu": np.array([0.1])})
    assert b.unstable_count[0] == -1 and b.stable_side[0] == 0 and not b.first_loss[0]


def test_no_bifurcation_parameter_gives_no_side():
    eqs = {k: v.replace("mu", "0") for k, v in OSCILLATOR.items()}
    eqs["z"] = "-z + x*y"
    r = _compile(eqs, {}, {"x": 0.0, "y": 0.0, "z": 0.0}, bifurcation=None)()
    assert r.ok, r.status
    assert r.unstable_count == 0 and r.stable_side is None and r.first_loss_of_stability


def test_two_hopf_points_on_one_branch():
    # Origin for all mu; pairs (mu - 1) +- i and 20 (mu - 2) +- 2i (block diagonal).
    # Hopf points at mu = 1 (first loss of stability) and mu = 2 (pair 1 already unstable).
    # Each block is x' = a x - w y - x r^2, so l1 = 2 (-1) / w (Guckenheimer & Holmes 1983,
    # eq. 3.4.11, with l1 = 2a/omega; from memory).
    eqs = {
        "x": "(mu - 1)*x - y - x*(x**2 + y**2)",
        "y": "x + (mu - 1)*y - y*(x**2 + y**2)",
        "u": "20*(mu - 2)*u - 2*v - u*(u**2 + v**2)",
        "v": "2*u + 20*(mu - 2)*v - v*(u**2 + v**2)",
    }
    ev = _compile(eqs, {"mu": 0.9}, {"x": 0.0, "y": 0.0, "u": 0.0, "v": 0.0})
    first, second = ev(mu=0.9), ev(mu=2.1)
    assert first.ok and second.ok
    assert first.critical_value == pytest.approx(1.0) and first.omega == pytest.approx(1.0)
    assert second.critical_value == pytest.approx(2.0) and second.omega == pytest.approx(2.0)
    assert first.l1 == pytest.approx(-2.0) and second.l1 == pytest.approx(-1.0)
    assert first.unstable_count == 0 and first.stable_side == "below"
    assert first.first_loss_of_stability
    assert second.unstable_count == 2 and second.stable_side is None
    assert not second.first_loss_of_stability
    assert "soft onset" not in report(second, "two Hopf points")


def _linear_cubic_model(n: int):
    """x' = (M + mu I) x - x_i^3: Hopf at mu = 0 where M has the pair +-i w."""
    names = [f"s{i}" for i in range(n)]
    params = {f"m{i}_{j}": 0.0 for i in range(n) for j in range(n)}
    params["mu"] = 0.0
    eqs = {
        names[i]: " + ".join(f"m{i}_{j}*{names[j]}" for j in range(n))
        + f" + mu*{names[i]} - {names[i]}**3"
        for i in range(n)
    }
    return _compile(eqs, params, {s: 0.0 for s in names})


@pytest.mark.parametrize("n", [3, 4, 7, 12])
def test_unstable_count_matches_numpy(n):
    # The count is compared with numpy.linalg.eigvals of the same Jacobian (reference
    # library). Spectra: the pair +-2i, real eigenvalues near the axis on either side
    # (|Re| down to 1e-5 of the Jacobian's size), complex pairs to the left.
    rng = np.random.default_rng(n)
    ev = _linear_cubic_model(n)
    samples = 6
    columns: dict[str, list[float]] = {k: [] for k in ev.parameters}
    expected = []
    for _ in range(samples):
        blocks = [np.array([[0.0, -2.0], [2.0, 0.0]])]
        size = 2
        while size < n:
            if n - size >= 2 and rng.random() < 0.4:
                re, im = -rng.uniform(1e-3, 1.0), rng.uniform(0.5, 3.0)
                blocks.append(np.array([[re, -im], [im, re]]))
                size += 2
            else:
                mag = 10.0 ** rng.uniform(-5, 0)
                blocks.append(np.array([[mag * rng.choice([-1.0, 1.0])]]))
                size += 1
        d = np.zeros((n, n))
        k = 0
        for b in blocks:
            d[k : k + len(b), k : k + len(b)] = b
            k += len(b)
        q, _ = np.linalg.qr(rng.normal(size=(n, n)))
        m = q @ d @ q.T
        lam = np.linalg.eigvals(m)
        pair = np.abs(np.abs(lam.imag) - 2.0) < 1e-9
        assert pair.sum() == 2
        expected.append(int((lam[~pair].real > 0).sum()))
        for i in range(n):
            for j in range(n):
                columns[f"m{i}_{j}"].append(m[i, j])
        columns["mu"].append(0.0)
    b = ev.batch({k: np.array(v) for k, v in columns.items()})
    assert b.ok.all(), b.status_counts()
    assert list(b.unstable_count) == expected
    assert np.allclose(b.critical_value, 0.0, atol=1e-9)
    assert list(b.stable_side) == [-1 if e == 0 else 0 for e in expected]
    assert list(b.first_loss) == [e == 0 for e in expected]


@pytest.mark.parametrize("n", [4, 7])
def test_eigenvector_with_zero_components(n):
    """Hopf points whose critical eigenvector has components that are zero in exact
    arithmetic (the pair's plane is orthogonal to some coordinate axes), so that in
    floating point they are rounding noise. Newton's step test once measured each such
    component against its own noise-sized value and never converged (36 to 40 of 40
    samples gave no_convergence); the eigenvector is now measured as a whole.

    x' = (M + mu I) x - x_i^3 with M = Q D Q^T: Hopf point x = 0, mu = 0, omega = 2.
    B vanishes at x = 0 (no quadratic terms), so the projection formula (Kuznetsov,
    Elements of Applied Bifurcation Theory, 3rd ed. 2004, ch. 3) leaves
    l1 = Re <p, C(q, q, conj q)> / (2 omega) with C(q, q, conj q)_i = -6 q_i |q_i|^2;
    q, p come from numpy.linalg.eig (reference library).
    """
    rng = np.random.default_rng(20261202)
    ev = _linear_cubic_model(n)
    samples = 12
    columns: dict[str, list[float]] = {k: [] for k in ev.parameters}
    unstable, l1 = [], []
    for _ in range(samples):
        basis = rng.normal(size=(n, n))
        basis[rng.choice(n, size=max(1, n // 3), replace=False), :2] = 0.0
        q, _ = np.linalg.qr(basis)
        reals = rng.uniform(0.1, 1.0, size=n - 2) * rng.choice([-1.0, 1.0], size=n - 2)
        d = np.zeros((n, n))
        d[0, 1], d[1, 0] = -2.0, 2.0
        d[2:, 2:] = np.diag(reals)
        m = q @ d @ q.T
        for i in range(n):
            for j in range(n):
                columns[f"m{i}_{j}"].append(m[i, j])
        columns["mu"].append(0.0)
        unstable.append(int((reals > 0).sum()))
        lam, right = np.linalg.eig(m)
        k = int(np.argmin(np.abs(lam - 2j)))
        qv = right[:, k] / np.linalg.norm(right[:, k])
        lam_t, left = np.linalg.eig(m.T)
        pv = left[:, int(np.argmin(np.abs(lam_t + 2j)))]
        pv = pv / np.conj(np.vdot(pv, qv))  # <p, q> = 1 with <u, v> = sum conj(u) v
        l1.append(float(np.real(np.vdot(pv, -6.0 * qv * np.abs(qv) ** 2)) / (2 * 2.0)))
    b = ev.batch({k: np.array(v) for k, v in columns.items()})
    assert b.ok.all(), b.status_counts()
    assert list(b.unstable_count) == unstable
    assert np.allclose(b.critical_value, 0.0, atol=1e-9)
    assert np.allclose(b.omega, 2.0, rtol=1e-10)
    assert np.allclose(b.l1, l1, rtol=1e-8)


@pytest.mark.parametrize("extra_state", [False, True])
def test_center_manifold_l1(extra_state):
    """x' = mu x - w y + a x z, y' = w x + mu y + a y z, z' = -lam z + b (x^2 + y^2).

    At mu = 0 the center manifold is z = h(r^2) with r^2 = x^2 + y^2; to leading order
    z' = -lam z + b r^2 = h'(r^2) d(r^2)/dt = O(r^4), so z = b r^2 / lam. In polar form
    r' = mu r + a r z = mu r + (a b / lam) r^3, the radial normal form with cubic
    coefficient a b / lam, and l1 = 2 * (cubic coefficient) / omega = 2 a b / (lam w)
    in our normalization (<q, q> = 1, <p, q> = 1). Common practice, no source.
    The extra state u' = -u + x y is driven by the others but feeds nothing back, so it
    does not change l1 (and moves the evaluation to the n = 4 code path).
    """
    a, b, lam, w = 0.7, -1.3, 2.0, 1.5
    eqs = {
        "x": "mu*x - w*y + a*x*z",
        "y": "w*x + mu*y + a*y*z",
        "z": "-lam*z + b*(x**2 + y**2)",
    }
    states = {"x": 0.0, "y": 0.0, "z": 0.0}
    if extra_state:
        eqs["u"] = "-u + x*y"
        states["u"] = 0.0
    ev = _compile(eqs, {"mu": 0.03, "a": a, "b": b, "lam": lam, "w": w}, states)
    r = ev()
    assert r.ok, r.status
    assert r.l1 == pytest.approx(2 * a * b / (lam * w), rel=1e-10)
    assert r.omega == pytest.approx(w)
    assert r.unstable_count == 0 and r.stable_side == "below"
    r = ev(b=-b)
    assert r.l1 == pytest.approx(-2 * a * b / (lam * w), rel=1e-10)
