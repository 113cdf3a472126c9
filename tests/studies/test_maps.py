"""Parameter-plane maps and the 1-D switch finder against a closed-form l1 = 0 curve."""

from __future__ import annotations

import json

import numpy as np
import pytest

pytest.importorskip("scipy")
pytest.importorskip("matplotlib")

import lyacomp  # noqa: E402
from lyacomp.cli import main  # noqa: E402
from lyacomp.errors import StudyError  # noqa: E402
from lyacomp.status import Criticality, Status  # noqa: E402
from lyacomp.studies.maps import Axis, PointClass, classify, find_switches, parameter_map  # noqa: E402

# The model: a Hopf normal form with frequency w, onset at mu = m, and quadratic terms
# a x^2 (first equation) and b x^2 (second). With f = a x^2 + s x r^2, g = b x^2 + s y r^2,
# Guckenheimer & Holmes (1983) eq. 3.4.11 (equation number from memory), as written in
# docs/mathematics.md, gives 16 A = f_xxx + f_xyy + g_xxy + g_yyy + (1/w)(-f_xx g_xx)
# = 16 s - 4 a b / w and, with l1 = 2 A / w (docs/mathematics.md),
# l1 = 2 s / w - a b / (2 w^2). So l1 = 0 on the hyperbola a b = 4 s w: a curve through
# the (a, b) plane known in closed form.
TOML = """
name = "tilted_normal_form"
[states]
x = 0.0
y = 0.0
[parameters]
mu = 0.3
m = 0.3
w = 1.5
a = 1.0
b = 1.0
s = -0.47
[equations]
x = "(mu - m)*x - w*y + a*x**2 + s*x*(x**2 + y**2)"
y = "w*x + (mu - m)*y + b*x**2 + s*y*(x**2 + y**2)"
[bifurcation]
parameter = "mu"
"""
S, W, M = -0.47, 1.5, 0.3


def exact_l1(a, b):
    return 2 * S / W - a * b / (2 * W * W)


@pytest.fixture(scope="module")
def model_file(tmp_path_factory):
    path = tmp_path_factory.mktemp("maps") / "tilted.toml"
    path.write_text(TOML)
    return path


@pytest.fixture(scope="module")
def ev(model_file):
    return lyacomp.compile(lyacomp.load_model(model_file))


@pytest.fixture(scope="module")
def pmap(ev):
    return parameter_map(ev, Axis.parse("a:-3:3:41"), Axis.parse("b:-3:3:31"))


def test_classes_match_the_sign_of_the_exact_l1(pmap):
    aa, bb = np.meshgrid(pmap.x.values, pmap.y.values)
    exact = exact_l1(aa, bb)
    assert np.min(np.abs(exact)) > 1e-3  # no grid point sits on the curve itself
    assert np.all(pmap.status == Status.OK)
    expected = np.where(exact < 0, PointClass.SUPERCRITICAL, PointClass.SUBCRITICAL)
    assert np.array_equal(pmap.classes, expected)
    assert np.allclose(pmap.critical_value, M, atol=1e-10)
    assert np.allclose(pmap.omega, W, rtol=1e-10)


def test_zero_curve_within_one_grid_cell_of_the_exact_hyperbola(pmap):
    curve = pmap.curve
    aa, bb = np.meshgrid(pmap.x.values, pmap.y.values)
    exact = exact_l1(aa, bb)
    # every grid edge across which the exact l1 changes sign must carry one located point
    crossings = np.count_nonzero(exact[:, :-1] * exact[:, 1:] < 0) + np.count_nonzero(
        exact[:-1, :] * exact[1:, :] < 0
    )
    assert len(curve) == crossings > 20
    assert pmap.unresolved == 0
    a, b = curve[:, 0], curve[:, 1]
    # distance to the exact curve a b = 4 s w along either grid direction, in cells
    off_a = np.abs(a - 4 * S * W / b) / pmap.x.step
    off_b = np.abs(b - 4 * S * W / a) / pmap.y.step
    assert np.all(np.minimum(off_a, off_b) < 1.0)
    # root finding on the compiled l1 does far better than the grid
    assert np.max(np.abs(a * b - 4 * S * W)) < 1e-8


def test_switches_along_one_parameter(ev):
    # along a at b = 1: l1 = 0 at a = 4 s w / b = -2.82, subcritical below, supercritical above
    switches = find_switches(ev, "a", -5.0, 5.0, n=101, fixed={"b": 1.0})
    assert len(switches) == 1
    sw = switches[0]
    assert sw.value == pytest.approx(4 * S * W, abs=1e-9)
    assert (sw.before, sw.after) == ("subcritical", "supercritical")
    assert sw.critical_value == pytest.approx(M, abs=1e-10)
    assert sw.omega == pytest.approx(W, rel=1e-10)
    # along b at a = 0 the exact l1 = 2 s / w never vanishes
    assert find_switches(ev, "b", -5.0, 5.0, n=51, fixed={"a": 0.0}) == []


def test_classify_separates_failures_from_missing_hopf_points():
    status = np.array(
        [
            Status.OK,
            Status.OK,
            Status.OK,
            Status.NO_CONVERGENCE,
            Status.NEUTRAL_SADDLE,
            Status.NONFINITE_RESULT,
            Status.RESONANCE,
        ]
    )
    crit = np.array(
        [Criticality.SUPERCRITICAL, Criticality.SUBCRITICAL, Criticality.DEGENERATE, 0, 0, 0, 0]
    )
    assert classify(status, crit).tolist() == [
        PointClass.SUPERCRITICAL,
        PointClass.SUBCRITICAL,
        PointClass.DEGENERATE,
        PointClass.SOLVER_FAILURE,
        PointClass.NO_HOPF,
        PointClass.SOLVER_FAILURE,
        PointClass.NO_HOPF,
    ]


@pytest.mark.parametrize(
    "text", ["a:1:0:5", "a:0:1", "a:0:1:1", "a:zero:1:5", "a:0:1:2.5", "a:nan:1:5"]
)
def test_bad_axes_are_rejected(text):
    with pytest.raises(StudyError):
        Axis.parse(text)


def test_bad_map_requests_are_rejected(ev):
    with pytest.raises(StudyError, match="bifurcation parameter"):
        parameter_map(ev, Axis.parse("mu:0:1:3"), Axis.parse("b:0:1:3"))
    with pytest.raises(StudyError, match="unknown parameter"):
        parameter_map(ev, Axis.parse("nope:0:1:3"), Axis.parse("b:0:1:3"))
    with pytest.raises(StudyError, match="different"):
        parameter_map(ev, Axis.parse("a:0:1:3"), Axis.parse("a:0:1:3"))


def test_grid_data_round_trip(pmap, tmp_path):
    (npz,) = pmap.save(tmp_path / "grid.npz")
    with np.load(npz) as data:
        assert np.array_equal(data["classes"], pmap.classes)
        assert np.array_equal(data["zero_curve"], pmap.curve)
    grid_csv, curve_csv = pmap.save(tmp_path / "grid.csv")
    rows = grid_csv.read_text().splitlines()
    assert rows[0] == "a,b,class,status,l1,critical_value,omega"
    assert len(rows) == 1 + pmap.x.n * pmap.y.n
    assert len(curve_csv.read_text().splitlines()) == 1 + len(pmap.curve)
    with pytest.raises(StudyError):
        pmap.save(tmp_path / "grid.txt")


def test_map_command_writes_png_and_data(model_file, tmp_path, capsys):
    png, data = tmp_path / "m.png", tmp_path / "m.npz"
    code = main(
        [
            "map",
            str(model_file),
            "--x",
            "a:-3:3:13",
            "--y",
            "b:-3:3:11",
            "--out",
            str(png),
            "--data",
            str(data),
            "--json",
        ]
    )
    assert code == 0
    out = json.loads(capsys.readouterr().out)
    assert out["counts"]["subcritical (hard onset)"] > 0
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert data.exists()


def test_line_command_reports_the_switch(model_file, capsys):
    assert main(["map", str(model_file), "--line", "a:-5:5:51", "--set", "b=1"]) == 0
    out = capsys.readouterr().out
    assert "a = -2.82:" in out and "subcritical -> supercritical" in out


def test_map_command_errors_are_one_line(model_file, capsys):
    code = main(["map", str(model_file), "--x", "a:3:-3:13", "--y", "b:-3:3:11"])
    err = capsys.readouterr().err
    assert code == 2
    assert err.startswith("lyacomp: error:") and err.count("\n") == 1
