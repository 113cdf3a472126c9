"""Design optimization: objectives, gradients and constraints from the batch evaluator,
the handling of designs without a Hopf point, and the robust (common random numbers)
statistic; plus the soft-onset example."""

from __future__ import annotations

import importlib.util
import math
from pathlib import Path

import numpy as np
import pytest

stats = pytest.importorskip("scipy.stats")
optimize = pytest.importorskip("scipy.optimize")

import sympy  # noqa: E402

import lyacomp  # noqa: E402
from lyacomp.errors import StudyError  # noqa: E402
from lyacomp.studies.optimize import DesignPointError, DesignSpace, RobustStatistic  # noqa: E402

# x' = mu x - y + s x r^2, y' = k x + mu y + s y r^2. Onset at mu = 0 with omega = sqrt(k);
# for k < 0 the pair is real (a neutral saddle, no Hopf point; common practice, no
# source). Kuznetsov's projection formula (Elements of Applied Bifurcation Theory, 3rd ed.
# 2004, Ch. 3) worked by hand: q = (1, -i w)/sqrt(1 + k), <p, conj q> = 0,
# <p, C(q, q, conj q)> = 4 s, so l1 = 2 s / sqrt(k); at k = 1 this is the check value
# l1 = 2 a / omega with a = s of Guckenheimer & Holmes (1983), eq. 3.4.11 (from memory).
PINCH = dict(
    name="pinch",
    states={"x": 0.0, "y": 0.0},
    parameters={"mu": 0.0, "s": -1.0, "k": 1.0},
    equations={"x": "mu*x - y + s*x*(x**2 + y**2)", "y": "k*x + mu*y + s*y*(x**2 + y**2)"},
    bifurcation="mu",
)
K, S = sympy.symbols("k s", positive=True)
L1_EXACT = 2 * S / sympy.sqrt(K)


@pytest.fixture(scope="module")
def pinch():
    return lyacomp.compile(lyacomp.Model(**PINCH))


class Counting:
    """Wraps an evaluator and records the size of every batch call."""

    def __init__(self, ev):
        self.ev, self.sizes = ev, []

    def __getattr__(self, name):
        return getattr(self.ev, name)

    def batch(self, inputs, threads=None):
        n = max(np.size(v) for v in inputs.values())
        self.sizes.append(n)
        return self.ev.batch(inputs, threads=threads)


def _l1(k, s):
    return float(L1_EXACT.subs({K: k, S: s}))


def test_value_and_gradient_in_one_batch_call(pinch):
    ev = Counting(pinch)
    space = DesignSpace(ev, ["k", "s"], gradients="differences")
    l1 = space.output("l1")
    omega = space.output("omega")
    x = np.array([2.0, -0.7])
    assert l1(x) == pytest.approx(_l1(2.0, -0.7), rel=1e-10)
    grad = l1.jac(x)
    assert omega(x) == pytest.approx(math.sqrt(2.0), rel=1e-12)
    omega_grad = omega.jac(x)
    assert ev.sizes == [5]  # one stencil of 2 k + 1 points served value, gradients, omega
    # Reference derivatives: sympy.diff of the closed form.
    exact = [float(sympy.diff(L1_EXACT, v).subs({K: 2.0, S: -0.7})) for v in (K, S)]
    assert grad == pytest.approx(exact, rel=1e-6)
    assert omega_grad == pytest.approx([0.5 / math.sqrt(2.0), 0.0], abs=1e-7)
    assert space.output("l1", maximize=True)(x) == -l1(x)


class CountingExact(Counting):
    """Counting, for calls that ask for exact derivatives."""

    def batch(self, inputs, threads=None, derivatives=False):
        self.sizes.append(max(np.size(v) for v in inputs.values()))
        return self.ev.batch(inputs, threads=threads, derivatives=derivatives)


def test_exact_gradients_from_one_evaluation(pinch):
    # Reference derivatives: sympy.diff of the closed form l1 = 2 s / sqrt(k), omega = sqrt(k).
    ev = CountingExact(pinch)
    space = DesignSpace(ev, ["k", "s"])
    x = np.array([2.0, -0.7])
    l1, omega, period = space.output("l1"), space.output("omega"), space.output("period")
    value, grad = l1.value_and_gradient(x)
    assert value == pytest.approx(_l1(2.0, -0.7), rel=1e-12)
    exact = [float(sympy.diff(L1_EXACT, v).subs({K: 2.0, S: -0.7})) for v in (K, S)]
    assert grad == pytest.approx(exact, rel=1e-12)
    assert omega.jac(x) == pytest.approx([0.5 / math.sqrt(2.0), 0.0], abs=1e-14)
    # period = 2 pi / sqrt(k): d/dk = -pi k^(-3/2)
    assert period.jac(x)[0] == pytest.approx(-math.pi * 2.0**-1.5, rel=1e-12)
    assert ev.sizes == [1]  # one sample served value and gradients of every output
    # Outputs without exact derivatives still use the stencil.
    space.output("transversality").jac(x)
    assert ev.sizes == [1, 5]


def test_slsqp_finds_the_constrained_optimum(pinch):
    # Minimize l1 = 2 s / sqrt(k) over s in [-2, -0.5], k in [0.25, 4] with omega >= 1.5:
    # l1 < 0 grows with k and falls with s, so the optimum is s = -2 (bound) and
    # sqrt(k) = 1.5 (the constraint): l1 = -4 / 1.5 (calculus on the closed form).
    space = DesignSpace(pinch, ["k", "s"])
    l1 = space.output("l1")
    res = optimize.minimize(
        l1,
        [1.0, -1.0],
        jac=l1.jac,
        method="SLSQP",
        bounds=[(0.25, 4.0), (-2.0, -0.5)],
        constraints=[space.constraint("omega", lower=1.5)],
    )
    assert res.success
    assert res.x == pytest.approx([2.25, -2.0], abs=1e-6)
    assert res.fun == pytest.approx(-4.0 / 1.5, rel=1e-8)
    # Maximizing instead: s = -0.5, k = 4, l1 = -0.5.
    worst = space.output("l1", maximize=True)
    res = optimize.minimize(
        worst, [1.0, -1.0], jac=worst.jac, method="L-BFGS-B", bounds=[(0.25, 4.0), (-2.0, -0.5)]
    )
    assert res.x == pytest.approx([4.0, -0.5], abs=1e-6)


def test_constraint_object(pinch):
    space = DesignSpace(pinch, ["k", "s"])
    con = space.constraint("l1", upper=-0.1)
    assert isinstance(con, optimize.NonlinearConstraint)
    assert con.lb == -math.inf and con.ub == -0.1
    jac = con.jac(np.array([1.0, -1.0]))
    assert jac.shape == (1, 2)
    assert jac[0] == pytest.approx([1.0, 2.0], rel=1e-6)  # d(2 s k^-1/2) = (-s k^-3/2, 2 k^-1/2)
    with pytest.raises(StudyError, match="lower <= upper"):
        space.constraint("l1")


def test_design_without_a_hopf_point_raises_by_default(pinch):
    space = DesignSpace(pinch, ["k", "s"])
    l1 = space.output("l1")
    with pytest.raises(DesignPointError, match="neutral_saddle") as info:
        l1([-1.0, -1.0])
    assert info.value.point == {"k": -1.0, "s": -1.0} and info.value.status == "neutral_saddle"
    with pytest.raises(DesignPointError):
        l1.jac([-1.0, -1.0])


def test_inf_policy_is_for_derivative_free_methods(pinch):
    space = DesignSpace(pinch, ["k", "s"])
    assert space.output("l1", on_failure="inf")([-1.0, -1.0]) == math.inf
    assert space.output("l1", maximize=True, on_failure="inf")([-1.0, -1.0]) == math.inf
    upper = space.constraint("l1", upper=0.0, on_failure="inf")
    lower = space.constraint("omega", lower=1.0, on_failure="inf")
    assert upper.fun([-1.0, -1.0]) == math.inf and lower.fun([-1.0, -1.0]) == -math.inf
    with pytest.raises(DesignPointError):
        space.output("l1", on_failure="inf").jac([-1.0, -1.0])
    # Nelder-Mead treats the infinite values as worse and stays where l1 is defined:
    # minimize (l1 + 1)^2 in k with s = -1; l1 = -2/sqrt(k) = -1 at k = 4.
    f = DesignSpace(pinch, ["k"], {"s": -1.0}).output("l1", on_failure="inf")
    res = optimize.minimize(
        lambda x: (f(x) + 1.0) ** 2,
        [0.5],
        method="Nelder-Mead",
        options={"xatol": 1e-8, "fatol": 1e-14},
    )
    assert res.x[0] == pytest.approx(4.0, rel=1e-5)


def test_one_sided_difference_next_to_a_failure(pinch):
    # step 0.5 at k = 0.3: k - h = -0.2 is a neutral saddle, k + h = 0.8 is fine, so the
    # k-derivative is the forward difference of the exact values.
    space = DesignSpace(pinch, ["k", "s"], step=0.5, gradients="differences")
    grad = space.output("l1").jac([0.3, -1.0])
    forward = (_l1(0.8, -1.0) - _l1(0.3, -1.0)) / 0.5
    assert grad[0] == pytest.approx(forward, rel=1e-9)
    assert grad[1] == pytest.approx(2.0 / math.sqrt(0.3), rel=1e-9)  # central, exact (linear)


def test_design_space_errors(pinch):
    with pytest.raises(StudyError, match="bifurcation parameter"):
        DesignSpace(pinch, ["mu"])
    with pytest.raises(StudyError, match="unknown parameter"):
        DesignSpace(pinch, ["q"])
    with pytest.raises(StudyError, match="at least one"):
        DesignSpace(pinch, [])
    with pytest.raises(StudyError, match="unknown output"):
        DesignSpace(pinch, ["k"]).output("lyapunov")
    with pytest.raises(StudyError, match="expected 1 values"):
        DesignSpace(pinch, ["k"]).output("l1")([1.0, 2.0])
    assert DesignSpace(pinch, ["k"]).output("amplitude_x")([1.0]) > 0.0


# ---------------------------------------------------------------- robust statistic


def test_robust_probability_is_deterministic_and_near_phi(pinch):
    # s uncertain with sd 0.5 and free: P(l1 > 0) = P(s > 0) = Phi(x / 0.5) at design x
    # (definition of the normal CDF; scipy.stats.norm). Common random numbers: the same
    # draws at every call, so the value is a deterministic function of x.
    space = DesignSpace(pinch, ["s"], {"k": 1.0})
    n = 20_000
    p = RobustStatistic(
        space,
        samples=n,
        seed=4,
        method="random",
        uncertainty={"s": {"distribution": "normal", "sd": 0.5}},
    )
    for x in (-0.4, 0.0, 0.3):
        value = p([x])
        assert value == p([x])
        exact = stats.norm.cdf(x / 0.5)
        assert abs(value - exact) < 3.29 * math.sqrt(exact * (1 - exact) / n) + 1e-12
        # The draws keep their offset from the start (-1): count them directly.
        assert value == np.mean(p.draws[:, 0] + 1.0 + x > 0.0)


def test_robust_quantile_gradient(pinch):
    # l1 = 2 s at k = 1: with offset draws s_i = x + d_i the 0.9 quantile is 2 (x + q_d),
    # so its derivative in x is exactly 2 (chain rule on l1 = 2 s).
    space = DesignSpace(pinch, ["s"], {"k": 1.0})
    q = RobustStatistic(
        space,
        statistic="quantile",
        level=0.9,
        samples=5000,
        seed=1,
        uncertainty={"s": {"distribution": "normal", "sd": 0.3}},
    )
    assert q.jac([0.2]) == pytest.approx([2.0], rel=1e-6)
    # Lognormal spreads scale with the design: quantile(x) = x * quantile(1), slope q/x.
    ql_start = RobustStatistic(
        DesignSpace(pinch, ["s"], {"k": 1.0, "s": 1.0}),
        statistic="quantile",
        level=0.9,
        samples=5000,
        seed=1,
        uncertainty={"s": {"distribution": "lognormal", "sigma": 0.2}},
    )
    assert ql_start.jac([0.5]) == pytest.approx([ql_start([0.5]) / 0.5], rel=1e-6)
    # The 0.9 quantile of 2 s with s = 0.5 exp(0.2 Z): 2 * 0.5 * exp(0.2 z_0.9) (scipy).
    assert ql_start([0.5]) == pytest.approx(np.exp(0.2 * stats.norm.ppf(0.9)), rel=0.01)


def test_robust_smoothed_probability_has_a_gradient(pinch):
    space = DesignSpace(pinch, ["s"], {"k": 1.0})
    table = {"s": {"distribution": "normal", "sd": 0.5}}
    step = RobustStatistic(space, samples=4000, seed=2, uncertainty=table)
    smooth = RobustStatistic(space, samples=4000, seed=2, uncertainty=table, smoothing=0.05)
    assert smooth([0.1]) == pytest.approx(step([0.1]), abs=0.02)
    assert smooth.jac([0.1])[0] > 0.0  # raising s makes hard onsets more likely
    con = smooth.constraint(upper=0.1)
    assert con.jac(np.array([0.1])).shape == (1, 1)


def test_robust_failure_policies(pinch):
    # k ~ Uniform(-0.2, 1.8): the neutral-saddle region k < 0 has probability 0.1; s = -1
    # makes every proper onset soft.
    space = DesignSpace(pinch, ["s"], {"k": 1.0})
    table = {"k": {"distribution": "uniform", "low": -0.2, "high": 1.8}}
    worst = RobustStatistic(space, samples=10_000, seed=3, uncertainty=table)
    failing = np.mean(worst.draws[:, 0] < 0.0)
    assert abs(failing - 0.1) < 3.29 * math.sqrt(0.09 / 10_000)
    assert worst([-1.0]) == failing  # failures count as hard onsets
    exclude = RobustStatistic(
        space, samples=10_000, seed=3, uncertainty=table, on_failure="exclude"
    )
    assert exclude([-1.0]) == 0.0
    strict = RobustStatistic(space, samples=10_000, seed=3, uncertainty=table, on_failure="raise")
    with pytest.raises(DesignPointError, match="neutral_saddle"):
        strict([-1.0])
    q95 = RobustStatistic(
        space, statistic="quantile", level=0.95, samples=10_000, seed=3, uncertainty=table
    )
    with pytest.raises(DesignPointError, match="quantile"):
        q95([-1.0])
    q80 = RobustStatistic(
        space, statistic="quantile", level=0.8, samples=10_000, seed=3, uncertainty=table
    )
    assert q80([-1.0]) < 0.0


def test_robust_statistic_errors(pinch):
    space = DesignSpace(pinch, ["s"])
    table = {"k": {"distribution": "uniform", "low": 0.5, "high": 1.5}}
    with pytest.raises(StudyError, match="statistic"):
        RobustStatistic(space, statistic="mean", uncertainty=table)
    with pytest.raises(StudyError, match="level"):
        RobustStatistic(space, statistic="quantile", level=1.5, uncertainty=table)
    with pytest.raises(StudyError, match="smoothing"):
        RobustStatistic(space, smoothing=-1.0, uncertainty=table)
    with pytest.raises(StudyError, match="lognormal"):
        RobustStatistic(
            DesignSpace(pinch, ["s"]),
            uncertainty={"s": {"distribution": "lognormal", "median": 1.0, "sigma": 0.1}},
        )


# ---------------------------------------------------------------- the example


def test_soft_onset_example_goes_from_hard_to_soft(capsys):
    path = Path(__file__).resolve().parents[2] / "examples" / "design_for_soft_onset.py"
    spec = importlib.util.spec_from_file_location("design_for_soft_onset", path)
    example = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(example)
    out = example.main(samples=20_000)
    before, after = out["before"], out["after"]
    assert before["l1"] > 0.0 and before["criticality"] == "subcritical"
    assert after["l1"] <= example.L1_MARGIN + 1e-6 and after["criticality"] == "supercritical"
    assert after["critical_value"] >= example.SPEED_LIMIT - 1e-6
    assert before["p_hard"] > 0.9 and after["p_hard"] < 0.05
    assert after["p_hard"] < out["nominal_design"]["p_hard"]
    assert "Before -> after" in capsys.readouterr().out


@pytest.mark.parametrize("smoothing", [None, 0.2])
def test_robust_exact_gradient_matches_differences(pinch, smoothing):
    # Source: common practice, no source: the exact gradient (per-sample derivatives through
    # the order statistics or the logistic ramp) against central differences of the same
    # common-random-number statistic.
    table = {"s": {"distribution": "normal", "sd": 0.3}}
    grads = []
    for mode in ("exact", "differences"):
        space = DesignSpace(pinch, ["k", "s"], gradients=mode, step=1e-6)
        stat = RobustStatistic(
            space,
            statistic="quantile" if smoothing is None else "probability",
            level=0.8,
            samples=3000,
            seed=4,
            uncertainty=table,
            smoothing=smoothing,
        )
        grads.append(stat.jac([1.5, -0.4]))
    assert grads[0] == pytest.approx(grads[1], rel=1e-5)
