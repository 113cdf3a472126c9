"""The extrapolation of simulated cycle amplitudes to onset: the fit on exact points of
Bautin's normal form, then on simulations of a planar normal form with a known quintic
term, of Wright's equation and of the bundled lagged burner."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

pytest.importorskip("scipy")

import lyacomp  # noqa: E402
from lyacomp.studies.verify import check_by_simulation  # noqa: E402
from lyacomp.studies.verify_onset import MAX_CORRECTION, extrapolate_to_onset  # noqa: E402

BURNER = Path(__file__).resolve().parents[2] / "examples" / "lagged_burner.toml"


def bautin_radius_squared(beta1: float, l1: float, l2: float) -> float:
    """The small cycle of r' = r (beta1 + l1 r^2 + l2 r^4): the root of
    l2 s^2 + l1 s + beta1 = 0 that tends to -beta1 / l1 (Kuznetsov, Elements of Applied
    Bifurcation Theory, 3rd ed., 2004, ch. 8)."""
    return 2 * beta1 / (-l1 + math.sqrt(l1 * l1 - 4 * l2 * beta1))


def test_fit_on_exact_bautin_cycles_recovers_onset_slope_and_fold():
    # On the truncated Bautin form beta1 / r^2 = -l1 - l2 r^2 exactly (Kuznetsov 2004,
    # ch. 8), so for states of amplitude c_j r the fit is exact: K_j = c_j / sqrt(-l1),
    # slope -l2 / c_j^4, and the fold of cycles at beta1 = l1^2 / (4 l2) (same source).
    l1, l2, scale = -0.7, 0.9, np.array([1.0, 0.3])
    offsets = (0.04, 0.02)
    amplitudes = tuple(scale * math.sqrt(bautin_radius_squared(b, l1, l2)) for b in offsets)
    periods = (6.4 + 0.5 * amplitudes[0][0] ** 2, 6.4 + 0.5 * amplitudes[1][0] ** 2)
    fit = extrapolate_to_onset(offsets, amplitudes, periods, main=0)
    assert fit.coefficient == pytest.approx(scale / math.sqrt(-l1), rel=1e-12)
    assert fit.slope == pytest.approx(-l2 / scale**4, rel=1e-9)
    assert fit.period == pytest.approx(6.4, rel=1e-12)
    assert fit.fold_offset == pytest.approx(l1 * l1 / (4 * l2), rel=1e-9)
    assert fit.valid
    # the raw coefficients carry the O(offset) bias that the fit removes
    assert fit.raw[0][0] / fit.coefficient[0] - 1 > 0.04
    # the naive alternative (A^2 / offset linear in A^2) is off by 0.17%: this check tells
    # the exact reciprocal form from it
    s = [a[0] ** 2 for a in amplitudes]
    ratio = [a / o for a, o in zip(s, offsets, strict=True)]
    naive = ratio[1] - (ratio[0] - ratio[1]) / (s[0] - s[1]) * s[1]
    assert abs(math.sqrt(naive) / fit.coefficient[0] - 1) > 1e-3


def test_fit_refuses_offsets_too_large_or_amplitudes_that_do_not_shrink():
    # beta1 at 0.96 of the fold (Kuznetsov 2004, ch. 8): the raw K^2 is far off
    l1, l2 = -1.0, 3.0
    fold = l1 * l1 / (4 * l2)
    offsets = (0.96 * fold, 0.48 * fold)
    amplitudes = tuple(np.array([math.sqrt(bautin_radius_squared(b, l1, l2))]) for b in offsets)
    fit = extrapolate_to_onset(offsets, amplitudes, (1.0, 1.0), main=0)
    assert fit.correction > MAX_CORRECTION and not fit.valid
    assert "too large" in fit.reason
    # equal amplitudes at both offsets: no sqrt(offset) law, no onset value
    flat = extrapolate_to_onset((0.02, 0.01), (np.ones(1), np.ones(1)), (1.0, 1.0), main=0)
    assert not flat.valid and "sqrt(offset)" in flat.reason


def planar_bautin(s: float, t: float) -> lyacomp.Model:
    """x + i y = u with u' = (m - mu + i w) u + s u |u|^2 + t u |u|^4: in polar form
    r' = r (m - mu + s r^2 + t r^4), theta' = w (Kuznetsov 2004, ch. 8). The cycle lives
    below m (negative offsets: the sign handling is checked too)."""
    r2 = "(x**2 + y**2)"
    return lyacomp.Model(
        name="planar_bautin",
        states={"x": 0.0, "y": 0.0},
        parameters={"mu": 0.2, "m": 0.2, "w": 1.0, "s": s, "t": t},
        equations={
            "x": f"(m - mu)*x - w*y + x*(s*{r2} + t*{r2}**2)",
            "y": f"w*x + (m - mu)*y + y*(s*{r2} + t*{r2}**2)",
        },
        bifurcation="mu",
    )


def test_planar_normal_form_with_quintic_term_extrapolates_to_the_cubic_relation():
    s, t = -1.0, 3.0
    check = check_by_simulation(planar_bautin(s, t), offset=0.04)
    # x = r cos(w t) on the cycle r^2 = -beta1 / s + O(beta1^2): K_x = 1 / sqrt(-s), the
    # relation -Re(c1) ... / l1 with l1 = 2 s / w here (Kuznetsov 2004, ch. 3 and 8)
    assert check.predicted_coefficient == pytest.approx([1 / math.sqrt(-s)] * 2, rel=1e-9)
    assert check.closer is not None and check.onset is not None and check.onset.valid
    # the exact raw values at offset 0.04 and 0.02 (same source): 7.8% and 3.4% high
    raw = [math.sqrt(bautin_radius_squared(b, s, t) / b) for b in (0.04, 0.02)]
    assert check.measured.amplitude[0] / math.sqrt(0.04) == pytest.approx(raw[0], rel=1e-4)
    assert check.closer.measured.amplitude[0] / math.sqrt(0.02) == pytest.approx(raw[1], rel=1e-4)
    assert check.amplitude_error[0] > 0.07
    # extrapolated: exact for this truncated form up to the measurement (about 1e-5)
    assert np.all(np.abs(check.onset_amplitude_error) < 2e-4), check.to_dict()["onset"]
    assert check.onset.slope[0] == pytest.approx(-t, rel=2e-3)
    assert check.onset.period == pytest.approx(2 * math.pi, rel=1e-6)
    # the fold of cycles of this form at beta1 = s^2 / (4 t) (same source), on the side
    # of the simulated offsets
    assert check.offset < 0
    assert check.fold_offset == pytest.approx(-s * s / (4 * t), rel=1e-2)
    assert check.agrees


def test_wright_equation_extrapolates_closer_than_either_offset():
    # Wright's equation x' = -r x(t-1)(1 + x): Hopf at r = pi/2, cycle amplitude^2 ~
    # 40 (r - pi/2) / (3 pi - 2) (Hassard, Kazarinoff & Wan 1981), here with the compiled
    # predictions
    model = lyacomp.Model(
        name="wright",
        states={"x": 0.0},
        parameters={"r": 1.5},
        equations={"x": "-r*x(t - 1)*(1 + x)"},
        bifurcation="r",
    )
    check = check_by_simulation(model, growth=0.01)
    published = math.sqrt(40 / (3 * math.pi - 2))
    assert check.predicted_coefficient[0] == pytest.approx(published, rel=1e-9)
    onset = abs(check.onset.coefficient[0] / published - 1)
    assert onset < 1e-3, check.to_dict()["onset"]
    assert onset < abs(check.closer.amplitude_error[0]) / 3
    assert check.agrees


def test_lagged_burner_agrees_at_the_default_offset(tmp_path, capsys):
    from lyacomp.cli import main

    png = tmp_path / "burner.png"
    code = main(["verify", str(BURNER), "--plot", str(png), "--json"])
    out = json.loads(capsys.readouterr().out)
    assert code == 0 and out["agrees"]
    # the raw amplitude at the default offset is 11% high (the check would fail on it) ...
    assert out["relative_error"]["amplitude"]["p"] > 0.05
    # ... the closer offset is half of it, and the value extrapolated to onset is within
    # the 5% issue 9 asks for
    closer = out["closer"]
    assert closer["offset"] == pytest.approx(out["offset"] / 2, rel=1e-12)
    assert set(closer) >= {"value", "offset", "predicted", "runs", "measured", "relative_error"}
    onset = out["onset"]
    assert set(onset) >= {
        "compared",
        "valid",
        "reason",
        "predicted",
        "extrapolated",
        "raw_coefficient",
        "slope",
        "correction",
        "fold_offset",
        "relative_error",
    }
    assert onset["valid"] and onset["reason"] is None
    assert abs(onset["relative_error"]["coefficient"]["p"]) < 0.05
    assert abs(onset["relative_error"]["period"]) < 0.05
    assert onset["raw_coefficient"]["offset"]["p"] == pytest.approx(
        out["measured"]["amplitude"]["p"] / math.sqrt(out["offset"]), rel=1e-12
    )
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
