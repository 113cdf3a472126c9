"""Issue 8: exact zeros of l1 on lines and grids, branch changes and the stability class."""

from __future__ import annotations

import numpy as np
import pytest

pytest.importorskip("scipy")

import lyacomp  # noqa: E402
from lyacomp.cli import main  # noqa: E402
from lyacomp.status import Criticality, Status  # noqa: E402
from lyacomp.studies.maps import (  # noqa: E402
    Axis,
    PointClass,
    branch_changes,
    classify,
    find_switches,
    parameter_map,
)

# Hopf normal form with cubic coefficient a/8 (and b only moving the critical value):
# x' = (mu - b) x - y + (a/8) x r^2, y' = x + (mu - b) y + (a/8) y r^2. Guckenheimer &
# Holmes (1983) eq. 3.4.11 (number from memory): 16 A = f_xxx + f_xyy + g_xxy + g_yyy
# = (a/8) (6 + 2 + 2 + 6) = 2 a (no quadratic terms), so A = a/8 and, with l1 = 2 A / omega
# in our normalization (docs/mathematics.md), l1 = a/4 (omega = 1).
TOML = """
name = "quarter_a"
[states]
x = 0.0
y = 0.0
[parameters]
mu = 0.0
a = 0.5
b = 0.0
[equations]
x = "(mu - b)*x - y + a/8*x*(x**2 + y**2)"
y = "x + (mu - b)*y + a/8*y*(x**2 + y**2)"
[bifurcation]
parameter = "mu"
"""


@pytest.fixture(scope="module")
def model_file(tmp_path_factory):
    path = tmp_path_factory.mktemp("zeros") / "quarter.toml"
    path.write_text(TOML)
    return path


@pytest.fixture(scope="module")
def ev(model_file):
    return lyacomp.compile(lyacomp.load_model(model_file))


def test_l1_is_a_quarter(ev):
    # closed form above (Guckenheimer & Holmes 1983, eq. 3.4.11, number from memory)
    assert ev(a=0.6).l1 == pytest.approx(0.15, rel=1e-9)


@pytest.mark.parametrize("n", [100, 101])
def test_line_finds_the_zero_on_or_between_grid_points(ev, n):
    switches = find_switches(ev, "a", -1.0, 1.0, n)
    assert len(switches) == 1
    (sw,) = switches
    assert sw.resolved and abs(sw.value) < 1e-12
    assert (sw.before, sw.after) == ("supercritical", "subcritical")


def test_line_command_with_101_points(model_file, capsys):
    assert main(["map", str(model_file), "--line", "a:-1:1:101"]) == 0
    out = capsys.readouterr().out
    assert "none found" not in out
    assert "a = 0: supercritical -> subcritical" in out


def test_grid_column_at_zero_is_on_the_curve(ev):
    # x = a from -1 to 1 in 11 points: the column a = 0 is exactly degenerate
    pmap = parameter_map(ev, Axis("a", -1.0, 1.0, 11), Axis("b", -0.5, 0.5, 5))
    assert np.all(pmap.classes[:, 5] == PointClass.DEGENERATE)
    assert len(pmap.curve) == 5
    np.testing.assert_allclose(pmap.curve[:, 0], 0.0, atol=1e-12)
    np.testing.assert_allclose(np.sort(pmap.curve[:, 1]), np.linspace(-0.5, 0.5, 5))
    assert not np.any(pmap.classes == PointClass.BRANCH_CHANGE)


def test_branch_changes_marks_a_jump_not_a_smooth_slope():
    # common practice, no source: a smooth field has no jumps; a step of 10 against
    # neighbour steps of 0.1 marks the two columns on either side of the step
    y, x = np.mgrid[0:6, 0:8] * 0.1
    smooth = 1.0 + x + 0.5 * y
    assert not branch_changes(smooth).any()
    stepped = smooth + np.where(x > 0.35, 10.0, 0.0)
    marked = branch_changes(stepped)
    assert marked[:, 3].all() and marked[:, 4].all()
    assert marked.sum() == 12
    stepped[2, 1] = np.nan  # failed points take no part
    assert not branch_changes(stepped)[2, 1]


def test_classify_sets_unstable_equilibria_apart():
    status = np.array([Status.OK, Status.OK, Status.OK, Status.NO_CONVERGENCE])
    crit = np.array([Criticality.SUPERCRITICAL, Criticality.SUBCRITICAL, 1, 0])
    first_loss = np.array([True, False, True, False])
    classes = classify(status, crit, first_loss)
    assert list(classes) == [
        PointClass.SUPERCRITICAL,
        PointClass.UNSTABLE_EQUILIBRIUM,
        PointClass.SUPERCRITICAL,
        PointClass.SOLVER_FAILURE,
    ]


# Two Hopf points on the equilibrium x = y = 0: trace = 2 (mu^2 - c) vanishes at
# mu = +-sqrt(c) (common practice, no source). Started from the nominal mu = 1 every row
# finds the upper one; the row-by-row re-solve must keep it (the first pass alone does not
# jump on this model either, so this checks the warm start keeps correct values, exact
# against +-sqrt(c); the jump marking is checked on synthetic grids above).
TWO_BRANCHES = """
name = "two_onsets"
[states]
x = 0.0
y = 0.0
[parameters]
mu = 1.0
c = 1.0
s = -1.0
[equations]
x = "(mu**2 - c)*x - y + s*x*(x**2 + y**2)"
y = "x + (mu**2 - c)*y + s*y*(x**2 + y**2)"
[bifurcation]
parameter = "mu"
"""


def test_map_follows_one_branch(tmp_path):
    path = tmp_path / "two.toml"
    path.write_text(TWO_BRANCHES)
    ev = lyacomp.compile(lyacomp.load_model(path))
    pmap = parameter_map(ev, Axis("c", 0.5, 2.0, 7), Axis("s", -1.0, -0.5, 4))
    ok = pmap.status == Status.OK
    assert ok.all()
    # one branch: the sign of the critical value is the same everywhere
    signs = np.sign(pmap.critical_value)
    assert np.all(signs == signs[0, 0])
    np.testing.assert_allclose(
        np.abs(pmap.critical_value),
        np.sqrt(pmap.x.values)[None, :] + 0 * pmap.critical_value,
        rtol=1e-9,
    )


def test_map_colours_unstable_equilibria_apart(tmp_path):
    # z' = 0.5 z + x^2 adds the eigenvalue +0.5 on both sides of onset (issue 8)
    path = tmp_path / "unstable.toml"
    path.write_text(
        TOML.replace("y = 0.0\n[parameters]", "y = 0.0\nz = 0.0\n[parameters]").replace(
            "[bifurcation]", 'z = "0.5*z + x**2"\n[bifurcation]'
        )
    )
    ev = lyacomp.compile(lyacomp.load_model(path))
    pmap = parameter_map(ev, Axis("a", 0.1, 1.0, 4), Axis("b", -0.5, 0.5, 3))
    assert np.all(pmap.classes == PointClass.UNSTABLE_EQUILIBRIUM)


def test_branch_changes_ignore_a_steep_smooth_edge():
    # common practice, no source: a critical value that grows steeply but smoothly towards
    # one edge of the plane (here like 1/y, differences growing by a bounded ratio per
    # cell) is one branch; a median-based test marked such edges in the bundled demo map
    y, x = np.mgrid[1:32, 0:20].astype(float)
    steep = 1.0 + 0.02 * x + 4.0 / y**2
    assert not branch_changes(steep).any()
    jumped = steep.copy()
    jumped[10:, :] += 3.0
    marked = branch_changes(jumped)
    assert marked[9].all() and marked[10].all() and marked.sum() == 40


def test_map_follows_the_equilibrium_of_its_neighbours(two_wells):
    # The model and its exact critical value mu0 = c x0: the fixture's docstring. Started
    # from the model's guess alone (the critical value of the row above as the only
    # guess), Newton lost the branch x0 = -a for large a: 30 of 60 cells "no Hopf point"
    # and a column on x0 = +a. Started from a neighbour's equilibrium and critical value,
    # every cell is on x0 = -a.
    ev = two_wells
    pmap = parameter_map(ev, Axis("a", 0.3, 4.0, 12), Axis("c", 0.5, 1.5, 5), locate_curve=False)
    assert (pmap.status == Status.OK).all(), pmap.counts()
    a, c = np.meshgrid(pmap.x.values, pmap.y.values)
    np.testing.assert_allclose(pmap.critical_value, -c * a, rtol=1e-9)
    assert not np.any(pmap.classes == PointClass.BRANCH_CHANGE)
