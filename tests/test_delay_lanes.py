"""The lane path of delay models (templates/delay_lanes.c.j2) against the scalar path.

Warm batch calls of delay models with one or two states and a bifurcation parameter run
the reduced Hopf Newton on several samples per SIMD lane; single calls run the scalar
code, which the mpmath reference (test_delay_reference.py) and the published values
(Wright's equation there) check. Here the two paths must give the same status on every
sample and values equal to 1e-14 relative, at the width of this machine and at the forced
widths 1 and 2, including samples that leave the fast path (wide draws, NaN, infinity)
and samples that fail. The lanes repeat the scalar operations in the same order and call
libm lane by lane (never the vector math); with gcc 12 the values are equal.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest

import lyacomp
from lyacomp.config import BuildConfig
from tests.delay_models import random_delay_model, wright_model
from tests.lane_checks import assert_batch_matches_single, draw_around

BURNER = Path(__file__).resolve().parent.parent / "examples" / "lagged_burner.toml"


def _config(lanes: int) -> BuildConfig:
    return dataclasses.replace(BuildConfig.from_environment(), lanes=lanes)


def _samples(ev: lyacomp.Evaluator, count: int, spread: float, seed: int) -> dict:
    values = draw_around(ev, count, spread, seed)
    first = next(iter(values))
    values[first][5] = np.nan  # leaves the fast path: non-finite input
    values[first][11] = np.inf
    return values


def _assert_same(ev: lyacomp.Evaluator, values: dict) -> dict[str, int]:
    """Batch (lanes) against one scalar call per sample; returns the status counts."""
    # A term such as exp(u) - 1 - u is known to an ulp of 1 only, so equilibria near zero
    # are compared against 1 + |x| (Newton's step size).
    return assert_batch_matches_single(ev, values, floors={"equilibrium": 1.0}).status_counts()


@pytest.mark.parametrize("lanes", [0, 1, 2])
def test_burner_lanes_agree_with_the_scalar_path(lanes):
    # Reference: the scalar path of the same evaluator (checked against mpmath elsewhere).
    ev = lyacomp.compile(BURNER, config=_config(lanes))
    narrow = _assert_same(ev, _samples(ev, 400, 0.05, seed=3))
    assert narrow.get("ok", 0) >= 395  # the fast path is what is compared
    wide = _assert_same(ev, _samples(ev, 200, 0.8, seed=4))  # fallbacks and failures
    assert sum(wide.values()) - wide.get("ok", 0) >= 3


@pytest.mark.parametrize("lanes", [0, 1, 2])
@pytest.mark.parametrize(
    ("seed", "two_delays", "bifurcation"), [(1, False, "mu"), (5, True, "mu"), (7, True, "tau1")]
)
def test_random_delay_model_lanes_agree_with_the_scalar_path(seed, two_delays, bifurcation, lanes):
    # Reference: the scalar path; the models are those of test_delay_reference.py (with
    # tau1 as the bifurcation parameter the delay moves with it: tau' = 1).
    rm = random_delay_model(seed, 2, two_delays)
    model = lyacomp.Model(
        name=f"random lanes {seed}",
        states={s: 0.0 for s in rm.states},
        parameters={**rm.params, bifurcation: rm.params[bifurcation] * 1.002},
        equations=rm.equations,
        bifurcation=bifurcation,
    )
    ev = lyacomp.compile(model, config=_config(lanes))
    narrow = _assert_same(ev, _samples(ev, 150, 0.03, seed=seed))
    assert narrow.get("ok", 0) >= 100  # seed 5 also fails to converge on some samples
    _assert_same(ev, _samples(ev, 100, 0.5, seed=seed + 100))


@pytest.mark.parametrize("lanes", [0, 1, 2])
def test_wright_equation_lanes_agree_with_the_scalar_path(lanes):
    # Reference: the scalar path; one state (Wright's equation, Hopf at r tau = pi/2).
    model = wright_model("wright lanes", {"r": 1.5, "tau": 1.0}, bifurcation="r")
    ev = lyacomp.compile(model, config=_config(lanes))
    assert _assert_same(ev, _samples(ev, 100, 0.2, seed=11)).get("ok", 0) >= 95


@pytest.mark.parametrize("lanes", [0, 2])
def test_lanes_count_many_unstable_roots_as_the_scalar_path(lanes):
    # Reference: the scalar path (its counts are checked against a Chebyshev collocation in
    # test_delay_roots.py). Longer delays keep the constructed root i omega and put more
    # roots right of the axis; the lane count takes many more steps there.
    rm = random_delay_model(13, 2, False)
    tau1 = rm.params["tau1"] + 2 * np.pi / rm.omega
    model = lyacomp.Model(
        name="random lanes long",
        states={s: 0.0 for s in rm.states},
        parameters={**rm.params, "tau1": tau1, "mu": 1.002},
        equations=rm.equations,
        bifurcation="mu",
    )
    ev = lyacomp.compile(model, config=_config(lanes))
    values = _samples(ev, 120, 0.02, seed=12)
    assert _assert_same(ev, values).get("ok", 0) >= 100
    assert np.max(ev.batch(values, threads=1).unstable_count) >= 2
