"""The derivative stage in SIMD lanes against the scalar derivative stage.

``ev.batch(..., derivatives=True)`` of a two- or three-state model runs the derivative
stage in lanes (templates/stage_lanes_sensitivity.c.j2); a single call
``ev(..., derivatives=True)`` runs the scalar stage (templates/stage_sensitivity.c.j2),
which tests/test_derivatives.py checks against an independent 40-digit mpmath reference
and against central differences. Here the two must agree on every sample's status and, per
sample and quantity, to 1e-13 relative to the largest derivative of that quantity (single
derivatives that vanish by the model's structure, such as d(pos)/dp in M3 where the
equilibrium is pos = r, are exact zeros only up to rounding, so an elementwise relative
test would compare rounding noise). Widths: this machine's, and the forced portable widths
1 and 2, with samples that take the scalar stage (NaN input, wide draws, a remainder
block).
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest

import lyacomp
from lyacomp.config import BuildConfig
from tests.lane_checks import draw_around
from tests.test_derivatives import NONLINEAR_MU
from tests.test_reference_mpmath import build_family, draw_parameters

BENCH_MODELS = Path(__file__).resolve().parent.parent / "benchmarks" / "models"
RTOL = 1e-13
QUANTITIES = ("l1", "critical_value", "omega")


def _compile(model, lanes: int) -> lyacomp.Evaluator:
    config = dataclasses.replace(BuildConfig.from_environment(), lanes=lanes)
    return lyacomp.compile(model, config=config, derivatives=True)


def _samples(ev: lyacomp.Evaluator, count: int, spread: float, seed: int) -> dict:
    values = draw_around(ev, count, spread, seed)
    values[next(iter(values))][3] = np.nan  # no Hopf point: its block mixes both stages
    return values


def _assert_same(ev: lyacomp.Evaluator, values: dict) -> int:
    """Batch (lane stage) against one scalar call per sample; returns the ok count."""
    batch = ev.batch(values, threads=1, derivatives=True)
    names = ev.derivative_parameters
    count = len(next(iter(values.values())))
    ok = 0
    for i in range(count):
        one = ev({k: float(v[i]) for k, v in values.items()}, derivatives=True)
        assert int(one.status_code) == int(batch.status[i]), (i, one.status)
        if one.derivatives is None:
            assert np.isnan(batch.derivatives["l1"][i]).all(), i
            continue
        ok += 1
        for q in QUANTITIES:
            a = np.array([one.derivatives[q][p] for p in names])
            b = batch.derivatives[q][i]
            assert np.max(np.abs(a - b)) <= RTOL * np.max(np.abs(a)), (i, q, a, b)
        a = np.array([[one.derivatives["equilibrium"][s][p] for s in ev.states] for p in names])
        b = batch.derivatives["equilibrium"][i]
        assert np.max(np.abs(a - b)) <= RTOL * np.max(np.abs(a)), (i, "equilibrium", a, b)
    return ok


@pytest.mark.parametrize("lanes", [0, 1, 2])
@pytest.mark.parametrize("model", ["m1_pilot_valve", "m2_towed_sensor", "m3_servo_integral"])
def test_lane_derivatives_agree_with_scalar_stage_on_benchmark_models(model, lanes):
    # Reference: the scalar derivative stage (checked against mpmath in test_derivatives.py).
    ev = _compile(lyacomp.load_model(BENCH_MODELS / f"{model}.toml"), lanes)
    assert _assert_same(ev, _samples(ev, 203, 0.05, seed=7)) >= 200
    _assert_same(ev, _samples(ev, 61, 0.6, seed=8))  # wide draws: failures and fallbacks


@pytest.mark.parametrize("lanes", [0, 1])
def test_lane_derivatives_agree_with_scalar_stage_on_other_models(lanes):
    # Reference: the scalar derivative stage. The bifurcation parameter enters nonlinearly
    # in NONLINEAR_MU; the family is the 3-state one of test_reference_mpmath.py.
    ev = _compile(NONLINEAR_MU, lanes)
    assert _assert_same(ev, _samples(ev, 67, 0.05, seed=9)) > 0
    family = build_family(3, 11, 3)
    ev = _compile(family.model("random3"), lanes)
    rng = np.random.default_rng(1011)
    draws = [draw_parameters(family, rng) for _ in range(41)]
    values = {k: np.array([d[k] for d in draws]) for k in ev.parameters if k != ev.bifurcation}
    assert _assert_same(ev, values) > 0
