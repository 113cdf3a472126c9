"""Stage 6: scalar and batch calls, broadcasting, threads, pickling."""

from __future__ import annotations

import dataclasses
import json
import math
import pickle

import numpy as np
import pytest

import lyacomp
from lyacomp.errors import EvaluationError


@pytest.fixture(scope="module")
def normal_form():
    # Hopf normal form in Cartesian coordinates: r' = mu r + s r^3, theta' = w.
    model = lyacomp.Model(
        name="normal form",
        states={"x": 0.1, "y": -0.1},
        parameters={"mu": 0.2, "s": -1.0, "w": 2.0},
        equations={"x": "mu*x - w*y + s*x*(x**2 + y**2)", "y": "w*x + mu*y + s*y*(x**2 + y**2)"},
        bifurcation="mu",
    )
    return lyacomp.compile(model)


def test_scalar_call_and_dict(normal_form, documented_keys):
    r = normal_form(s=1.0, w=4.0)
    assert r.ok and r.status == "ok"
    # l1 = 2 s / w for this form: the planar formula (Guckenheimer & Holmes 1983, eq. 3.4.11,
    # number from memory) under the normalization of docs/mathematics.md.
    assert r.l1 == pytest.approx(0.5, rel=1e-13)
    d = r.to_dict()
    assert set(d) == documented_keys
    assert d["bifurcation_parameter"] == "mu" and d["cycle_side"] == "below"
    assert normal_form({"s": 1.0}, w=4.0).l1 == r.l1


def test_batch_broadcasts_and_keeps_shape(normal_form):
    s = np.linspace(-2, 2, 12).reshape(3, 4)
    w = np.array([1.0, 2.0, 3.0, 4.0])
    b = normal_form.batch({"s": s, "w": w})
    assert b.shape == (3, 4) and len(b) == 12
    assert b.equilibrium.shape == (3, 4, 2) and b.amplitude.shape == (3, 4, 2)
    expected = 2 * s / w
    ok = np.abs(s) > 0
    np.testing.assert_allclose(b.l1[ok], expected[ok], rtol=1e-12)
    assert (b.criticality[s < 0] == lyacomp.Criticality.SUPERCRITICAL).all()
    assert (b.criticality[s > 0] == lyacomp.Criticality.SUBCRITICAL).all()
    np.testing.assert_array_equal(b.subcritical, s > 0)
    np.testing.assert_array_equal(b.supercritical, s < 0)
    assert b.criticality_counts() == {"supercritical": 6, "subcritical": 6}


def test_batch_matches_scalar_calls_and_thread_counts(normal_form):
    rng = np.random.default_rng(7)
    s = rng.normal(0.0, 1.0, 5000)
    w = rng.uniform(0.5, 3.0, 5000)
    mu = rng.uniform(-0.5, 0.5, 5000)
    one = normal_form.batch({"s": s, "w": w, "mu": mu}, threads=1)
    two = normal_form.batch({"s": s, "w": w, "mu": mu}, threads=2)
    for field in ("l1", "omega", "critical_value", "transversality", "equilibrium"):
        np.testing.assert_array_equal(getattr(one, field), getattr(two, field))
    for i in (0, 17, 4999):
        r = normal_form(s=s[i], w=w[i], mu=mu[i])
        assert r.l1 == one.l1[i] and r.status == "ok"


@pytest.mark.parametrize("with_mu", [False, True], ids=["lanes", "scalar loop"])
def test_large_batch_same_on_one_and_two_threads(normal_form, with_mu):
    # From 16384 samples on, the threads first touch their own shares of the output pages
    # (one zero byte per page) before the samples: every output element must still be the
    # sample's own value, with either driver (mu given: no warm start, the scalar loop).
    rng = np.random.default_rng(5)
    count = 40_000
    values = {"s": rng.normal(0.0, 1.0, count), "w": rng.uniform(0.5, 3.0, count)}
    if with_mu:
        values["mu"] = rng.uniform(-0.5, 0.5, count)
    one = normal_form.batch(values, threads=1)
    two = normal_form.batch(values, threads=2)
    outputs = [
        f.name for f in dataclasses.fields(one) if isinstance(getattr(one, f.name), np.ndarray)
    ]
    assert len(outputs) == 12  # every array the batch returns, none left out
    for field in outputs:
        np.testing.assert_array_equal(getattr(one, field), getattr(two, field), err_msg=field)
    assert (two.status == 0).all() and (two.cycle_side != 0).all()
    # l1 = 2 a / w, 16 a = 16 s (Guckenheimer & Holmes 1983, eq. 3.4.11, from memory)
    np.testing.assert_allclose(two.l1, 2 * values["s"] / values["w"], rtol=1e-11)


def test_fast_and_checked_scalar_paths_agree(normal_form):
    # Python and numpy float64 keywords take the fast path; other numpy scalars, ints and
    # the mapping form take the checked one. The same numbers either way, and each result
    # keeps its own values after later calls.
    fast = normal_form(s=0.5, w=3.0)
    checked = [
        normal_form(s=np.float64(0.5), w=np.float64(3.0)),
        normal_form(s=np.float32(0.5), w=np.float32(3.0)),
        normal_form({"s": 0.5}, w=3),
        normal_form({"s": 0.5, "w": 3.0}),
    ]
    nominal = normal_form()
    for r in checked:
        assert r.l1 == fast.l1 and r.omega == fast.omega and r.equilibrium == fast.equilibrium
    # l1 = 2 a / w with 16 a = f_xxx + f_xyy + g_xxy + g_yyy = 16 s for this form
    # (Guckenheimer & Holmes 1983, eq. 3.4.11, number from memory); omega = w
    assert fast.l1 == pytest.approx(2 * 0.5 / 3.0, rel=1e-13) and fast.omega == 3.0
    assert nominal.l1 == pytest.approx(2 * -1.0 / 2.0, rel=1e-13) and nominal.omega == 2.0
    # the search starts from the nominal mu unless the call gives mu (then: the guesses)
    assert fast.search.method == "guess" and fast.search.start_value == 0.2
    moved = normal_form(mu=np.float64(-0.1), s=0.5, w=3.0)
    assert moved.search.start_value == -0.1 and type(moved.search.start_value) is float
    assert moved.l1 == pytest.approx(fast.l1, rel=1e-13)
    assert fast.to_dict()["search"]["start_value"] == 0.2
    # every check of the checked path still applies when the fast path gives up half-way
    for bad in (math.nan, math.inf, -math.inf):
        assert normal_form(s=0.5, w=bad).status == "nonfinite_input"
    with pytest.raises(EvaluationError, match=r"unknown parameter\(s\) \['nu'\]"):
        normal_form(s=0.5, w=3.0, nu=1.0)
    with pytest.raises(EvaluationError, match="parameter w must be a real number"):
        normal_form(s=0.5, w="3.0")
    with pytest.raises(EvaluationError, match="l2 must be True or False"):
        normal_form(s=0.5, l2=1.0)
    assert fast.l2 is None and normal_form(s=0.5, w=3.0, l2=True).l2 is not None
    # search= and operating= stay options (read from the keywords, never parameters)
    assert normal_form(s=0.5, w=3.0, search="guess").l1 == fast.l1
    with pytest.raises(EvaluationError, match="search must be one of"):
        normal_form(s=0.5, search="nearest")
    # mu < 0 is stable for this form; the operating search follows it to mu0 = 0
    followed = normal_form(s=0.5, w=3.0, operating=-0.3)
    assert followed.search.method == "operating" and followed.search.start_value == -0.3
    assert followed.critical_value == pytest.approx(0.0, abs=1e-12)
    assert followed.l1 == pytest.approx(fast.l1, rel=1e-12)


def test_scalar_calls_from_many_threads_match_serial_calls(normal_form):
    # Threads share one evaluator (a parameter list per call, a result struct per call, the
    # GIL released in C): concurrent calls give the serial results exactly.
    from concurrent.futures import ThreadPoolExecutor

    rng = np.random.default_rng(11)
    s = rng.normal(0.0, 1.0, 600)
    w = rng.uniform(0.5, 3.0, 600)
    mu = rng.uniform(-0.5, 0.5, 600)

    def call(i: int):
        if i % 4 == 0:  # fast path
            return normal_form(s=float(s[i]), w=float(w[i]))
        if i % 4 == 1:  # checked path (a mapping), the guesses as start
            return normal_form({"s": s[i], "w": w[i], "mu": mu[i]})
        if i % 4 == 2:  # fast path, the guesses as start
            return normal_form(s=s[i], w=w[i], mu=mu[i])
        return normal_form()

    serial = [call(i) for i in range(600)]
    with ThreadPoolExecutor(max_workers=8) as pool:
        concurrent = list(pool.map(call, range(600)))
    for i, (a, b) in enumerate(zip(serial, concurrent)):
        assert a.status == b.status == "ok"
        assert (a.l1, a.omega, a.critical_value, a.equilibrium) == (
            b.l1,
            b.omega,
            b.critical_value,
            b.equilibrium,
        )
        # l1 = 2 a / w, 16 a = 16 s (Guckenheimer & Holmes 1983, eq. 3.4.11, from memory)
        expected = 2 * (s[i] / w[i] if i % 4 != 3 else -1.0 / 2.0)
        assert b.l1 == pytest.approx(expected, rel=1e-11)
        assert b.search.start_value == (mu[i] if i % 4 in (1, 2) else 0.2)


def test_batch_empty_and_scalar_only(normal_form):
    b = normal_form.batch({"s": np.array([])})
    assert len(b) == 0 and b.l1.shape == (0,)
    b = normal_form.batch({})
    assert b.shape == () and b.status == 0


def test_bad_arguments_raise_clear_errors(normal_form):
    with pytest.raises(EvaluationError, match=r"unknown parameter\(s\) \['nu'\]"):
        normal_form(nu=1.0)
    with pytest.raises(EvaluationError, match="parameter s must be a real number"):
        normal_form(s="big")
    with pytest.raises(EvaluationError, match="do not broadcast"):
        normal_form.batch({"s": np.zeros(3), "w": np.ones(4)})
    with pytest.raises(EvaluationError, match="threads"):
        normal_form.batch({"s": 1.0}, threads=0)
    with pytest.raises(EvaluationError, match="parameter s must hold real numbers"):
        normal_form.batch({"s": ["a", "b"]})
    with pytest.raises(EvaluationError, match="degenerate_rtol"):
        normal_form.with_tolerances(degenerate_rtol=-1.0)


def test_nan_parameters_in_batch_do_not_disturb_others(normal_form):
    s = np.array([-1.0, np.nan, 1.0, np.inf])
    b = normal_form.batch({"s": s})
    assert b.status_labels().tolist() == ["ok", "nonfinite_input", "ok", "nonfinite_input"]
    assert b.l1[0] == pytest.approx(-1.0) and math.isnan(b.l1[1])


def test_degenerate_tolerance(normal_form):
    r = normal_form(s=1e-9)
    assert r.criticality == "subcritical"
    assert normal_form.with_tolerances(degenerate_atol=1e-6)(s=1e-9).criticality == "degenerate"
    assert normal_form(s=0.0).criticality == "degenerate"


def test_evaluator_pickles(normal_form):
    clone = pickle.loads(pickle.dumps(normal_form.with_tolerances(degenerate_atol=0.5)))
    assert clone(s=0.6).l1 == normal_form(s=0.6).l1
    assert clone.tolerances.degenerate_atol == 0.5
    assert clone(s=0.2).criticality == "degenerate"


def test_state_guesses_choose_among_equilibria(tmp_path, capsys):
    # x' = y, y' = x - x^3 + (mu - x) y: equilibria x = 0, +-1. At x = +-1, trace A = mu - x
    # and det A = 2 > 0: Hopf points at mu = +1 and mu = -1; at x = 0, det A = -1 < 0: the
    # trace condition gives a neutral saddle (common practice, no source).
    model = lyacomp.Model(
        name="two wells",
        states={"x": 0.9, "y": 0.0},
        parameters={"mu": 0.8},
        equations={"x": "y", "y": "x - x**3 + (mu - x)*y"},
        bifurcation="mu",
    )
    ev = lyacomp.compile(model)
    assert ev().critical_value == pytest.approx(1.0, abs=1e-12)
    left = ev.with_guess(x=-0.9)
    assert left.state_guess == {"x": -0.9, "y": 0.0}
    assert left(mu=-0.8).critical_value == pytest.approx(-1.0, abs=1e-12)
    assert ev.with_guess(x=0.0)(mu=0.1).status == "neutral_saddle"
    assert pickle.loads(pickle.dumps(left)).state_guess == left.state_guess
    with pytest.raises(EvaluationError, match="unknown state"):
        ev.with_guess(z=1.0)
    path = tmp_path / "wells.toml"
    path.write_text(
        'name = "two wells"\n[states]\nx = 0.9\ny = 0.0\n[parameters]\nmu = 0.8\n'
        '[equations]\nx = "y"\ny = "x - x**3 + (mu - x)*y"\n[bifurcation]\nparameter = "mu"\n'
    )
    from lyacomp.cli import main

    assert main(["eval", str(path), "--guess", "x=-0.9", "--set", "mu=-0.8", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["critical_value"] == pytest.approx(-1.0)


def _l1_in_worker(ev, s):
    return ev(s=s).l1


def test_evaluator_works_in_a_spawned_worker_process(normal_form):
    # Studies send evaluators to worker processes; a fresh interpreter reloads the build
    # from the cache (the test session's cache directory is inherited via the environment).
    import concurrent.futures
    import multiprocessing

    context = multiprocessing.get_context("spawn")
    with concurrent.futures.ProcessPoolExecutor(max_workers=1, mp_context=context) as pool:
        assert pool.submit(_l1_in_worker, normal_form, 0.5).result(timeout=300) == pytest.approx(
            normal_form(s=0.5).l1, rel=0, abs=0
        )
