"""Delay models with the rest of lyacomp: per-sample guesses, the operating-point search
(complex and real crossings, a delay as the bifurcation parameter), the studies
(robustness with its nominal-branch check, maps, optimization) and the refusals of what
delay kernels do not compute yet."""

from __future__ import annotations

import json
import math
import re
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

import lyacomp
from lyacomp import EvaluationError
from lyacomp.errors import StudyError
from lyacomp.runtime.evaluator import DELAY_DEGENERATE, DELAY_DERIVATIVES, DELAY_L2
from lyacomp.studies.maps import DELAY_TRACE_NOTE, find_switches, parameter_map
from lyacomp.studies.robustness import DELAY_FORM_NOTE, off_nominal_branch, run_robustness
from lyacomp.studies.uncertainty import parse_uncertainty
from tests.delay_models import wright_model

BURNER = Path(__file__).resolve().parent.parent / "examples" / "lagged_burner.toml"

# Wright's equation x' = -r x(t - tau)(1 + x): Hopf points of x = 0 at r tau = pi/2 + 2 pi k
# with omega tau = r tau, the first (k = 0) supercritical with
# l1 = -2 (3 pi - 2) / (5 (4 + pi^2)) at tau = 1 (Hassard, Kazarinoff & Wan, Theory and
# Applications of Hopf Bifurcation, Cambridge 1981; docs/mathematics.md).
WRIGHT_L1 = -2 * (3 * math.pi - 2) / (5 * (4 + math.pi**2))


@pytest.fixture(scope="module")
def wright():
    return lyacomp.compile(wright_model("wright parity", {"r": 1.2, "tau": 1.0}, bifurcation="r"))


@pytest.fixture(scope="module")
def burner():
    return lyacomp.compile(lyacomp.load_model(str(BURNER)))


# --- the operating-point search ----------------------------------------------------------
def test_operating_search_on_wright_from_r_one_reaches_pi_over_two(wright):
    res = wright(operating=1.0)
    assert res.status == "ok"
    assert res.search.method == "operating" and res.search.direction == "up"
    assert res.critical_value == pytest.approx(math.pi / 2, rel=1e-12)
    assert res.omega == pytest.approx(math.pi / 2, rel=1e-12)
    assert res.l1 == pytest.approx(WRIGHT_L1, rel=1e-10)
    assert res.unstable_count == 0 and res.stable_side == "below"
    assert res.search.loss_value == res.critical_value
    # A guess beyond the second Hopf point (5 pi / 2) still meets the first loss first.
    assert wright(r=8.0, operating=0.5).critical_value == pytest.approx(math.pi / 2, rel=1e-12)


def test_operating_batch_matches_the_scalar_search(wright):
    tau = np.array([0.8, 1.0, 1.5])
    batch = wright.batch({"tau": tau, "r": 3.0}, operating=np.array([0.2, 0.5, 0.1]))
    assert list(batch.status_labels()) == ["ok"] * 3
    # r0 = pi / (2 tau) on the first branch (the scaling t -> t / tau of Wright's equation;
    # Hassard, Kazarinoff & Wan 1981 for r tau = pi/2)
    assert batch.critical_value == pytest.approx(math.pi / (2 * tau), rel=1e-12)
    assert batch.loss_value == pytest.approx(batch.critical_value, rel=1e-15)
    one = wright(tau=1.5, r=3.0, operating=0.1)
    assert one.l1 == batch.l1[2] and one.search.steps == batch.search_steps[2]


def test_already_unstable_at_the_operating_value(wright):
    assert wright(operating=2.0, r=3.0).status == "unstable_at_operating"


def test_delay_as_the_bifurcation_parameter():
    # x' = -a x + b x(t - tau) - x(t - tau)^3 at x = 0: lambda = -a + b e^{-lambda tau}. On
    # lambda = i omega: a = b cos(omega tau), omega = -b sin(omega tau), so
    # omega = sqrt(b^2 - a^2) (|b| > a) and, for b < 0 (sin > 0), tau_c = arccos(a / b) / omega;
    # stable for tau < tau_c since stable at tau = 0 (lambda = b - a < 0) (Hale & Verduyn
    # Lunel, Introduction to Functional Differential Equations, Springer 1993, the scalar
    # equation x' = a x + b x(t - r) (from memory); Smith, An Introduction to Delay
    # Differential Equations, Springer 2011, ch. 4 (from memory)).
    a, b = 1.0, -2.0
    omega = math.sqrt(b * b - a * a)
    tau_c = math.acos(a / b) / omega  # = 2 pi / (3 sqrt 3)
    model = lyacomp.Model(
        name="delayed feedback",
        states={"x": 0.0},
        parameters={"a": a, "b": b, "tau": 1.0},
        equations={"x": "-a*x + b*x(t - tau) - x(t - tau)**3"},
        bifurcation="tau",
        operating=0.3,
    )
    ev = lyacomp.compile(model)
    res = ev()
    assert res.status == "ok" and res.search.method == "operating"
    assert res.critical_value == pytest.approx(tau_c, rel=1e-12)
    assert res.omega == pytest.approx(omega, rel=1e-12)
    assert res.unstable_count == 0
    guess = ev(search="guess")
    assert guess.critical_value == pytest.approx(res.critical_value, rel=1e-12)
    assert guess.l1 == pytest.approx(res.l1, rel=1e-9)
    # Downward the equilibrium stays stable (down to tau = 0, where lambda = b - a < 0) until
    # the delay itself reaches zero: the branch of the delay model ends there.
    down = ev(tau=0.1)  # a guess below the operating value: the search goes down
    assert down.search.direction == "down" and down.status == "nonpositive_delay"


def test_real_root_crossing_is_reported_as_such():
    # x' = mu x - x(t - tau) - x^3 at x = 0: lambda = mu - e^{-lambda tau}. lambda = 0 is a
    # root at mu = 1; a root i omega would need omega = sin(omega tau), impossible for
    # tau <= 1 (|sin u| < u), so with tau = 0.5 no pair ever crosses; at mu = 0 the
    # equilibrium is stable (x' = -x(t - tau) is stable for tau < pi / 2, Hassard,
    # Kazarinoff & Wan 1981). det Delta(0) = 1 - mu is linear in mu, so the interpolated
    # loss value is exact to rounding (derivation above; common practice, no source).
    model = lyacomp.Model(
        name="delayed pitchfork",
        states={"x": 0.0},
        parameters={"mu": 2.0, "tau": 0.5},
        equations={"x": "mu*x - x(t - tau) - x**3"},
        bifurcation="mu",
    )
    ev = lyacomp.compile(model)
    res = ev(operating=0.0)
    assert res.status == "real_eigenvalue_crossing"
    assert math.isnan(res.l1) and res.criticality is None
    assert res.search.loss_value == pytest.approx(1.0, abs=1e-12)
    batch = ev.batch({"tau": [0.5, 0.9]}, operating=0.0)
    assert list(batch.status_labels()) == ["real_eigenvalue_crossing"] * 2
    assert batch.loss_value == pytest.approx([1.0, 1.0], abs=1e-12)


def test_real_crossing_at_a_fold_of_the_delay_branch():
    # x' = mu - x^2 - x(t - tau): equilibria mu = x^2 + x, a fold at x = -1/2, mu = -1/4.
    # There lambda = -2 x - e^{-lambda tau} has the root 0 (det Delta(0) = 2 x + 1), and with
    # tau = 0.5 no pair can cross (omega = sin(omega tau) has no root omega > 0 for tau <= 1,
    # as above; common practice, no source). Going down from mu = 2 (x = 1, stable) the
    # search must turn with the branch and stop at the fold.
    model = lyacomp.Model(
        name="delayed fold",
        states={"x": 1.0},
        parameters={"mu": 2.0, "tau": 0.5},
        equations={"x": "mu - x**2 - x(t - tau)"},
        bifurcation="mu",
        operating=2.0,
        direction="down",
    )
    res = lyacomp.compile(model)()
    assert res.status == "real_eigenvalue_crossing"
    assert res.search.direction == "down"
    assert res.search.loss_value == pytest.approx(-0.25, abs=1e-6)


def test_four_state_delay_ring_loses_stability_through_a_real_root():
    # x_i' = -x_i - mu tanh(x_{i-1}(t - tau)) (a ring of 4): Delta(lambda) = (lambda + 1) I +
    # mu e^{-lambda tau} S with S the cyclic shift (eigenvalues w, w^4 = 1), so the roots solve
    # lambda + 1 = -w mu e^{-lambda tau}. For mu < 1 none has Re lambda >= 0 (there
    # |lambda + 1| >= 1 > mu); at mu = 1 the mode w = -1 has the root 0, while the other
    # modes need |i nu + 1| = mu > 1 to reach the axis (common practice, no source).
    ring = {f"x{i}": f"-x{i} - mu*tanh(x{(i + 3) % 4}(t - tau))" for i in range(4)}
    model = lyacomp.Model(
        name="delay ring",
        states=dict.fromkeys(ring, 0.0),
        parameters={"mu": 2.0, "tau": 0.5},
        equations=ring,
        bifurcation="mu",
        operating=0.2,
    )
    res = lyacomp.compile(model)()
    assert res.status == "real_eigenvalue_crossing"
    assert res.search.loss_value == pytest.approx(1.0, abs=1e-6)


def test_burner_operating_search_agrees_with_the_guess_search(burner):
    b = np.array([0.1, 0.3, 0.5])
    guess = burner.batch({"b": b})
    searched = burner.batch({"b": b, "g": 0.9}, operating=0.2)
    assert list(searched.status_labels()) == list(guess.status_labels()) == ["ok"] * 3
    assert searched.critical_value == pytest.approx(guess.critical_value, rel=1e-12)
    assert searched.l1 == pytest.approx(guess.l1, rel=1e-9)
    assert np.all(searched.unstable_count == 0)


# --- per-sample guesses --------------------------------------------------------------------
def test_per_sample_guesses_agree_with_the_plain_batch(burner):
    # The same Hopf point from a nearby start: the starting point changes Newton's path,
    # not its root (common practice, no source).
    rng = np.random.default_rng(5)
    values = {"b": rng.uniform(0.1, 0.6, 40), "tau": rng.uniform(1.6, 2.0, 40)}
    plain = burner.batch(values)
    assert plain.ok.all()
    guess = {s: plain.equilibrium[:, i] + 1e-3 for i, s in enumerate(burner.states)}
    guess["g"] = plain.critical_value * 1.01
    guided = burner.batch(values, guess=guess)
    assert list(guided.status_labels()) == list(plain.status_labels())
    assert guided.critical_value == pytest.approx(plain.critical_value, rel=1e-11)
    assert guided.omega == pytest.approx(plain.omega, rel=1e-11)
    assert guided.l1 == pytest.approx(plain.l1, rel=1e-8)


def test_per_sample_guess_chooses_the_equilibrium():
    # x' = -r sin(x(t - 1)): equilibria x = k pi; at x = 0 and x = 2 pi the linearization is
    # Wright's, lambda = -r e^{-lambda}, with its Hopf point at r = pi / 2 (Hassard, Kazarinoff
    # & Wan 1981); each sample's guess picks its own equilibrium.
    model = lyacomp.Model(
        name="sine feedback",
        states={"x": 0.0},
        parameters={"r": 1.4},
        equations={"x": "-r*sin(x(t - 1))"},
        bifurcation="r",
    )
    ev = lyacomp.compile(model)
    batch = ev.batch({}, guess={"x": [0.3, 6.0, -6.0]})
    assert batch.ok.all()
    assert batch.equilibrium[:, 0] == pytest.approx([0.0, 2 * math.pi, -2 * math.pi], abs=1e-12)
    assert batch.critical_value == pytest.approx([math.pi / 2] * 3, rel=1e-12)
    assert batch.l1 == pytest.approx([batch.l1[0]] * 3, rel=1e-9)


# --- studies -------------------------------------------------------------------------------
def test_robustness_of_the_burner_runs_without_form(burner):
    result = run_robustness(burner, 400, seed=3, threads=1, progress=False)
    assert result.reliability is None and result.reliability_note == DELAY_FORM_NOTE
    assert result.off_branch == 0
    # Hard onsets come from large b (the burner file's comment: b hardens the onset).
    assert 0 < result.subcritical < result.first_loss


def test_nominal_branch_check_marks_the_second_wright_branch(wright):
    spec = parse_uncertainty(
        {"tau": {"distribution": "uniform", "low": 0.9, "high": 1.1}},
        wright.nominal,
        parameters=wright.parameters,
        bifurcation=wright.bifurcation,
    )
    tau = np.array([[0.95], [1.05], [0.98], [1.02]])
    direct = wright.batch({"tau": tau[:, 0]})
    # r0 = pi / (2 tau) on the first branch (the scaling t -> t / tau of Wright's equation;
    # Hassard, Kazarinoff & Wan 1981 for r tau = pi/2)
    assert direct.critical_value == pytest.approx(math.pi / (2 * tau[:, 0]), rel=1e-12)
    # The last two samples stand for solves that found the second Hopf point,
    # r = omega = 5 pi / (2 tau) (Hassard, Kazarinoff & Wan 1981): the continuation from the
    # nominal point (per-sample guesses, step by step) must arrive elsewhere.
    second = 2.5 * math.pi / tau[2:, 0]
    direct = replace(
        direct,
        critical_value=np.r_[direct.critical_value[:2], second],
        omega=np.r_[direct.omega[:2], second],
    )
    marked = off_nominal_branch(wright, spec, {}, tau, direct)
    assert list(marked) == [False, False, True, True]


def test_map_locates_the_l1_zero_curve_of_the_burner(burner):
    from lyacomp.studies.maps import Axis

    pmap = parameter_map(burner, Axis("b", 0.1, 0.8, 6), Axis("c3", 0.0, 0.05, 4), threads=1)
    assert len(pmap.curve) > 0
    assert pmap.traced_stops == [DELAY_TRACE_NOTE]
    for b, c3 in pmap.curve:  # each located point is a zero of the compiled l1
        assert burner(b=b, c3=c3).l1 == pytest.approx(0.0, abs=1e-10)
    switches = find_switches(burner, "b", 0.1, 0.9, n=9, threads=1)
    assert len(switches) == 1 and switches[0].before == "supercritical"
    assert burner(b=switches[0].value).l1 == pytest.approx(0.0, abs=1e-10)


def test_design_space_on_the_burner_uses_central_differences(burner):
    from lyacomp.studies.optimize import DesignSpace

    space = DesignSpace(burner, ["c3", "a"])
    assert space.gradients == "differences"
    l1 = space.output("l1")
    x = space.x0
    grad = l1.jac(x)
    # Against a Richardson-extrapolated difference of single evaluations (common
    # practice, no source): the two must agree to the stencil's truncation error.
    for i, name in enumerate(space.free):
        h = 1e-3 * max(abs(x[i]), 1.0)

        def f(value, name=name):
            return burner(**{name: value}).l1

        d1 = (f(x[i] + h) - f(x[i] - h)) / (2 * h)
        d2 = (f(x[i] + h / 2) - f(x[i] - h / 2)) / h
        assert grad[i] == pytest.approx((4 * d2 - d1) / 3, rel=1e-6)
    refused = r"^exact differentiation .* not available .* use gradients='differences'"
    with pytest.raises(StudyError, match=refused):
        DesignSpace(burner, ["c3"], gradients="exact")


# --- refusals ------------------------------------------------------------------------------
def test_refusals_name_what_is_missing(burner):
    def refused(what: str) -> str:
        return "^" + re.escape(
            f"{what} is not available for models with delays yet (only for ODE models)"
        )

    with pytest.raises(EvaluationError, match=refused(DELAY_L2)):
        burner(l2=True)
    with pytest.raises(EvaluationError, match=refused(DELAY_DEGENERATE)):
        burner.degenerate_point("b")
    with pytest.raises(EvaluationError, match=refused(DELAY_DERIVATIVES)):
        burner(derivatives=True)
    with pytest.raises(EvaluationError, match=refused(DELAY_DERIVATIVES)):
        burner.batch({"b": [0.2, 0.3]}, derivatives=True)


# --- command line --------------------------------------------------------------------------
def test_cli_operating_search_and_robustness_on_the_burner(burner, capsys):
    from lyacomp.cli import main

    assert main(["eval", str(BURNER), "--operating", "0.3", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    # the same keys as for ODE models, and the Hopf point of the guess-based search
    assert data["search"]["method"] == "operating" and data["search"]["direction"] == "up"
    assert data["critical_value"] == pytest.approx(burner().critical_value, rel=1e-12)
    assert data["search"]["loss_value"] == data["critical_value"]
    assert data["criticality"] == "supercritical" and data["unstable_count"] == 0
    assert main(["eval", str(BURNER), "--operating", "0.3"]) == 0
    assert "first loses stability at g_c = 0.63" in capsys.readouterr().out
    args = ["robustness", str(BURNER), "--samples", "200", "--seed", "4", "--threads", "1"]
    assert main(args) == 0
    assert f"no reliability index: {DELAY_FORM_NOTE}" in capsys.readouterr().out
    assert main([*args, "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["reliability_index"] is None and data["off_branch"] == 0
