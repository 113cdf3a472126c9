"""Batch outputs written into caller-kept buffers (``ev.batch(..., out=ev.batch_buffers(n))``):
the same bits as fresh arrays, on any thread count and chunking, and clear refusals."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

import lyacomp
from lyacomp import BatchBuffers, EvaluationError


def _model(w: str = "w", **extra) -> lyacomp.Model:
    # Hopf normal form in Cartesian coordinates: r' = mu r + s r^3, theta' = w.
    return lyacomp.Model(
        name="normal form",
        states={"x": 0.1, "y": -0.1},
        parameters={"mu": 0.2, "s": -1.0, "w": 2.0, **extra},
        equations={
            "x": f"mu*x - {w}*y + s*x*(x**2 + y**2)",
            "y": f"{w}*x + mu*y + s*y*(x**2 + y**2)",
        },
        bifurcation="mu",
    )


@pytest.fixture(scope="module")
def normal_form() -> lyacomp.Evaluator:
    return lyacomp.compile(_model())


@pytest.fixture(scope="module")
def brusselator() -> lyacomp.Evaluator:
    # The Brusselator from its stable operating value B = 1 (the operating-point search).
    return lyacomp.compile(
        lyacomp.Model(
            name="brusselator",
            states={"x": 1.5, "y": 1.0 / 1.5},
            parameters={"A": 1.5, "B": 3.0},
            equations={"x": "A - (B + 1)*x + x**2*y", "y": "B*x - x**2*y"},
            bifurcation="B",
            operating=1.0,
        )
    )


def _inputs(count: int, seed: int = 3, with_mu: bool = False) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(seed)
    values = {"s": rng.normal(0.0, 1.0, count), "w": rng.uniform(0.5, 3.0, count)}
    if with_mu:
        values["mu"] = rng.uniform(-0.5, 0.5, count)
    return values


def _array_fields(result: lyacomp.BatchResult) -> list[str]:
    return [
        f.name
        for f in dataclasses.fields(result)
        if isinstance(getattr(result, f.name), np.ndarray)
    ]


def _assert_same(fresh: lyacomp.BatchResult, kept: lyacomp.BatchResult) -> None:
    """Every array of the two results equal bit for bit, with the same dtype and shape."""
    fields = _array_fields(fresh)
    assert fields == _array_fields(kept)
    for name in fields:
        a, b = getattr(fresh, name), getattr(kept, name)
        assert (a.dtype, a.shape) == (b.dtype, b.shape), name
        np.testing.assert_array_equal(a, b, err_msg=name)
    assert (fresh.derivatives is None) == (kept.derivatives is None)
    for key, value in (fresh.derivatives or {}).items():
        np.testing.assert_array_equal(value, kept.derivatives[key], err_msg=key)


@pytest.mark.parametrize("threads", [1, 2])
@pytest.mark.parametrize("with_mu", [False, True], ids=["lanes", "scalar loop"])
def test_out_equals_fresh_arrays(normal_form, threads, with_mu):
    # 40000 samples: from 16384 on the two threads first touch their shares of the pages.
    values = _inputs(40_000, with_mu=with_mu)
    buffers = normal_form.batch_buffers(50_000)
    fresh = normal_form.batch(values, threads=threads)
    kept = normal_form.batch(values, threads=threads, out=buffers)
    assert len(_array_fields(fresh)) == 12  # every output of the guess-based search
    _assert_same(fresh, kept)
    assert np.shares_memory(kept.l1, buffers.outputs(1)["l1"])  # a view, as documented
    # l1 = 2 s / w (Guckenheimer & Holmes 1983, eq. 3.4.11, from memory)
    np.testing.assert_allclose(kept.l1, 2 * values["s"] / values["w"], rtol=1e-11)


@pytest.mark.parametrize("threads", [1, 2])
def test_out_with_derivatives_and_per_sample_guesses(normal_form, threads):
    values = _inputs(20_000, seed=4)
    buffers = normal_form.batch_buffers(20_000, derivatives=True)
    fresh = normal_form.batch(values, threads=threads, derivatives=True)
    kept = normal_form.batch(values, threads=threads, derivatives=True, out=buffers)
    _assert_same(fresh, kept)
    # dl1/ds = 2 / w from l1 = 2 s / w (Guckenheimer & Holmes 1983, eq. 3.4.11, from memory)
    s_column = kept.derivative_parameters.index("s")
    np.testing.assert_allclose(kept.derivatives["l1"][:, s_column], 2 / values["w"], rtol=1e-9)
    # the same buffers serve a call without derivatives, and the per-sample-guess driver
    guess = {"x": np.full(20_000, 1e-3), "mu": np.full(20_000, 0.1)}
    fresh = normal_form.batch(values, guess=guess, threads=threads)
    _assert_same(fresh, normal_form.batch(values, guess=guess, threads=threads, out=buffers))
    _assert_same(
        normal_form.batch_derivatives(values, threads=threads),
        normal_form.batch_derivatives(values, threads=threads, out=buffers),
    )


def test_out_with_the_operating_search(brusselator):
    # B_H = 1 + A^2 (Prigogine & Lefever 1968; common practice, no source)
    a = np.linspace(1.2, 1.8, 64).reshape(8, 8)
    buffers = brusselator.batch_buffers(100)
    fresh = brusselator.batch(A=a)
    kept = brusselator.batch(A=a, out=buffers)
    assert kept.search == "operating" and kept.loss_value.shape == (8, 8)
    _assert_same(fresh, kept)
    np.testing.assert_allclose(kept.critical_value, 1.0 + a**2, rtol=1e-12)


def test_chunks_into_one_set_of_buffers_equal_one_call(normal_form):
    # Chunks of uneven sizes (the last one short) into buffers larger than each chunk, and a
    # two-dimensional batch: the copies put together equal one call with fresh arrays.
    values = _inputs(30_000, seed=5, with_mu=True)
    whole = normal_form.batch(values, threads=2)
    buffers = normal_form.batch_buffers(12_000)
    parts = []
    for start in range(0, 30_000, 11_000):
        chunk = {k: v[start : start + 11_000] for k, v in values.items()}
        kept = normal_form.batch(chunk, threads=1 + start % 2, out=buffers)
        parts.append({k: np.array(getattr(kept, k)) for k in _array_fields(kept)})
    for name in _array_fields(whole):
        joined = np.concatenate([p[name] for p in parts])
        np.testing.assert_array_equal(getattr(whole, name), joined, err_msg=name)
    grid = {k: v[:12_000].reshape(100, 120) for k, v in values.items()}
    kept = normal_form.batch(grid, out=buffers)
    assert kept.shape == (100, 120) and kept.equilibrium.shape == (100, 120, 2)
    _assert_same(normal_form.batch(grid), kept)


def test_a_later_call_overwrites_the_views(normal_form):
    buffers = normal_form.batch_buffers(4)
    first = normal_form.batch(s=np.array([1.0, 2.0]), w=4.0, out=buffers)
    kept = np.array(first.l1)
    normal_form.batch(s=np.array([-1.0, -2.0]), w=4.0, out=buffers)
    np.testing.assert_array_equal(first.l1, -kept)  # l1 = 2 s / w: the views moved along
    empty = normal_form.batch(s=np.array([]), out=buffers)
    assert empty.shape == (0,) and empty.equilibrium.shape == (0, 2)


def test_bad_out_is_refused(normal_form):
    values = _inputs(100)
    buffers = normal_form.batch_buffers(100)
    with pytest.raises(EvaluationError, match=r"out= takes the buffers of ev.batch_buffers"):
        normal_form.batch(values, out=np.empty(100))
    with pytest.raises(EvaluationError, match=r"hold 50 samples, this batch has 100"):
        normal_form.batch(values, out=normal_form.batch_buffers(50))
    with pytest.raises(EvaluationError, match=r"batch_buffers\(capacity, derivatives=True\)"):
        normal_form.batch(values, derivatives=True, out=buffers)
    result = normal_form.batch(values, out=buffers)
    with pytest.raises(EvaluationError, match="shares memory with the out= buffers"):
        normal_form.batch(s=result.l1, out=buffers)
    with pytest.raises(EvaluationError, match="shares memory with the out= buffers"):
        normal_form.batch(values, guess={"x": result.equilibrium[:, 0]}, out=buffers)
    foreign = np.asarray(memoryview(result.l1))  # the memory reached through another object
    with pytest.raises(EvaluationError, match="shares memory with the out= buffers"):
        normal_form.batch(s=foreign, out=buffers)
    normal_form.batch(s=np.array(result.l1), out=buffers)  # a copy is fine
    with buffers.claimed(), pytest.raises(EvaluationError, match="in use by another batch call"):
        normal_form.batch(values, out=buffers)
    for capacity, message in (
        (0, "at least 1 sample"),
        (2.5, "positive integer"),
        (True, "positive integer"),
    ):
        with pytest.raises(EvaluationError, match=message):
            normal_form.batch_buffers(capacity)
    with pytest.raises(EvaluationError, match="derivatives must be True or False"):
        normal_form.batch_buffers(10, derivatives="yes")


def test_buffers_of_another_model_are_refused(normal_form):
    three = lyacomp.compile(
        lyacomp.Model(
            name="three states",
            states={"x": 0.1, "y": -0.1, "z": 0.0},
            parameters={"mu": 0.2, "s": -1.0, "w": 2.0},
            equations={
                "x": "mu*x - w*y + s*x*(x**2 + y**2)",
                "y": "w*x + mu*y + s*y*(x**2 + y**2)",
                "z": "-z",
            },
            bifurcation="mu",
        )
    )
    with pytest.raises(EvaluationError, match=r"made for states \['x', 'y'\]"):
        three.batch(s=np.ones(3), out=normal_form.batch_buffers(3))
    # other tolerances of the same model: the same layout, the buffers fit
    loose = normal_form.with_tolerances(newton_tol=1e-10)
    assert isinstance(loose.batch(s=np.ones(3), out=normal_form.batch_buffers(3)).l1, np.ndarray)


def test_a_parameter_named_out_keeps_its_keyword():
    ev = lyacomp.compile(_model(w="w*out", out=1.0))
    values = np.array([0.5, 2.0])
    by_keyword = ev.batch(s=1.0, out=values)  # the parameter, as before out= existed
    by_mapping = ev.batch({"s": 1.0, "out": values})
    np.testing.assert_array_equal(by_keyword.l1, by_mapping.l1)
    # l1 = 2 s / w with w = 2 out (Guckenheimer & Holmes 1983, eq. 3.4.11, from memory)
    np.testing.assert_allclose(by_keyword.l1, 1.0 / values, rtol=1e-12)
    buffers = ev.batch_buffers(2)
    assert isinstance(buffers, BatchBuffers)
    kept = ev.batch({"s": 1.0, "out": values}, out=buffers)
    np.testing.assert_array_equal(kept.l1, by_mapping.l1)
