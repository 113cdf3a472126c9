"""The operating-point search: follow the equilibrium from a stable operating value of the
bifurcation parameter to its first loss of stability, classify it, refine a Hopf point."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import sympy as sp

import lyacomp
from lyacomp import EvaluationError, ModelError
from lyacomp.cli import main
from lyacomp.cli.eval_cmd import report
from lyacomp.model import model_from_dict

SIGMA, B_LORENZ = 10.0, 8.0 / 3.0


def _model(equations, parameters, states, **bif):
    bif.setdefault("bifurcation", "mu")
    return lyacomp.Model(
        name="operating probe",
        states=states,
        parameters=parameters,
        equations=equations,
        **bif,
    )


def _same_point(a, b, rel=1e-10):
    """Operating-search and guess-search results describe the same Hopf point."""
    assert a.ok and b.ok, (a.status, b.status)
    for name in ("critical_value", "l1", "omega", "transversality"):
        assert getattr(a, name) == pytest.approx(getattr(b, name), rel=rel), name
    for key, value in a.equilibrium.items():
        assert value == pytest.approx(b.equilibrium[key], rel=rel, abs=1e-12), key
    assert (a.unstable_count, a.stable_side, a.cycle_side, a.criticality) == (
        b.unstable_count,
        b.stable_side,
        b.cycle_side,
        b.criticality,
    )


# -- published and standard systems ---------------------------------------------------


@pytest.fixture(scope="module")
def lorenz():
    return lyacomp.compile(
        _model(
            {"x": "sigma*(y - x)", "y": "r*x - y - x*z", "z": "x*y - b*z"},
            {"sigma": SIGMA, "b": B_LORENZ, "r": 20.0},
            # the nonzero equilibrium at r = 1.5: x = y = sqrt(b (r - 1)), z = r - 1
            {"x": math.sqrt(B_LORENZ * 0.5), "y": math.sqrt(B_LORENZ * 0.5), "z": 0.5},
            bifurcation="r",
            operating=1.5,
        )
    )


def test_lorenz_first_loss_is_the_hopf_point_r_h(lorenz):
    # Lorenz 1963; Sparrow 1982: the nonzero equilibria lose stability at the Hopf point
    # r_H = sigma (sigma + b + 3) / (sigma - b - 1), 24.7368... for sigma = 10, b = 8/3.
    r_h = SIGMA * (SIGMA + B_LORENZ + 3.0) / (SIGMA - B_LORENZ - 1.0)
    r = lorenz()
    assert r.ok, r.status
    assert r.critical_value == pytest.approx(r_h, rel=1e-12)
    # on that branch x = y = sqrt(b (r - 1)), z = r - 1 (Lorenz 1963)
    assert r.equilibrium["z"] == pytest.approx(r_h - 1.0, rel=1e-12)
    assert r.equilibrium["x"] == pytest.approx(math.sqrt(B_LORENZ * (r_h - 1.0)), rel=1e-12)
    assert r.unstable_count == 0 and r.first_loss_of_stability
    assert r.stable_side == "below"
    assert r.search.method == "operating" and r.search.start_value == 1.5
    assert r.search.direction == "up" and r.search.loss_value == r.critical_value
    # The same Hopf point by the guess-based search started next to it.
    guessed = lorenz.with_guess(x=7.9, y=7.9, z=23.7)(r=24.5, search="guess")
    _same_point(r, guessed)
    assert guessed.search.method == "guess" and guessed.search.start_value == 24.5


def _brusselator(**extra):
    return _model(
        {"x": "A - (B + 1)*x + x**2*y", "y": "B*x - x**2*y"},
        {"A": 1.5, "B": 3.0},
        {"x": 1.5, "y": 1.0 / 1.5},  # the equilibrium (A, B/A) at B = 1
        bifurcation="B",
        **extra,
    )


def test_brusselator_from_b_equal_one_upward():
    # Prigogine & Lefever 1968: the Brusselator's equilibrium (A, B/A) loses stability at
    # the Hopf point B = 1 + A^2, with omega = A there (common practice, no source).
    ev = lyacomp.compile(_brusselator(operating=1.0))
    r = ev()
    assert r.ok, r.status
    assert r.critical_value == pytest.approx(1.0 + 1.5**2, rel=1e-12)
    assert r.omega == pytest.approx(1.5, rel=1e-12)
    assert r.first_loss_of_stability
    _same_point(r, ev(B=3.2, search="guess"))
    # One operating value per sample, A per sample: B_H = 1 + A^2 each time; the state
    # guesses (the equilibrium at A = 1.5) serve every sample.
    a = np.array([1.2, 1.4, 1.5, 1.6])
    b = ev.batch(A=a, operating=np.array([1.0, 1.1, 1.2, 1.3]))
    assert b.search == "operating"
    assert (b.status == 0).all(), b.status_counts()
    np.testing.assert_allclose(b.critical_value, 1.0 + a**2, rtol=1e-12)
    np.testing.assert_allclose(b.loss_value, b.critical_value, rtol=0)
    assert (b.search_steps > 0).all() and (b.unstable_count == 0).all()
    guess = ev.batch(A=a, B=1.0 + a**2 - 0.1, search="guess")
    for name in ("critical_value", "l1", "omega", "transversality"):
        np.testing.assert_allclose(getattr(b, name), getattr(guess, name), rtol=1e-10)


def test_per_sample_guesses_belong_to_the_guess_search():
    # The two starts exclude each other; search="guess" takes the per-sample guesses.
    ev = lyacomp.compile(_brusselator(operating=1.0))
    with pytest.raises(EvaluationError, match="give one or the other"):
        ev.batch(A=np.array([1.5, 1.6]), guess={"x": np.array([1.5, 1.6])})
    a = np.array([1.5, 1.6])
    b = ev.batch(A=a, guess={"x": a, "y": 2.0 / a, "B": 1.0 + a**2}, search="guess")
    np.testing.assert_allclose(b.critical_value, 1.0 + a**2, rtol=1e-12)  # B = 1 + A^2


def test_brusselator_from_sympy_expressions():
    # The same model built from sympy expressions (the sympy entry point), operating given.
    x, y, a, bb = sp.symbols("x y A B")
    model = lyacomp.Model(
        name="brusselator sympy",
        states={"x": 1.5, "y": 1.0 / 1.5},
        parameters={"A": 1.5, "B": 3.0},
        equations={"x": a - (bb + 1) * x + x**2 * y, "y": bb * x - x**2 * y},
        bifurcation="B",
        operating=1.0,
    )
    # Prigogine & Lefever 1968: Hopf at B = 1 + A^2.
    assert lyacomp.compile(model)().critical_value == pytest.approx(3.25, rel=1e-12)


def _ring(n):
    """n first-order stages in a loop, the last fed back with a minus sign:
    x_1' = -x_1 - K tanh(x_n), x_i' = -x_i + tanh(x_{i-1})."""
    names = [f"x{i}" for i in range(1, n + 1)]
    eqs = {names[0]: f"-{names[0]} - K*tanh({names[-1]})"}
    for prev, cur in zip(names, names[1:]):
        eqs[cur] = f"-{cur} + tanh({prev})"
    return _model(eqs, {"K": 2.0}, dict.fromkeys(names, 0.0), bifurcation="K", operating=0.5)


def _ring_jacobian(n, k):
    jac = -np.eye(n)
    for i in range(1, n):
        jac[i, i - 1] = 1.0
    jac[0, n - 1] = -k
    return jac


@pytest.mark.parametrize("n", [3, 4, 5, 8])
def test_ring_first_crossing_at_sec_pi_over_n_to_the_n(n):
    # From memory (a standard result for cyclic feedback loops): (s + 1)^n + K = 0 first has
    # roots on the imaginary axis at the loop gain K = sec(pi/n)^n, with omega = tan(pi/n).
    ev = lyacomp.compile(_ring(n))
    r = ev()
    assert r.ok, r.status
    k_c = 1.0 / math.cos(math.pi / n) ** n
    assert r.critical_value == pytest.approx(k_c, rel=1e-10)
    assert r.omega == pytest.approx(math.tan(math.pi / n), rel=1e-10)
    assert r.unstable_count == 0
    # Independently with numpy.linalg.eigvals of the linearization at the origin: the
    # rightmost real part is zero at K_c, negative just below and positive just above.
    rightmost = [
        np.linalg.eigvals(_ring_jacobian(n, k)).real.max()
        for k in (r.critical_value * (1 - 1e-6), r.critical_value, r.critical_value * (1 + 1e-6))
    ]
    assert rightmost[0] < 0 < rightmost[2]
    assert abs(rightmost[1]) < 1e-9
    _same_point(r, ev(K=k_c * 1.02, search="guess"))


# -- two Hopf points, real crossings, unstable and stable cases -------------------------

TWO_PAIRS = {
    # pair 1: (mu - 1)/5 +- i; pair 2: (mu - 2) +- 2i, coupled to the first through x^2
    "x": "(mu - 1)*x/5 - y - x*(x**2 + y**2)",
    "y": "x + (mu - 1)*y/5 - y*(x**2 + y**2)",
    "u": "(mu - 2)*u - 2*v - u*(u**2 + v**2) + x**2",
    "v": "2*u + (mu - 2)*v - v*(u**2 + v**2)",
}


@pytest.fixture(scope="module")
def two_pairs():
    return lyacomp.compile(
        _model(TWO_PAIRS, {"mu": 2.5}, dict.fromkeys("xyuv", 0.0), operating=0.0)
    )


def test_two_hopf_points_on_one_branch_the_search_meets_the_first(two_pairs):
    # Block-triangular Jacobian at the origin: eigenvalues (mu - 1)/5 +- i and (mu - 2) +- 2i
    # (common practice, no source): from mu = 0 upward the first loss is at mu = 1.
    r = two_pairs()
    assert r.ok, r.status
    assert r.critical_value == pytest.approx(1.0, abs=1e-12)
    assert r.omega == pytest.approx(1.0, rel=1e-12)
    assert r.unstable_count == 0 and r.first_loss_of_stability
    _same_point(r, two_pairs(mu=1.1, search="guess"))
    # The guess-based search started at mu = 2.5, where the second pair is the rightmost,
    # finds the second point, on an equilibrium already unstable (the first pair crossed).
    second = two_pairs(search="guess")
    assert second.ok and second.critical_value == pytest.approx(2.0, abs=1e-12)
    assert second.unstable_count == 2 and not second.first_loss_of_stability


def test_already_unstable_at_the_operating_value(two_pairs):
    # At mu = 1.5 the pair (mu - 1)/5 +- i has positive real part (common practice, no source).
    r = two_pairs(operating=1.5)
    assert r.status == "unstable_at_operating"
    assert not r.ok and math.isnan(r.l1)
    assert r.search.loss_value is None or math.isnan(r.search.loss_value)


def test_direction_down_meets_the_other_side(two_pairs):
    # From mu = 3 downward everything is unstable: refused as such. From mu = 0 downward the
    # pairs move left for ever: no loss of stability within the budget.
    assert two_pairs(operating=3.0, mu=0.0).status == "unstable_at_operating"
    assert two_pairs(operating=0.0, mu=-1.0).status == "stable_throughout"


def test_first_loss_through_a_real_eigenvalue_is_named_no_l1_claimed():
    # x' = (mu - 1) x - x^3 has the eigenvalue mu - 1 at x = 0 (a pitchfork at mu = 1), the
    # pair (mu - 2) +- i crosses at mu = 2 (common practice, no source). From mu = 0 upward
    # the first loss is the real eigenvalue at mu = 1.
    eqs = {
        "x": "(mu - 1)*x - x**3",
        "y": "(mu - 2)*y - z + x*y",
        "z": "y + (mu - 2)*z - z*(y**2 + z**2)",
    }
    ev = lyacomp.compile(_model(eqs, {"mu": 2.2}, dict.fromkeys("xyz", 0.0), operating=0.0))
    r = ev()
    assert r.status == "real_eigenvalue_crossing"
    assert math.isnan(r.l1) and r.criticality is None
    # The rightmost eigenvalue mu - 1 is linear in mu: the interpolation in the bracket is
    # exact to rounding (a bracket end alone would be up to 1e-7 of the scale off).
    assert r.search.loss_value == pytest.approx(1.0, abs=1e-12)
    text = report(r, "probe")
    assert "through a real eigenvalue (no oscillation onset; l1 not defined)" in text
    assert "mu_c = 1" in text
    # The guess-based search finds the Hopf point at mu = 2, on the unstable equilibrium.
    g = ev(search="guess")
    assert g.ok and g.critical_value == pytest.approx(2.0) and g.unstable_count == 1


def test_first_loss_at_a_fold_is_a_real_crossing():
    # x' = mu - x^2: the branch x = sqrt(mu) (eigenvalue -2 sqrt(mu)) meets the unstable
    # branch at the fold mu = 0 (common practice, no source); the search turns there.
    eqs = {"x": "mu - x**2", "y": "-y - 2*z + x*y", "z": "2*y - z"}
    ev = lyacomp.compile(
        _model(eqs, {"mu": 1.0}, {"x": 1.0, "y": 0.0, "z": 0.0}, operating=1.0, direction="down")
    )
    r = ev()
    assert r.status == "real_eigenvalue_crossing"
    assert r.search.direction == "down"
    assert r.search.loss_value == pytest.approx(0.0, abs=1e-6)


def test_no_loss_of_stability_ends_within_the_budget():
    # x' = -(1 + mu^2) x - y, y' = x - (1 + mu^2) y: the pair -(1 + mu^2) +- i never
    # crosses (common practice, no source).
    eqs = {"x": "-(1 + mu**2)*x - y", "y": "x - (1 + mu**2)*y"}
    ev = lyacomp.compile(_model(eqs, {"mu": 1.0}, {"x": 0.0, "y": 0.0}, operating=0.0))
    r = ev()
    assert r.status == "stable_throughout"
    assert 0 < r.search.steps <= 400


def test_closed_form_equilibrium_is_followed_too():
    # The Brusselator with its equilibrium (A, B/A) in closed form (Prigogine & Lefever 1968).
    ev = lyacomp.compile(_brusselator(operating=1.0, equilibrium={"x": "A", "y": "B/A"}))
    assert ev().critical_value == pytest.approx(3.25, rel=1e-12)


# -- input rules ------------------------------------------------------------------------


@pytest.mark.parametrize(
    "changes, message",
    [
        ({"operating": float("inf")}, "finite"),
        ({"operating": "one"}, "expected a number"),
        ({"operating": True}, "expected a number"),
        ({"operating": 1.0, "direction": "sideways"}, 'must be "up" or "down"'),
        ({"operating": 1.0, "direction": 1}, 'must be "up" or "down"'),
        ({"direction": "up"}, "needs an operating value"),
        ({"operating": 3.0}, "cannot tell which way"),  # the guess of B is 3.0 too
        ({"operating": 1.0, "critical_value": "1 + A**2"}, "exclude each other"),
        ({"operating": 1.0, "bifurcation": None}, "needs a 'parameter'"),
    ],
)
def test_model_refuses_bad_operating_declarations(changes, message):
    with pytest.raises(ModelError, match=message):
        _brusselator().replace(**changes)


def test_toml_keys_reach_the_model():
    doc = {
        "name": "brusselator",
        "states": {"x": 1.5, "y": 0.6666666666666666},
        "parameters": {"A": 1.5, "B": 3.0},
        "equations": {"x": "A - (B + 1)*x + x**2*y", "y": "B*x - x**2*y"},
        "bifurcation": {"parameter": "B", "operating": 1.0, "direction": "up"},
    }
    model = model_from_dict(doc)
    assert model.operating == 1.0 and model.operating_direction == 1
    doc["bifurcation"]["direction"] = "downward"
    with pytest.raises(ModelError, match='direction must be "up" or "down"'):
        model_from_dict(doc)


def test_call_refusals():
    ev = lyacomp.compile(_brusselator())
    with pytest.raises(EvaluationError, match="search must be one of"):
        ev(search="nearest")
    with pytest.raises(EvaluationError, match="needs an operating value"):
        ev(search="operating")
    with pytest.raises(EvaluationError, match="does not use it"):
        ev(operating=1.0, search="guess")
    with pytest.raises(EvaluationError, match="cannot tell which way"):
        ev(operating=3.0)  # the guess of B is 3.0
    with pytest.raises(EvaluationError, match=r"cannot tell which way.*\(sample 1\)"):
        ev.batch(B=np.array([3.0, 1.0]), operating=1.0)
    with pytest.raises(EvaluationError, match="must be finite"):
        ev.batch(operating=np.array([1.0, np.nan]))
    assert ev(operating=1.0).critical_value == pytest.approx(3.25, rel=1e-12)
    closed = lyacomp.compile(_brusselator(critical_value="1 + A**2"))
    with pytest.raises(EvaluationError, match="closed form"):
        closed(operating=1.0)


# -- command line -----------------------------------------------------------------------


def test_cli_operating_and_search(tmp_path, capsys):
    path = tmp_path / "bruss.toml"
    path.write_text(
        'name = "bruss"\n[states]\nx = 1.5\ny = 0.6666666666666666\n'
        "[parameters]\nA = 1.5\nB = 3.0\n"
        '[equations]\nx = "A - (B + 1)*x + x**2*y"\ny = "B*x - x**2*y"\n'
        '[bifurcation]\nparameter = "B"\n'
    )
    assert main(["eval", str(path), "--operating", "1", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    # Prigogine & Lefever 1968: Hopf at B = 1 + A^2.
    assert data["critical_value"] == pytest.approx(3.25, rel=1e-12)
    assert data["search"]["method"] == "operating" and data["search"]["start_value"] == 1.0
    assert data["search"]["direction"] == "up"
    assert main(["eval", str(path), "--operating", "1"]) == 0
    out = capsys.readouterr().out
    assert "the equilibrium, stable at B = 1, first loses stability at B_c = 3.25" in out
    assert "through a Hopf point" in out
    assert main(["eval", str(path), "--search", "guess", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["search"]["method"] == "guess"


def test_branch_that_leaves_the_domain_is_lost_not_a_crash():
    # x = sqrt(mu) exists only for mu >= 0 and the eigenvalues are -1 and -2 throughout
    # (common practice, no source): going down from mu = 1 the branch ends at mu = 0
    # without any loss of stability.
    eqs = {"x": "sqrt(mu) - x", "y": "-2*y + x"}
    ev = lyacomp.compile(_model(eqs, {"mu": -1.0}, {"x": 1.0, "y": 0.5}, operating=1.0))
    r = ev()
    assert r.status == "branch_lost"
    assert r.search.direction == "down" and 0 < r.search.steps <= 400
