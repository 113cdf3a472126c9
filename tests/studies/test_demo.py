"""The bundled scenario and `lyacomp demo`."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

pytest.importorskip("scipy")
pytest.importorskip("matplotlib")

import sympy  # noqa: E402

import lyacomp  # noqa: E402
from lyacomp import scenarios  # noqa: E402
from lyacomp.cli import main  # noqa: E402
from lyacomp.errors import ModelError  # noqa: E402

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"


@pytest.fixture(scope="module")
def model():
    return lyacomp.load_model(scenarios.path())


def _jacobian(model, values):
    sym = model.symbolic()
    subs = {p: values[p.name] for p in sym.parameters}
    subs.update({s: 0.0 for s in sym.states})  # the equilibrium is the origin
    jac = sympy.Matrix(sym.rhs).jacobian(sympy.Matrix(sym.states))
    return np.array(jac.xreplace(subs).evalf(), dtype=float)


@pytest.mark.parametrize(
    "changes",
    [{}, {"vb": 0.9, "tau": 0.7}, {"r": 1.3, "c": 1.2, "L": 0.8, "k": 1.7}],
)
def test_scenario_onset_is_a_hopf_point(model, changes):
    # The scenario's closed-form critical value replaces Newton's method, so check it
    # against the definition: at the reported onset numpy's eigenvalues of the Jacobian
    # (sympy derivative) hold a pair +-i*omega with the rest in the left half plane.
    ev = lyacomp.compile(model)
    res = ev(**changes)
    assert res.ok
    values = {**ev.nominal, **changes, "g": res.critical_value}
    eig = np.linalg.eigvals(_jacobian(model, values))
    pair = eig[np.argmax(eig.imag)]
    assert abs(pair.real) < 1e-10
    assert pair.imag == pytest.approx(res.omega, rel=1e-10)
    others = eig[np.abs(eig.imag) < 1e-12]
    assert np.all(others.real < 0)
    # just above onset the pair has crossed into the right half plane (transversality)
    values["g"] = res.critical_value * (1 + 1e-6)
    assert np.max(np.linalg.eigvals(_jacobian(model, values)).real) > 0


def test_unknown_scenario_is_a_model_error():
    assert "tank_exciter" in scenarios.names()
    with pytest.raises(ModelError, match="tank_exciter"):
        scenarios.path("no_such_scenario")


def test_demo_writes_report_and_pictures(tmp_path, capsys):
    out = tmp_path / "demo"
    code = main(["demo", str(out), "--samples", "20000", "--seed", "7"])
    printed = capsys.readouterr().out
    assert code == 0
    assert "robustness" in printed and "simulation" in printed and "Caution" in printed

    def no_nan(token):
        raise AssertionError(f"non-standard JSON constant {token}")

    report = json.loads((out / "demo_report.json").read_text(), parse_constant=no_nan)
    assert report["robustness"]["samples"] == 20000
    assert set(report["robustness"]["status_counts"]) >= {"ok"}
    counts = report["map"]["counts"]
    assert counts["supercritical (soft onset)"] > 0 and counts["subcritical (hard onset)"] > 0
    assert report["map"]["zero_curve_points"] > 0
    assert report["nominal"]["criticality"] == "supercritical"
    # the simulation (scipy DOP853) is the check from outside the compiled code
    sim = report["simulation"]
    assert sim["agrees"]
    assert all(abs(e) < 0.1 for e in sim["relative_error"]["amplitude"].values())
    assert len(report["switches"]) == 1
    sw = report["switches"][0]
    assert (sw["before"], sw["after"]) == ("supercritical", "subcritical")
    for name in ("map.png", "simulation.png", "robustness.png"):
        assert (out / name).read_bytes()[:8] == PNG_MAGIC
    assert math.isfinite(report["robustness"]["probability_subcritical"])


def test_demo_robustness_is_reproducible(tmp_path):
    from lyacomp.studies.robustness import run_robustness

    ev = lyacomp.compile(lyacomp.load_model(scenarios.path()))
    a = run_robustness(ev, 5000, seed=11, progress=False)
    b = run_robustness(ev, 5000, seed=11, progress=False)
    assert a.subcritical == b.subcritical and a.quantiles == b.quantiles


@pytest.mark.parametrize("command", ["demo", "map", "verify"])
def test_help_has_an_example(command, capsys):
    with pytest.raises(SystemExit) as exc:
        main([command, "--help"])
    assert exc.value.code == 0
    assert "example" in capsys.readouterr().out
