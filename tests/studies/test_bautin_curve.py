"""Tracing l1 = 0 by the predictor-corrector, against curves known in closed form."""

from __future__ import annotations

import json

import numpy as np
import pytest

pytest.importorskip("scipy")
pytest.importorskip("matplotlib")

import lyacomp  # noqa: E402
from lyacomp.studies.bautin_curve import trace_zero_curve  # noqa: E402
from lyacomp.studies.maps import Axis, parameter_map  # noqa: E402

# The tilted normal form of tests/studies/test_maps.py: Guckenheimer & Holmes (1983)
# eq. 3.4.11 (equation number from memory), with docs/mathematics.md's l1 = 2 a / omega, gives
# l1 = 2 s / w - a b / (2 w^2): l1 = 0 on the hyperbola a b = 4 s w (two branches).
S, W = -0.47, 1.5
TILTED = lyacomp.Model(
    name="tilted_normal_form_trace",
    states={"x": 0.0, "y": 0.0},
    parameters={"mu": 0.3, "m": 0.3, "w": W, "a": 1.0, "b": 1.0, "s": S},
    equations={
        "x": "(mu - m)*x - w*y + a*x**2 + s*x*(x**2 + y**2)",
        "y": "w*x + (mu - m)*y + b*x**2 + s*y*(x**2 + y**2)",
    },
    bifurcation="mu",
)


@pytest.fixture(scope="module")
def tilted():
    return lyacomp.compile(TILTED)


def test_map_traces_both_branches_of_the_hyperbola(tilted, tmp_path):
    pmap = parameter_map(tilted, Axis.parse("a:-3:3:21"), Axis.parse("b:-3:3:21"))
    traced = pmap.traced
    gaps = np.isnan(traced[:, 0])
    assert gaps.sum() == 1  # two branches, one break between them
    pts = traced[~gaps]
    assert len(pts) > 40
    # every traced point on the exact curve (closed form above)
    np.testing.assert_allclose(pts[:, 0] * pts[:, 1], 4 * S * W, rtol=1e-9)
    assert pmap.traced_stops == ["edge of the plane"] * 4
    # both ends of each branch lie on the edge of the plane
    for branch in np.split(traced, np.flatnonzero(gaps)):
        branch = branch[~np.isnan(branch[:, 0])]
        for end in (branch[0], branch[-1]):
            assert np.isclose(np.max(np.abs(end)), 3.0, rtol=1e-12)
    # written with the map's data: npz key and the JSON summary
    (npz,) = pmap.save(tmp_path / "grid.npz")
    with np.load(npz) as data:
        np.testing.assert_array_equal(data["traced_curve"], traced)
    summary = json.loads(json.dumps(pmap.summary()))
    assert len(summary["traced_curve"]) == len(traced)


def test_trace_stops_where_the_hopf_point_disappears():
    # x' = mu x - y + ..., y' = c x + mu y + ...: trace 0 and det = c, so a Hopf point
    # needs c > 0 (docs/mathematics.md: for n = 2, trace A = 0 and det A > 0); for c < 0 the pair is
    # real (a neutral saddle). The curve l1 = 0 in the (k, c) plane runs into c = 0.
    model = lyacomp.Model(
        name="hopf_ends_at_c0",
        states={"x": 0.0, "y": 0.0},
        parameters={"mu": 0.01, "A": 0.3, "k": 0.3, "c": 0.5},
        equations={
            "x": "mu*x - y + x**2 + A*x**3 - x**5",
            "y": "c*x + mu*y + k*x**2 - y**5",
        },
        bifurcation="mu",
    )
    ev = lyacomp.compile(model)
    curve = trace_zero_curve(ev, "k", (-2.0, 2.0), "c", (-0.5, 1.0), (0.3, 0.5), step=0.02)
    assert any("lost" in stop for stop in curve.stops), curve.stops
    c_values = curve.points[:, 1]
    assert np.all(c_values > 0)
    assert np.min(c_values) < 0.05  # it got close to c = 0 before stopping
    for k, c in curve.points[::10]:
        r = ev(k=k, c=c)
        assert r.ok and abs(r.l1) <= 1e-8
