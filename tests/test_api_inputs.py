"""Issue 7, items 9 and 12: what the Python API accepts as numbers, and user names that
equal the API's own keyword names."""

from __future__ import annotations

import decimal
import fractions
import pickle

import numpy as np
import pytest

import lyacomp
from lyacomp.errors import EvaluationError

KEYWORDS = ("self", "params", "threads", "derivatives", "l2", "tolerances", "guess", "states")
KEYWORDS += ("values", "guesses", "changes", "mapping")


@pytest.fixture(scope="module")
def normal_form():
    # Hopf normal form in Cartesian coordinates: r' = mu r + s r^3, theta' = w.
    model = lyacomp.Model(
        name="normal form inputs",
        states={"x": 0.1, "y": -0.1},
        parameters={"mu": 0.2, "s": -1.0, "w": 2.0},
        equations={"x": "mu*x - w*y + s*x*(x**2 + y**2)", "y": "w*x + mu*y + s*y*(x**2 + y**2)"},
        bifurcation="mu",
    )
    return lyacomp.compile(model)


# -- item 9: real numbers in, everything else refused with the parameter's name ----------


@pytest.mark.parametrize(
    "value",
    [
        -0.5,
        -1,
        True,
        np.float32(-0.5),
        np.float16(-0.5),
        np.int64(-1),
        np.uint8(1),
        np.bool_(True),
        np.array(-0.5),
        fractions.Fraction(-1, 2),
        decimal.Decimal("-0.5"),
    ],
)
def test_real_scalars_are_accepted_alike(normal_form, value):
    # l1 = 2 s / w for this form (docs/mathematics.md, planar check), w = 2 at nominal values.
    expected = float(value)
    assert normal_form({"s": value}).l1 == pytest.approx(expected, rel=1e-12)
    b = normal_form.batch({"s": value})
    assert b.l1[()] == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("dtype", [np.float32, np.float64, np.int32, np.uint16, np.bool_])
def test_real_arrays_are_accepted(normal_form, dtype):
    s = np.array([1, 0, 1], dtype=dtype)
    b = normal_form.batch({"s": s})
    np.testing.assert_allclose(b.l1[[0, 2]], [1.0, 1.0], rtol=1e-12)
    b = normal_form.batch({"s": [1, 2**70, 3.0]})  # a list numpy keeps as objects
    np.testing.assert_allclose(b.l1, [1.0, 2.0**70, 3.0], rtol=1e-12)


REFUSED = {
    "complex array": np.array([1 + 2j]),
    "complex scalar": 1j,
    "text": "0.6",
    "text array": np.array(["0.6"]),
    "bytes": b"0.6",
    "datetime64": np.array(["2020-01-01"], dtype="datetime64[D]"),
    "object array": np.array([1.0, 2.0], dtype=object),
    "masked array": np.ma.masked_array([1.0, 2.0], mask=[False, True]),
    "None in a list": [1.0, None],
    "huge int": 10**400,
    "huge int in a list": [1.0, 10**400],
    "huge numpy int": np.array([2**80]).astype(object),
}


@pytest.mark.parametrize("value", REFUSED.values(), ids=REFUSED.keys())
def test_batch_refuses_non_real_input_naming_the_parameter(normal_form, value):
    # Before the fix, complex/text/dates/masked were read silently (imaginary part and mask
    # dropped) and huge ints raised OverflowError.
    with pytest.raises(EvaluationError, match="parameter s"):
        normal_form.batch({"s": value})


SCALAR_REFUSED = {k: v for k, v in REFUSED.items() if "list" not in k}
SCALAR_REFUSED["1-d array"] = np.array([1.0])


@pytest.mark.parametrize("value", SCALAR_REFUSED.values(), ids=SCALAR_REFUSED.keys())
def test_scalar_call_refuses_the_same(normal_form, value):
    with pytest.raises(EvaluationError, match="parameter s"):
        normal_form({"s": value})


def test_huge_int_message_is_short(normal_form):
    with pytest.raises(EvaluationError) as info:
        normal_form.batch({"s": 10**100_000})
    assert len(str(info.value)) < 200 and "range of a double" in str(info.value)
    with pytest.raises(EvaluationError, match="range of a double"):
        normal_form(s=-(10**400))


def test_threads_take_numpy_integers_and_refuse_nonsense(normal_form):
    s = np.linspace(-1, 1, 50)
    one = normal_form.batch({"s": s}, threads=1)
    two = normal_form.batch({"s": s}, threads=np.int64(2))
    np.testing.assert_array_equal(one.l1, two.l1)
    for bad in (2**31, 2**70, 0, -1, True, np.bool_(True), 2.0, "2", np.array([2])):
        with pytest.raises(EvaluationError, match="threads"):
            normal_form.batch({"s": s}, threads=bad)


def test_guesses_and_tolerances_refuse_the_same(normal_form):
    with pytest.raises(EvaluationError, match="starting guess for x"):
        normal_form.with_guess(x="0.6")
    with pytest.raises(EvaluationError, match="starting guess for x"):
        normal_form.with_guess(x=10**400)
    with pytest.raises(EvaluationError, match="newton_tol"):
        normal_form.with_tolerances(newton_tol=10**400)
    with pytest.raises(EvaluationError, match="max_iter"):
        normal_form.with_tolerances(max_iter=2**40)
    with pytest.raises(EvaluationError, match="unknown tolerance"):
        normal_form.with_tolerances(s=1.0)
    with pytest.raises(EvaluationError, match="mapping"):
        normal_form.batch(np.zeros(3))


# -- item 12: user names equal to the API's keyword names --------------------------------


@pytest.fixture(scope="module")
def keyword_states():
    """The normal form in the states `self` and `params`; the other keywords are states
    that decay (they leave l1 and omega alone)."""
    others = [k for k in KEYWORDS if k not in ("self", "params")]
    r2 = "(self**2 + params**2)"
    equations = {
        "self": f"mu*self - w*params + s*self*{r2}",
        "params": f"w*self + mu*params + s*params*{r2}",
        **{k: f"-{k}" for k in others},
    }
    model = lyacomp.Model(
        name="keyword states",
        states={"self": 0.1, "params": -0.1, **{k: 0.0 for k in others}},
        parameters={"mu": 0.2, "s": -1.0, "w": 2.0},
        equations=equations,
        bifurcation="mu",
    )
    return lyacomp.compile(model)


@pytest.fixture(scope="module")
def keyword_parameters():
    """The normal form with r' = self r + params r^3 and theta' = the sum of the other
    keyword parameters, so a value routed to any of them shows in omega."""
    others = [k for k in KEYWORDS if k not in ("self", "params")]
    w = "(" + " + ".join(others) + ")"
    model = lyacomp.Model(
        name="keyword parameters",
        states={"x": 0.1, "y": -0.1},
        parameters={"self": 0.2, "params": -1.0, **{k: 0.5 for k in others}},
        equations={
            "x": f"self*x - {w}*y + params*x*(x**2 + y**2)",
            "y": f"{w}*x + self*y + params*y*(x**2 + y**2)",
        },
        bifurcation="self",
    )
    return lyacomp.compile(model)


def test_keyword_names_as_states(keyword_states):
    ev = keyword_states
    for name in KEYWORDS:
        # with_guess(self=...) raised TypeError (multiple values for 'self') before the fix
        moved = ev.with_guess(**{name: 0.25})
        assert moved.state_guess[name] == 0.25
        assert ev.with_guess({name: 0.25}).state_guess == moved.state_guess
        r = moved()
        # l1 = 2 s / w (docs/mathematics.md, planar check): -1 at nominal values
        assert r.ok and r.l1 == pytest.approx(-1.0, rel=1e-10)
        assert set(r.equilibrium) == set(KEYWORDS)
    relaxed = ev.with_guess(self=0.05).with_tolerances(degenerate_atol=1e-30)
    assert relaxed.state_guess["self"] == 0.05
    assert relaxed(s=1.0).l1 == pytest.approx(1.0, rel=1e-10)
    b = relaxed.batch({"s": np.array([-1.0, 1.0])}, threads=1)
    assert b.equilibrium.shape == (2, len(KEYWORDS))
    restored = pickle.loads(pickle.dumps(relaxed))
    assert restored.state_guess == relaxed.state_guess


def test_keyword_names_as_parameters(keyword_parameters):
    ev = keyword_parameters
    n_others = len(KEYWORDS) - 2
    base_w = 0.5 * n_others
    for name in KEYWORDS:
        if name == "self":  # the bifurcation parameter: a value is the starting guess
            assert ev(self=0.1).omega == pytest.approx(base_w, rel=1e-12)
            assert ev.batch({"self": [0.1]}).omega[0] == pytest.approx(base_w, rel=1e-12)
            continue
        if name == "params":  # the cubic coefficient: l1 = 2 params / w
            expected_l1, expected_w = 2 * 0.75 / base_w, base_w
        else:
            expected_l1, expected_w = -2 / (base_w + 1.0), base_w + 1.0
        value = 0.75 if name == "params" else 1.5
        for r in (ev(**{name: value}), ev({name: value})):
            assert r.l1 == pytest.approx(expected_l1, rel=1e-10)
            assert r.omega == pytest.approx(expected_w, rel=1e-12)
        b = ev.batch({name: np.array([value, value])}, threads=2)
        np.testing.assert_allclose(b.l1, expected_l1, rtol=1e-10)
        np.testing.assert_allclose(b.omega, expected_w, rtol=1e-12)
        if name != "threads":  # keyword `threads` is the option (documented)
            b = ev.batch(**{name: np.array([value])})
            assert b.omega[0] == pytest.approx(expected_w, rel=1e-12)
    # keyword `threads` stays the option; the message points to the mapping form
    with pytest.raises(EvaluationError, match=r"ev\.batch\(\{'threads'"):
        ev.batch(threads=np.array([1.5]))
    assert ev.with_tolerances(max_iter=80)({"threads": 1.5}).omega == pytest.approx(base_w + 1)


def test_keyword_names_through_the_maps(keyword_parameters):
    pytest.importorskip("scipy")
    from lyacomp.studies.maps import Axis, find_switches, parameter_map

    ev = keyword_parameters
    # l1 = 2 params / w changes sign at params = 0 (docs/mathematics.md, planar check)
    fixed = {"threads": 1.5, "tolerances": 0.25}
    switches = find_switches(ev, "params", -1.0, 1.0, n=8, fixed=fixed)
    assert len(switches) == 1 and switches[0].value == pytest.approx(0.0, abs=1e-12)
    w = 1.5 + 0.25 + 0.5 * (len(KEYWORDS) - 4)
    assert switches[0].omega == pytest.approx(w, rel=1e-12)
    fixed = {"tolerances": 0.25}
    pmap = parameter_map(ev, Axis("params", -1.0, 1.0, 6), Axis("threads", 1.0, 2.0, 3), fixed)
    expected = 2 * np.linspace(-1, 1, 6)[None, :] / (np.linspace(1, 2, 3)[:, None] + w - 1.5)
    np.testing.assert_allclose(pmap.l1, expected, rtol=1e-10)
