"""Issue 8, item 7: failure messages that say what is true, each printed once."""

from __future__ import annotations

import pytest

from lyacomp.cli import main

# x' = y, y' = -x - (1 + mu^2) y: the trace -(1 + mu^2) never vanishes, so there is no Hopf
# point for any mu (n = 2: Hopf needs trace A = 0, det A > 0; common practice, no source).
DAMPED = """
name = "always damped"
[states]
x = 0.0
y = 0.0
[parameters]
mu = 0.5
[equations]
x = "y"
y = "-x - (1 + mu**2)*y - x**3"
[bifurcation]
parameter = "mu"
"""

# Hopf normal form with onset at mu = m (trace 2 (mu - m); common practice, no source); the
# declared closed form m + 1 is wrong on purpose.
WRONG_CLOSED_FORM = """
name = "wrong closed form"
[states]
x = 0.0
y = 0.0
[parameters]
mu = 0.0
m = 0.3
[equations]
x = "(mu - m)*x - y - x*(x**2 + y**2)"
y = "x + (mu - m)*y - y*(x**2 + y**2)"
[bifurcation]
parameter = "mu"
critical_value = "m + 1"
"""


def _run(tmp_path, text, *args):
    path = tmp_path / "model.toml"
    path.write_text(text)
    return main(["eval", str(path), *args])


def test_no_hopf_point_anywhere_is_not_sent_to_a_better_guess(tmp_path, capsys):
    assert _run(tmp_path, DAMPED) == 1
    captured = capsys.readouterr()
    err = captured.err.strip().splitlines()
    assert err[0].startswith("lyacomp: no_convergence")
    assert len(err) == 2 and "no complex eigenvalue pair crossing" in err[1]
    assert "no Hopf point near this guess" in err[1]
    assert "try a better starting guess" not in captured.err
    assert "no_convergence" in captured.out and "Newton" not in captured.out


# Hopf normal form with onset at mu = m: started far away Newton may fail, the scan must
# then point at mu = m (the eigenvalues mu - m +- i cross at mu = m; no source needed).
FAR = WRONG_CLOSED_FORM.replace('critical_value = "m + 1"\n', "").replace("m = 0.3", "m = 3.0")


def test_scan_points_at_the_hopf_point_when_newton_fails(tmp_path, capsys):
    import lyacomp
    from lyacomp.cli.hopf_scan import scan_for_hopf

    path = tmp_path / "far.toml"
    path.write_text(FAR)
    ev = lyacomp.compile(lyacomp.load_model(path))
    outcome = scan_for_hopf(ev, {"mu": 2.0})
    assert outcome is not None and outcome.crossings
    assert outcome.crossings[0] == pytest.approx(3.0, abs=2 * 4.0 / 400)
    assert "mu = 3" in outcome.message()


def test_wrong_closed_form_critical_value_says_so(tmp_path, capsys):
    assert _run(tmp_path, WRONG_CLOSED_FORM) == 1
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("lyacomp: not_critical")
    assert "does not put the equilibrium at onset" in err[0]
    assert "declare a [bifurcation] parameter" not in err[0]


def test_caution_once_and_critical_value_label(tmp_path, capsys):
    text = WRONG_CLOSED_FORM.replace('critical_value = "m + 1"', 'critical_value = "m"').replace(
        "mu", "g1"
    )
    assert _run(tmp_path, text) == 0
    out = capsys.readouterr().out
    assert out.count("caution") == 1
    assert "critical value of g1: g1_c = 0.3" in out
    assert "g10" not in out


@pytest.mark.parametrize(
    "args",
    [
        ["robustness", "examples/belt_friction_pad.toml", "--samples", "200", "--seed", "1"],
        ["map", "examples/duct_flap.toml", "--line", "a:0.2:1.0:11"],
        ["eval", "examples/duct_flap.toml"],
    ],
    ids=["robustness", "map-line", "eval"],
)
def test_caution_once_per_command(args, capsys):
    assert main(args) == 0
    captured = capsys.readouterr()
    assert (captured.out + captured.err).lower().count("caution") == 1


def test_each_failure_line_once(tmp_path, capsys):
    assert _run(tmp_path, DAMPED) == 1
    captured = capsys.readouterr()
    lines = [line for line in captured.err.splitlines() if line.strip()]
    assert len(lines) == len(set(lines)) == 2
    assert captured.out.count("no_convergence") == 1
