"""The operating-point search against the guess-based search, in one run.

Both searches evaluate the same parameter samples (every parameter but the bifurcation
parameter within +-5 % of nominal, as in the main benchmark) on one thread, on M2, M3 and
the ring of 8 stages (M4-8). The guess-based search starts Newton from the Hopf point
solved at nominal values (the fast path); the operating-point search follows each
sample's equilibrium from a stable operating value to its first loss of stability and
refines the Hopf point there. Prints per-sample wall and CPU times, their ratios, and
how many samples agree (same Hopf point to 1e-9 relative).

    python benchmarks/operating_bench.py [--samples 2000] [--repeats 5]
"""

from __future__ import annotations

import argparse
import statistics
import tempfile
from pathlib import Path

import numpy as np
from bench_models import batch_inputs, draw_samples, model_path
from timing import load_average, repeat

import lyacomp

OPERATING = {"M2": 0.0, "M3": 0.3, "M4-8": 0.3}
"""Operating values of the bifurcation parameter (tow, ki, g) where each benchmark model's
equilibrium is stable; the searches move up toward the guesses."""


def _median_per_sample(fn, count: int, repeats: int) -> tuple[float, float]:
    wall, cpu = repeat(fn, repeats)
    return statistics.median(wall) / count, statistics.median(cpu) / count


def measure(label: str, workdir: Path, count: int, repeats: int, seed: int) -> dict:
    """Per-sample times of both searches on one model, and their agreement."""
    ev = lyacomp.compile(model_path(label, workdir))
    inputs = batch_inputs(ev.model, draw_samples(ev.model, count, seed))
    operating = OPERATING[label]

    def guess():
        return ev.batch(inputs, threads=1, search="guess")

    def from_operating():
        return ev.batch(inputs, threads=1, operating=operating)

    g, o = guess(), from_operating()
    both = g.ok & o.ok
    same = both & np.isclose(g.critical_value, o.critical_value, rtol=1e-9, atol=0.0)
    guess_wall, guess_cpu = _median_per_sample(guess, count, repeats)
    op_wall, op_cpu = _median_per_sample(from_operating, count, repeats)
    return {
        "label": label,
        "guess": (guess_wall, guess_cpu),
        "operating": (op_wall, op_cpu),
        "ok": (int(g.ok.sum()), int(o.ok.sum())),
        "same": int(same.sum()),
        "steps": float(np.median(o.search_steps)),
        "count": count,
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=2000)
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--seed", type=int, default=11)
    args = parser.parse_args()
    print(f"load average before: {load_average()}")
    with tempfile.TemporaryDirectory() as tmp:
        rows = [
            measure(label, Path(tmp), args.samples, args.repeats, args.seed) for label in OPERATING
        ]
    print(f"load average after: {load_average()}")
    print(
        f"{'model':6} {'guess wall/cpu (us)':>22} {'operating wall/cpu (us)':>25} "
        f"{'ratio wall':>10} {'ratio cpu':>9} {'steps':>5} {'ok g/o':>11} {'same':>6}"
    )
    for r in rows:
        gw, gc = r["guess"]
        ow, oc = r["operating"]
        print(
            f"{r['label']:6} {gw * 1e6:10.2f} /{gc * 1e6:9.2f} {ow * 1e6:12.2f} /{oc * 1e6:10.2f} "
            f"{ow / gw:10.1f} {oc / gc:9.1f} {r['steps']:5.0f} "
            f"{r['ok'][0]:5d}/{r['ok'][1]:<5d} {r['same']:6d}"
        )
    print(f"samples per model: {args.samples}, one thread, median of {args.repeats} repeats")


if __name__ == "__main__":
    main()
