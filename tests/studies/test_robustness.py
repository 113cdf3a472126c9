"""Monte Carlo robustness: distributions, copula, Wilson interval, ranking, and the study
itself against exact probabilities of the Hopf normal form."""

from __future__ import annotations

import json
import math
import os
import signal

import numpy as np
import pytest

stats = pytest.importorskip("scipy.stats")

import lyacomp  # noqa: E402
from lyacomp.errors import StudyError  # noqa: E402
from lyacomp.studies.robustness import (  # noqa: E402
    average_ranks,
    rank_drivers,
    run_robustness,
    wilson_interval,
)
from lyacomp.studies.uncertainty import chunk_rng, draw_scores, parse_uncertainty, sample  # noqa: E402

# Hopf normal form x' = mu x - y + s x r^2, y' = x + mu y + s y r^2: the radial equation
# is r' = mu r + s r^3, so a = s and l1 = 2 a / omega = 2 s (Guckenheimer & Holmes 1983,
# eq. 3.4.11 (number from memory), with the normalization of docs/mathematics.md).
NORMAL_FORM = dict(
    name="normal form",
    states={"x": 0.0, "y": 0.0},
    parameters={"mu": 0.0, "s": -1.0},
    equations={"x": "mu*x - y + s*x*(x**2 + y**2)", "y": "x + mu*y + s*y*(x**2 + y**2)"},
    bifurcation="mu",
)

# Same cubic terms, linear part [[mu, -1], [k, mu]]: eigenvalues mu +- sqrt(-k), so for
# k < 0 the trace condition gives a neutral saddle, not a Hopf point (common practice,
# no source). For k > 0, Kuznetsov's projection formula (Elements of Applied Bifurcation
# Theory, 3rd ed. 2004, Ch. 3) worked by hand: q = (1, -i w)/sqrt(1 + k), <p, conj q> = 0,
# <p, C(q, q, conj q)> = 4 s, hence l1 = 2 s / sqrt(k).
PINCH = dict(
    name="pinch",
    states={"x": 0.0, "y": 0.0},
    parameters={"mu": 0.0, "s": -1.0, "k": 1.0},
    equations={"x": "mu*x - y + s*x*(x**2 + y**2)", "y": "k*x + mu*y + s*y*(x**2 + y**2)"},
    bifurcation="mu",
)


@pytest.fixture(scope="module")
def normal_form():
    return lyacomp.compile(lyacomp.Model(**NORMAL_FORM))


@pytest.fixture(scope="module")
def pinch():
    return lyacomp.compile(lyacomp.Model(**PINCH))


# ---------------------------------------------------------------- distributions


MARGINALS = [
    # (entry, nominal, reference distribution from scipy.stats)
    ({"distribution": "normal", "sd": 0.3}, 2.0, stats.norm(2.0, 0.3)),
    ({"distribution": "normal", "mean": -1.0, "sd": 2.0}, 5.0, stats.norm(-1.0, 2.0)),
    (
        {"distribution": "truncated_normal", "sd": 1.0, "low": -0.5, "high": 1.0},
        0.2,
        stats.truncnorm(-0.7, 0.8, loc=0.2, scale=1.0),
    ),
    (  # a window far in the upper tail, where Phi(low) rounds to 1
        {"distribution": "truncated_normal", "mean": 0.0, "sd": 1.0, "low": 6.0, "high": 7.0},
        0.0,
        stats.truncnorm(6.0, 7.0),
    ),
    (
        {"distribution": "truncated_normal", "mean": 1.0, "sd": 0.5, "low": 0.0},
        1.0,
        stats.truncnorm(-2.0, np.inf, loc=1.0, scale=0.5),
    ),
    ({"distribution": "lognormal", "sigma": 0.3}, 2.0, stats.lognorm(0.3, scale=2.0)),
    ({"distribution": "uniform", "low": -1.0, "high": 2.0}, 0.0, stats.uniform(-1.0, 3.0)),
    (
        {"distribution": "triangular", "low": 0.0, "high": 3.0},
        1.0,
        stats.triang(1.0 / 3.0, loc=0.0, scale=3.0),
    ),
]


@pytest.mark.parametrize("method", ["random", "lhs"])
@pytest.mark.parametrize("entry, nominal, reference", MARGINALS)
def test_marginals_match_scipy(entry, nominal, reference, method):
    # Reference: the scipy.stats distribution with the same parameters; a wrong
    # transform fails the Kolmogorov-Smirnov test at this size by a wide margin.
    spec = parse_uncertainty({"p": entry}, {"p": nominal})
    values = sample(spec, 50_000, seed=12, method=method)[:, 0]
    assert stats.kstest(values, reference.cdf).pvalue > 1e-3
    lo, hi = reference.support()
    assert values.min() >= lo and values.max() <= hi


def test_latin_hypercube_puts_one_point_in_each_stratum():
    # Definition of a Latin hypercube (McKay, Beckman & Conover 1979, Technometrics 21:
    # 239-245): each of the n equal-probability strata of every input holds one point.
    n = 997
    z = draw_scores(chunk_rng(5, 0), n, 3, "lhs")
    u = stats.norm.cdf(z)
    for j in range(3):
        assert np.array_equal(np.sort(np.floor(u[:, j] * n)), np.arange(n))


def test_gaussian_copula_correlation():
    # For a bivariate normal with correlation rho, Spearman's rank correlation is
    # (6/pi) asin(rho/2) (Pearson 1907; Kruskal 1958, JASA 53:814-861), and ranks do not
    # change under the monotone marginal maps.
    rho = 0.6
    spec = parse_uncertainty(
        {
            "u": {"distribution": "uniform", "low": 0.0, "high": 1.0},
            "w": {"distribution": "lognormal", "sigma": 0.5, "correlation": {"u": rho}},
        },
        {"w": 1.0},
    )
    values = sample(spec, 200_000, seed=3)
    spearman = stats.spearmanr(values[:, 0], values[:, 1]).statistic
    assert spearman == pytest.approx(6.0 / math.pi * math.asin(rho / 2.0), abs=0.01)
    scores = stats.norm.ppf(values[:, 0]), np.log(values[:, 1]) / 0.5
    assert np.corrcoef(*scores)[0, 1] == pytest.approx(rho, abs=0.01)


def test_sampling_is_reproducible_and_seed_dependent():
    spec = parse_uncertainty({"p": {"distribution": "normal", "mean": 0.0, "sd": 1.0}})
    a, b = sample(spec, 1000, seed=4), sample(spec, 1000, seed=4)
    assert np.array_equal(a, b)
    assert not np.array_equal(a, sample(spec, 1000, seed=5))
    assert not np.array_equal(a, sample(spec, 1000, seed=4, chunk=1))


@pytest.mark.parametrize(
    "table, match",
    [
        ({"p": {"distribution": "gamma", "sd": 1.0}}, "distribution must be one of"),
        ({"p": {"distribution": "normal"}}, "needs the key"),
        ({"p": {"distribution": "normal", "sd": 1.0, "scale": 2.0}}, "unknown key"),
        ({"p": {"distribution": "normal", "sd": -1.0}}, "positive"),
        ({"p": {"distribution": "normal", "sd": "wide"}}, "expected a number"),
        ({"p": {"distribution": "uniform", "low": 2.0, "high": 1.0}}, "low < high"),
        ({"p": {"distribution": "triangular", "low": 2.0, "high": 3.0}}, "outside"),
        ({"p": {"distribution": "truncated_normal", "sd": 1.0}}, "needs 'low'"),
        ({"zz": {"distribution": "normal", "sd": 1.0}}, "not a parameter"),
        ({"mu": {"distribution": "normal", "sd": 1.0}}, "bifurcation parameter"),
        ({"p": 3.0}, "expected a table"),
        ({}, "no uncertain parameters"),
        (
            {"p": {"distribution": "normal", "sd": 1.0, "correlation": {"q": 1.5}}},
            "not an uncertain parameter",
        ),
        (
            {
                "p": {"distribution": "normal", "sd": 1, "correlation": {"q": 0.9, "r": 0.9}},
                "q": {"distribution": "normal", "sd": 1, "correlation": {"r": -0.9}},
                "r": {"distribution": "normal", "sd": 1},
            },
            "positive definite",
        ),
        (
            {
                "p": {"distribution": "normal", "sd": 1, "correlation": {"q": 0.2}},
                "q": {"distribution": "normal", "sd": 1, "correlation": {"p": 0.3}},
            },
            "given twice",
        ),
    ],
)
def test_bad_uncertainty_tables_give_clear_errors(table, match):
    with pytest.raises(StudyError, match=match):
        parse_uncertainty(
            table,
            {"p": 1.0, "q": 1.0, "r": 1.0, "mu": 0.0},
            parameters=("p", "q", "r", "mu"),
            bifurcation="mu",
        )


# ---------------------------------------------------------------- statistics


@pytest.mark.parametrize("k, n", [(81, 263), (15, 148), (0, 20), (1, 29), (20, 20), (5, 7)])
def test_wilson_interval_matches_scipy(k, n):
    # Reference: scipy.stats.binomtest(...).proportion_ci(method="wilson").
    ref = stats.binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
    lo, hi = wilson_interval(k, n, 0.95)
    assert lo == pytest.approx(ref.low, abs=1e-12)
    assert hi == pytest.approx(ref.high, abs=1e-12)


def test_wilson_interval_published_example():
    # Newcombe (1998), Statistics in Medicine 17:857-872, worked example 81/263: score
    # interval 0.2553 to 0.3662 (table number from memory).
    lo, hi = wilson_interval(81, 263)
    assert (round(lo, 4), round(hi, 4)) == (0.2553, 0.3662)
    assert wilson_interval(0, 0) == (0.0, 1.0)
    with pytest.raises(StudyError):
        wilson_interval(5, 3)


def test_average_ranks_match_scipy():
    values = np.random.default_rng(1).integers(0, 40, 2000).astype(float)
    assert np.array_equal(average_ranks(values), stats.rankdata(values))


def test_rank_drivers_against_references():
    rng = np.random.default_rng(2)
    x = rng.standard_normal((50_000, 3))
    y = 2.0 * x[:, 0] - 1.0 * x[:, 1] + 0.0 * x[:, 2]
    drivers = rank_drivers(x, y, ["big", "small", "none"])
    assert [d.name for d in drivers] == ["big", "small", "none"]
    by_name = {d.name: d for d in drivers}
    # Spearman: scipy.stats.spearmanr; and for jointly normal variables with Pearson
    # correlation r, Spearman's rho is (6/pi) asin(r/2) (Pearson 1907).
    for j, name in enumerate(["big", "small", "none"]):
        assert by_name[name].spearman == pytest.approx(stats.spearmanr(x[:, j], y).statistic)
    r = 2.0 / math.sqrt(5.0)
    assert by_name["big"].spearman == pytest.approx(6 / math.pi * math.asin(r / 2), abs=0.01)
    # SRRC: least squares of standardized ranks, computed here with scipy.linalg.lstsq.
    from scipy.linalg import lstsq

    ranks = stats.rankdata(np.column_stack([x, y]), axis=0)
    ranks = (ranks - ranks.mean(axis=0)) / ranks.std(axis=0)
    coef = lstsq(ranks[:, :3], ranks[:, 3])[0]
    for j, name in enumerate(["big", "small", "none"]):
        assert by_name[name].srrc == pytest.approx(coef[j], abs=1e-9)
    assert abs(by_name["none"].srrc) < 0.02


# ---------------------------------------------------------------- the study


@pytest.mark.slow
@pytest.mark.parametrize("m, sigma", [(-0.3, 1.0), (0.2, 0.5), (-1.0, 0.4)])
def test_probability_of_hard_onset_is_phi(normal_form, m, sigma):
    # l1 = 2 s (see NORMAL_FORM), so with s ~ Normal(m, sigma) the onset is hard with
    # probability P(s > 0) = Phi(m / sigma) (definition of the normal CDF; scipy.stats.norm).
    exact = stats.norm.cdf(m / sigma)
    result = run_robustness(
        normal_form,
        1_000_000,
        seed=20261202,
        uncertainty={"s": {"distribution": "normal", "mean": m, "sd": sigma}},
    )
    assert result.samples == result.ok == 1_000_000
    lo, hi = wilson_interval(result.subcritical, result.ok, 0.999)
    assert lo <= exact <= hi
    assert result.interval[0] < result.probability_subcritical < result.interval[1]
    # Quantiles of l1 = 2 s: the exact CDF at each estimate is within the Dvoretzky-Kiefer-
    # Wolfowitz band of its level (Massart 1990 constant, alpha = 1e-3).
    eps = math.sqrt(math.log(2 / 1e-3) / (2 * result.ok))
    for level, value in result.quantiles["l1"].items():
        assert abs(stats.norm.cdf((value / 2 - m) / sigma) - float(level)) < eps


def test_status_breakdown_matches_the_failing_fraction(pinch):
    # k ~ Uniform(-1, 3): the neutral-saddle region k < 0 has probability 1/4 exactly.
    n = 40_000
    result = run_robustness(
        pinch, n, seed=8, uncertainty={"k": {"distribution": "uniform", "low": -1, "high": 3}}
    )
    saddles = result.status_counts["neutral_saddle"]
    assert sum(result.status_counts.values()) == n == result.samples
    assert result.ok + saddles == n
    assert abs(saddles / n - 0.25) < 3.29 * math.sqrt(0.25 * 0.75 / n)  # 99.9% two-sided
    # s = -1 fixed: every onset is soft.
    assert result.subcritical == 0 and result.probability_subcritical == 0.0
    assert result.interval[0] == 0.0 and result.interval[1] < 1e-3
    assert result.fraction_not_ok == pytest.approx(saddles / n)


def test_quantiles_from_the_bounded_subset(normal_form):
    # Chunks of 10^4 and a kept subset of 2*10^4 out of 2*10^5 samples: batch calls never
    # exceed the chunk, and the subset's quantiles stay within the Dvoretzky-Kiefer-
    # Wolfowitz bound (Massart 1990 constant: eps = sqrt(ln(2/alpha) / (2 n))).
    sizes = []

    class Recording:
        def __getattr__(self, name):
            return getattr(normal_form, name)

        def batch(self, inputs, threads=None, **options):  # options: out= buffers
            sizes.append(len(next(iter(inputs.values()))))
            return normal_form.batch(inputs, threads=threads, **options)

    keep = 20_000
    result = run_robustness(
        Recording(),
        200_000,
        seed=9,
        chunk_size=10_000,
        keep=keep,
        uncertainty={"s": {"distribution": "normal", "mean": 0.1, "sd": 0.5}},
        branch_steps=0,  # only the study's own batch calls are counted here
    )
    assert max(sizes) == 10_000 and sum(sizes) == 200_000
    assert result.quantile_basis == keep == len(result.kept["l1"])
    eps = math.sqrt(math.log(2 / 1e-3) / (2 * keep))
    for level, value in result.quantiles["l1"].items():
        assert abs(stats.norm.cdf((value / 2 - 0.1) / 0.5) - float(level)) < eps
    # The counts still cover every sample.
    assert result.ok == 200_000


def test_bit_reproducible_across_threads_and_runs(pinch, tmp_path):
    table = {
        "k": {"distribution": "uniform", "low": -0.5, "high": 3.0},
        "s": {"distribution": "normal", "mean": 0.0, "sd": 1.0, "correlation": {"k": 0.3}},
    }
    runs = []
    for i, threads in enumerate([1, 2, 2]):
        path = tmp_path / f"run{i}.npz"
        result = run_robustness(
            pinch,
            30_000,
            seed=77,
            uncertainty=table,
            method="lhs",
            threads=threads,
            chunk_size=4096,
            save=path,
        )
        runs.append((result.to_dict(), np.load(path)))
    (d1, z1), (d2, z2), (d3, z3) = runs
    assert d1 == d2 == d3
    for name in z1.files:
        a, b, c = z1[name], z2[name], z3[name]
        if a.dtype.kind == "f":
            a, b, c = a.view(np.uint64), b.view(np.uint64), c.view(np.uint64)
        assert np.array_equal(a, b) and np.array_equal(a, c)
    other = run_robustness(pinch, 30_000, seed=78, uncertainty=table, chunk_size=4096)
    assert other.to_dict() != d1


def test_saved_samples_csv_and_npz(normal_form, tmp_path):
    table = {"s": {"distribution": "normal", "mean": 0.0, "sd": 1.0}}
    csv_path, npz_path = tmp_path / "draws.csv", tmp_path / "draws.npz"
    a = run_robustness(normal_form, 3000, seed=1, uncertainty=table, chunk_size=700, save=csv_path)
    b = run_robustness(normal_form, 3000, seed=1, uncertainty=table, chunk_size=700, save=npz_path)
    z = np.load(npz_path)
    rows = np.genfromtxt(csv_path, delimiter=",", names=True, dtype=None, encoding="utf-8")
    assert list(rows.dtype.names) == [
        "s",
        "status",
        "l1",
        "critical_value",
        "omega",
        "amplitude_x",
        "amplitude_y",
    ]
    assert len(rows) == len(z["s"]) == 3000
    assert np.array_equal(rows["s"], z["s"]) and np.array_equal(rows["l1"], z["l1"])
    assert set(rows["status"]) == {"ok"} and set(z["status"]) == {0}
    assert z["status_labels"][0] == "ok"
    assert np.allclose(z["l1"], 2 * z["s"], rtol=1e-12, atol=1e-12)  # l1 = 2 s
    # Every sample kept (keep > samples): quantiles are those of all saved values.
    assert b.quantiles["l1"]["0.5"] == np.quantile(z["l1"], 0.5)
    assert a.to_dict() == b.to_dict()
    with pytest.raises(StudyError, match=".csv or .npz"):
        run_robustness(normal_form, 10, seed=1, uncertainty=table, save=tmp_path / "x.txt")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["draws.csv", "draws.npz"]


def test_hard_samples_are_the_hard_rows_of_the_saved_samples(normal_form, tmp_path):
    # l1 = 2 s (see NORMAL_FORM): a sample is hard exactly when s > 0 (definition of a
    # subcritical onset, common practice, no source). All hard rows fit under keep_hard,
    # so they must equal the saved rows with l1 > 0, and a smaller cap keeps a subset.
    table = {"s": {"distribution": "normal", "mean": -0.5, "sd": 1.0}}
    npz_path, hard_path = tmp_path / "draws.npz", tmp_path / "hard.csv"
    full = run_robustness(
        normal_form, 4000, seed=3, uncertainty=table, chunk_size=900, save=npz_path
    )
    z = np.load(npz_path)
    hard = z["l1"] > 0
    assert len(full.hard_samples["s"]) == full.subcritical == int(hard.sum()) > 0
    assert np.array_equal(np.sort(full.hard_samples["s"]), np.sort(z["s"][hard]))
    assert full.to_dict()["hard_samples_kept"] == full.subcritical
    assert full.write_hard_samples(hard_path) == full.subcritical
    rows = np.genfromtxt(hard_path, delimiter=",", names=True, dtype=None, encoding="utf-8")
    assert np.array_equal(np.sort(rows["s"]), np.sort(z["s"][hard]))
    capped = run_robustness(
        normal_form, 4000, seed=3, uncertainty=table, chunk_size=900, keep_hard=50
    )
    assert len(capped.hard_samples["s"]) == 50
    assert np.isin(capped.hard_samples["s"], z["s"][hard]).all()
    assert "hard-onset samples kept for inspection: 50 (a random subset)" in capped.summary()
    with pytest.raises(StudyError, match="keep_hard"):
        run_robustness(normal_form, 10, seed=1, uncertainty=table, keep_hard=-1)


def test_ctrl_c_returns_the_partial_result(normal_form):
    calls = []

    class Interrupting:
        def __getattr__(self, name):
            return getattr(normal_form, name)

        def batch(self, inputs, threads=None, **options):  # options: out= buffers
            calls.append(1)
            if len(calls) == 3:
                os.kill(os.getpid(), signal.SIGINT)
            return normal_form.batch(inputs, threads=threads, **options)

    before = signal.getsignal(signal.SIGINT)
    result = run_robustness(
        Interrupting(),
        100_000,
        seed=2,
        chunk_size=1000,
        uncertainty={"s": {"distribution": "normal", "sd": 1.0}},
        branch_steps=0,  # one batch call per chunk: the third call is the third chunk
    )
    assert result.interrupted
    assert result.samples == result.ok == 3000 and result.requested == 100_000
    assert "INTERRUPTED" in result.summary()
    assert signal.getsignal(signal.SIGINT) is before


def test_progress_only_when_asked_or_on_a_terminal(normal_form, capsys):
    table = {"s": {"distribution": "normal", "sd": 1.0}}
    run_robustness(normal_form, 2000, seed=1, uncertainty=table)  # stderr is not a tty here
    assert capsys.readouterr().err == ""
    run_robustness(normal_form, 2000, seed=1, uncertainty=table, progress=True)
    assert "sample" in capsys.readouterr().err


def test_report_ranking_and_json(pinch):
    table = {
        "k": {"distribution": "uniform", "low": 0.5, "high": 1.5},
        "s": {"distribution": "normal", "mean": 0.1, "sd": 1.0},
    }
    result = run_robustness(pinch, 20_000, seed=3, uncertainty=table)
    # l1 = 2 s / sqrt(k) is driven by s far more than by k over these ranges.
    assert result.ranking[0].name == "s" and result.ranking[0].srrc > 0.9
    report = json.loads(json.dumps(result.to_dict(), allow_nan=False))
    for key in (
        "samples",
        "probability_subcritical",
        "interval",
        "status_counts",
        "quantiles",
        "ranking",
    ):
        assert key in report
    assert report["samples"] == 20_000 and report["seed"] == 3
    text = result.summary()
    assert "Wilson" in text and "no substitute for testing" in text


def test_study_input_errors(normal_form):
    table = {"s": {"distribution": "normal", "sd": 1.0}}
    with pytest.raises(StudyError, match="samples"):
        run_robustness(normal_form, 0, uncertainty=table)
    with pytest.raises(StudyError, match="sampling method"):
        run_robustness(normal_form, 10, uncertainty=table, method="sobol")
    with pytest.raises(StudyError, match="unknown parameter"):
        run_robustness(normal_form, 10, uncertainty=table, fixed={"q": 1.0})
    with pytest.raises(StudyError, match=r"\[uncertainty\]"):
        run_robustness(normal_form, 10)  # the model declares none
    fresh = run_robustness(normal_form, 10, uncertainty=table)
    again = run_robustness(normal_form, 10, uncertainty=table, seed=fresh.seed)
    assert fresh.to_dict() == again.to_dict()


def test_plot_is_written(pinch, tmp_path):
    from lyacomp.studies.plots_robustness import plot_robustness

    table = {
        "k": {"distribution": "uniform", "low": -1.0, "high": 2.0},
        "s": {"distribution": "normal", "sd": 1.0, "mean": 0.0},
    }
    result = run_robustness(pinch, 5000, seed=3, uncertainty=table)
    path = plot_robustness(result, tmp_path / "rob.png")
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    none_ok = run_robustness(
        pinch,
        500,
        seed=3,
        uncertainty={"k": {"distribution": "uniform", "low": -2.0, "high": -1.0}},
    )
    assert none_ok.ok == 0 and math.isnan(none_ok.probability_subcritical)
    assert plot_robustness(none_ok, tmp_path / "none.png").stat().st_size > 0


# ---------------------------------------------------------------- command line


def _cli(monkeypatch):
    from lyacomp import cli
    from lyacomp.cli import robustness_cmd

    if robustness_cmd not in cli.SUBCOMMANDS:
        monkeypatch.setattr(cli, "SUBCOMMANDS", [*cli.SUBCOMMANDS, robustness_cmd])
    return cli.main


MODEL_TOML = """
name = "cli normal form"
[states]
x = 0.0
y = 0.0
[parameters]
mu = 0.0
s = 0.2
[equations]
x = "mu*x - y + s*x*(x**2 + y**2)"
y = "x + mu*y + s*y*(x**2 + y**2)"
[bifurcation]
parameter = "mu"
"""


def test_cli_json_plot_and_save(monkeypatch, tmp_path, capsys):
    main = _cli(monkeypatch)
    model = tmp_path / "nf.toml"
    model.write_text(MODEL_TOML + '[uncertainty]\ns = { distribution = "normal", sd = 0.5 }\n')
    png, npz = tmp_path / "l1.png", tmp_path / "draws.npz"
    code = main(
        [
            "robustness",
            str(model),
            "--samples",
            "20000",
            "--seed",
            "5",
            "--json",
            "--plot",
            str(png),
            "--save",
            str(npz),
        ]
    )
    out = capsys.readouterr().out
    assert code == 0
    report = json.loads(out)
    assert report["samples"] == 20_000 and report["status_counts"]["ok"] == 20_000
    lo, hi = report["interval"]
    # P(hard) = Phi(0.2 / 0.5) (normal CDF, scipy.stats.norm); 99.9% binomial band.
    exact = stats.norm.cdf(0.4)
    assert abs(report["probability_subcritical"] - exact) < 3.29 * math.sqrt(exact * 0.6 / 2e4)
    assert lo < report["probability_subcritical"] < hi
    assert report["ranking"][0]["parameter"] == "s"
    assert set(report["quantiles"]) >= {"l1", "critical_value", "omega", "amplitude_x"}
    assert png.read_bytes()[:4] == b"\x89PNG" and len(np.load(npz)["s"]) == 20_000
    code = main(["robustness", str(model), "--samples", "1000", "--seed", "5", "--set", "s=-0.5"])
    text = capsys.readouterr().out
    assert code == 0 and "Hard (subcritical) onset" in text and "s ~ normal(mean=-0.5" in text


def test_cli_errors_are_one_line(monkeypatch, tmp_path, capsys):
    main = _cli(monkeypatch)
    model = tmp_path / "nf.toml"
    model.write_text(MODEL_TOML)
    assert main(["robustness", str(model), "--samples", "100"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("lyacomp: error:") and "[uncertainty]" in err
    assert err.count("\n") == 1
    model.write_text(MODEL_TOML + '[uncertainty]\ns = { distribution = "normal" }\n')
    assert main(["robustness", str(model), "--samples", "100"]) == 2
    assert "needs the key(s) sd" in capsys.readouterr().err
