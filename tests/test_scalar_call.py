"""Stage 6: the scalar call's fast path (parameters as C arguments, the result struct by
value) against the checked path, results that stay as they were, models without the entry."""

from __future__ import annotations

import threading

import numpy as np
import pytest

import lyacomp

# l1 = 2 s / w for r' = mu r + s r^3, theta' = w in Cartesian coordinates: the planar formula
# (Guckenheimer & Holmes 1983, eq. 3.4.11, from memory) under docs/mathematics.md's
# normalization; the same check as tests/test_runtime.py.
NORMAL_FORM = {
    "x": "mu*x - W*y + s*x*(x**2 + y**2)",
    "y": "W*x + mu*y + s*y*(x**2 + y**2)",
}


def _normal_form(extra: int = 0) -> lyacomp.Evaluator:
    """The normal form with w = w0 + c0 + ... + c{extra-1} (every c nominally 0)."""
    shift = "".join(f" + c{k}" for k in range(extra))
    equations = {k: v.replace("W", f"(w0{shift})") for k, v in NORMAL_FORM.items()}
    model = lyacomp.Model(
        name=f"normal form {extra}",
        states={"x": 0.1, "y": -0.1},
        parameters={"mu": 0.2, "s": -1.0, "w0": 2.0, **{f"c{k}": 0.0 for k in range(extra)}},
        equations=equations,
        bifurcation="mu",
    )
    return lyacomp.compile(model)


@pytest.fixture(scope="module")
def normal_form() -> lyacomp.Evaluator:
    return _normal_form()


def _fields(result: lyacomp.HopfResult) -> tuple:
    return (
        result.status,
        result.l1,
        result.omega,
        result.critical_value,
        result.transversality,
        result.equilibrium,
        result.amplitude,
        result.criticality,
        result.cycle_side,
        result.unstable_count,
        result.stable_side,
        result.iterations,
        result.search,
    )


def test_a_result_keeps_its_values_when_the_evaluator_is_called_again(normal_form):
    calls = [
        lambda: normal_form(s=0.5, w0=4.0),  # fast path, warm start
        lambda: normal_form(),  # the nominal row
        lambda: normal_form(s=0.25, w0=1.0, mu=-0.1),  # fast path, from the guesses
        lambda: normal_form({"s": 2.0, "w0": 8.0}),  # the checked path
    ]
    kept = [call() for call in calls]
    before = [_fields(r) for r in kept]
    for _ in range(3):
        normal_form(s=-3.0, w0=0.5)
        normal_form(s=float("nan"))
    assert [_fields(r) for r in kept] == before
    assert [r.l1 for r in kept] == pytest.approx([0.25, -1.0, 0.5, 0.5], rel=1e-12)
    assert kept[2].search.start_value == -0.1 and kept[0].search.start_value == 0.2


@pytest.mark.parametrize(
    "values",
    [
        {"s": 0.5, "w0": 4.0},
        {"w0": 4.0, "s": 0.5},  # any order of the keywords
        {"s": np.float64(0.5), "w0": 4.0},  # numpy float64 takes the fast path too
        {"s": 0.5, "w0": 4.0, "mu": 0.3},  # the bifurcation parameter's guess
        {"s": 1, "w0": np.float32(4.0)},  # the checked path converts other reals
        {"mu": 0.05},
    ],
)
def test_fast_and_checked_paths_agree(normal_form, values):
    fast = normal_form(**values)
    checked = normal_form(dict(values))  # a mapping always takes the checked path
    assert _fields(fast) == _fields(checked)
    assert type(fast.search.start_value) is float
    s, w = float(values.get("s", -1.0)), float(values.get("w0", 2.0))
    assert fast.l1 == pytest.approx(2 * s / w, rel=1e-12)


@pytest.mark.parametrize("extra", [0, 70], ids=["C entry", "more than 64 parameters"])
def test_calls_from_threads_while_results_are_held(extra):
    # Beyond 64 parameters the library has no argument-list entry (templates/api.h.j2) and
    # the call passes an array: both must give every thread its own answers.
    ev = _normal_form(extra)
    has_entry = hasattr(ev.lib, "lyc_evaluate_values")
    assert has_entry == (extra == 0)
    rng = np.random.default_rng(3)
    s = rng.uniform(-2.0, 2.0, (4, 150))
    w = rng.uniform(0.5, 3.0, (4, 150))
    held: list[list] = [[] for _ in range(4)]
    start = threading.Barrier(4)

    def work(t: int) -> None:
        start.wait()
        for i in range(150):
            shift = {"c1": w[t, i] - 2.0, "w0": 2.0} if extra else {"w0": w[t, i]}
            held[t].append(ev(s=s[t, i], **shift))

    threads = [threading.Thread(target=work, args=(t,)) for t in range(4)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    for t in range(4):
        got = np.array([r.l1 for r in held[t]])
        np.testing.assert_allclose(got, 2 * s[t] / w[t], rtol=1e-11)
        assert all(r.omega == pytest.approx(wi, rel=1e-12) for r, wi in zip(held[t], w[t]))


def test_errors_of_the_fast_path_are_those_of_the_checked_path(normal_form):
    bad = [
        {"nu": 1.0},
        {"s": 0.5, "nu": 1.0},
        {"s": "big"},
        {"s": 1 + 2j},
        {"s": np.complex128(1.0)},
        {"s": np.array([1.0])},
        {"s": None},
        {"s": 10**400},
    ]
    for values in bad:
        with pytest.raises(lyacomp.EvaluationError) as fast:
            normal_form(**values)
        with pytest.raises(lyacomp.EvaluationError) as checked:
            normal_form(dict(values))
        assert str(fast.value) == str(checked.value)


def test_one_parameter_model():
    # x' = mu x - y - x (x^2 + y^2), y' = x + mu y - y (x^2 + y^2): l1 = 2 s / w with s = -1,
    # w = 1 (the planar formula above); one parameter, so the getter returns a 1-tuple.
    model = lyacomp.Model(
        name="one parameter",
        states={"x": 0.1, "y": -0.1},
        parameters={"mu": 0.1},
        equations={
            "x": "mu*x - y - x*(x**2 + y**2)",
            "y": "x + mu*y - y*(x**2 + y**2)",
        },
        bifurcation="mu",
    )
    ev = lyacomp.compile(model)
    for result in (ev(), ev(mu=0.3), ev({"mu": 0.3})):
        assert result.l1 == pytest.approx(-2.0, rel=1e-12)
        assert result.critical_value == pytest.approx(0.0, abs=1e-12)
    assert ev(mu=0.3).search.start_value == 0.3
