"""Single-threaded batch calls, for ``perf record`` (run by probes.perf_profile).

Usage: python profile_probe.py MODEL.toml SAMPLES  (LYACOMP_CACHE_DIR holds the compiled model)
Draws at most 20000 samples once and repeats the batch call until SAMPLES evaluations are
done, so that numpy's own work stays a small part of the profile.
"""

from __future__ import annotations

import sys

from bench_models import batch_inputs, draw_samples

import lyacomp

BLOCK = 20000


def main(path: str, samples: int) -> None:
    model = lyacomp.load_model(path)
    ev = lyacomp.compile(model)
    inputs = batch_inputs(model, draw_samples(model, min(samples, BLOCK), seed=7))
    for _ in range(max(1, samples // BLOCK)):
        ev.batch(inputs, threads=1)


if __name__ == "__main__":
    main(sys.argv[1], int(sys.argv[2]))
