"""Shared checks of the lane path (several samples per SIMD lane) against the scalar path:
samples drawn around the nominal values, and a batch compared with one single call per
sample (status, integer codes, values to 1e-14 relative, the agreement issue 11 asks for).
The scalar path is the one the mpmath references and the published formulas check."""

from __future__ import annotations

import numpy as np

import lyacomp

RTOL = 1e-14
SCALARS = ("l1", "omega", "period", "critical_value", "transversality")
VECTORS = ("equilibrium", "amplitude")
CODES = ("criticality", "cycle_side", "stable_side", "unstable_count")


def draw_around(
    ev: lyacomp.Evaluator, count: int, spread: float, seed: int, jitter: float = 0.0
) -> dict:
    """Every parameter but the bifurcation one, uniform within +-spread of its nominal value
    (plus normal noise of size ``jitter``, which moves parameters whose nominal is 0)."""
    rng = np.random.default_rng(seed)
    values = {}
    for name, nominal in ev.nominal.items():
        if name == ev.bifurcation:
            continue
        values[name] = nominal * (1.0 + rng.uniform(-spread, spread, count))
        if jitter:
            values[name] = values[name] + rng.normal(0, jitter, count)
    return values


def assert_batch_matches_single(
    ev: lyacomp.Evaluator, values: dict, floors: dict[str, float] | None = None
) -> lyacomp.BatchResult:
    """Batch (lanes) against one scalar call per sample; returns the batch.

    ``floors``: per vector output, a lower bound of the scale its difference is measured
    against (states that start from zero are resolved against 1 + |x|, Newton's step size).
    """
    floors = floors or {}
    batch = ev.batch(values, threads=1)
    count = len(next(iter(values.values())))
    for i in range(count):
        one = ev({k: float(v[i]) for k, v in values.items()})
        assert int(one.status_code) == int(batch.status[i]), (i, one.status)
        if not one.ok:
            continue
        raw = one._raw  # the C result struct: the integer codes as the batch holds them
        for name in CODES:
            assert getattr(raw, name) == int(getattr(batch, name)[i]), (i, name)
        for name in SCALARS:
            a, b = getattr(one, name), float(getattr(batch, name)[i])
            # l1 is a sum of terms that cancel: a difference in the last place of one
            # product (or a few ulp of the vector math) is relative to the size of those
            # terms (l1_scale), not to l1.
            scale = max(abs(a), abs(b), raw.l1_scale if name == "l1" else 0.0)
            assert abs(a - b) <= RTOL * scale, (i, name, a, b)
        for name in VECTORS:
            a, b = np.array(list(getattr(one, name).values())), getattr(batch, name)[i]
            scale = max(np.max(np.abs(a)), floors.get(name, 0.0))
            assert np.max(np.abs(a - b)) <= RTOL * scale, (i, name, a, b)
    return batch
