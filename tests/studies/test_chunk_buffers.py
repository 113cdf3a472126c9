"""The robustness study's chunks write their batch outputs into kept buffers: the same bits as
with fresh arrays, for every chunk size up to the buffers' capacity, and with the branch
check's steps in buffers of their own."""

from __future__ import annotations

import numpy as np

from lyacomp.studies.robustness import (
    ChunkBuffers,
    evaluate_chunk,
    off_nominal_branch,
    study_setup,
)

# the branch x0 = -a exists for every a > 0; samples with large a land on x0 = +a when
# solved from the nominal point (see the two_wells fixture; common practice, no source)
UNCERTAINTY = {
    "a": {"distribution": "uniform", "low": 0.5, "high": 3.0},
    "c": {"distribution": "uniform", "low": 0.4, "high": 0.6},
}


def test_chunks_with_kept_buffers_equal_fresh_ones(two_wells):
    spec, _ = study_setup(two_wells, UNCERTAINTY, None)
    buffers = ChunkBuffers.make(two_wells, 3000)
    marked_total = 0
    for chunk, m in enumerate((3000, 1200, 3000, 17)):
        for threads in (1, 2):
            fresh = evaluate_chunk(two_wells, spec, {}, 7, chunk, m, "random", threads)
            kept = evaluate_chunk(
                two_wells, spec, {}, 7, chunk, m, "random", threads, buffers=buffers
            )
            for a, b in zip(fresh[:4], kept[:4], strict=True):
                np.testing.assert_array_equal(a, b)
            assert fresh[4] == kept[4]
            # the returned arrays are the chunk's own, not views on the buffers
            assert not any(
                np.shares_memory(a, b) for a in kept[:4] for b in buffers.samples.arrays()
            )
        marked_total += fresh[4]["off_branch"]
    assert marked_total > 0  # samples on the other branch are present: the check can fail


def test_branch_check_in_kept_buffers_marks_the_other_branch(two_wells):
    # mu0 = c x0 (the two_wells fixture): samples solved onto x0 = +a have mu0 > 0, and
    # exactly those are off the nominal branch x0 = -a.
    spec, _ = study_setup(two_wells, UNCERTAINTY, None)
    rng = np.random.default_rng(2)
    draws = {"a": rng.uniform(0.5, 3.0, 2000), "c": rng.uniform(0.4, 0.6, 2000)}
    values = np.column_stack([draws[n] for n in spec.names])
    inputs = {n: values[:, j] for j, n in enumerate(spec.names)}
    batch = two_wells.batch(inputs)
    buffers = two_wells.batch_buffers(2500)
    marked = off_nominal_branch(two_wells, spec, {}, values, batch, 4, 2, buffers)
    np.testing.assert_array_equal(marked, off_nominal_branch(two_wells, spec, {}, values, batch))
    other = batch.ok & (batch.critical_value > 0)
    assert other.any() and (batch.ok & ~other).any()
    np.testing.assert_array_equal(marked, other)
