"""M4 step by step (issue 11): per-sample cost of the ring for consecutive n, B1 at the
largest n in the same run, and the counted flops per sample at the largest n.

Usage: python benchmarks/ring_steps.py [--sizes 3,4,5,...] [--samples-budget SECONDS]

Every figure is 1 thread; single-thread costs are CPU seconds per sample (the machine is
shared), wall time beside them. Prints a markdown table and the ratios the issue targets:
the largest step between consecutive n, the largest n against B1, flops / n^3.
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import argparse  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))  # the lyacomp of this working tree

import bench_models  # noqa: E402
import flops  # noqa: E402
import peak  # noqa: E402
from timing import median_rate  # noqa: E402

import lyacomp  # noqa: E402

DEFAULT_SIZES = (3, 4, 5, 6, 7, 8, 12, 16, 17, 24, 32, 33, 48, 64)


def cost(ev, model, budget: float, repeats: int = 3) -> dict:
    """CPU and wall seconds per sample of ev.batch on 1 thread, about ``budget`` s per repeat."""
    probe = bench_models.batch_inputs(model, bench_models.draw_samples(model, 8, seed=3))
    start = time.process_time()
    ev.batch(probe, threads=1)
    per = max((time.process_time() - start) / 8, 1e-7)
    count = int(min(max(budget / per, 16), 200_000))
    inputs = bench_models.batch_inputs(model, bench_models.draw_samples(model, count, seed=5))
    holder = {}

    def call():
        holder["r"] = ev.batch(inputs, threads=1)

    rate = median_rate(call, count, repeats)
    ok = float(holder["r"].ok.mean())
    return {"cpu_s": 1.0 / rate["cpu_rate"], "wall_s": 1.0 / rate["rate"], "ok": ok, "n": count}


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default=",".join(map(str, DEFAULT_SIZES)))
    parser.add_argument("--samples-budget", type=float, default=0.5)
    args = parser.parse_args(argv)
    sizes = [int(v) for v in args.sizes.split(",")]
    rows = []
    with tempfile.TemporaryDirectory(prefix="lyacomp-ring-") as tmp:
        scratch = Path(tmp)
        os.environ["LYACOMP_CACHE_DIR"] = str(scratch / "cache")
        for n in sizes:
            model = lyacomp.load_model(bench_models.model_path(f"M4-{n}", scratch))
            start = time.perf_counter()
            ev = lyacomp.compile(model)
            compile_s = time.perf_counter() - start
            rows.append({"size": n, "compile_s": compile_s, **cost(ev, model, args.samples_budget)})
            print(f"n={n}: {rows[-1]}", file=sys.stderr)
        largest = sizes[-1]
        model = lyacomp.load_model(bench_models.model_path(f"M4-{largest}", scratch))
        ev = lyacomp.compile(model)
        base = bench_models.build_baselines(model)
        samples = bench_models.draw_samples(model, 200, seed=5)
        b1 = median_rate(lambda: base.b1.solve(samples), len(samples), 3)
        command, flags, _ = peak.toolchain_flags()
        counted = flops.count_kernel(ev, samples[:20], flags, command)
    print("| n | CPU us/sample | wall us/sample | step from previous n | ok | compile [s] |")
    print("|---|---|---|---|---|---|")
    worst = 0.0
    for i, r in enumerate(rows):
        step = ""
        if i and sizes[i] == sizes[i - 1] + 1:
            ratio = r["cpu_s"] / rows[i - 1]["cpu_s"]
            worst = max(worst, ratio)
            step = f"{ratio:.2f}x"
        print(
            f"| {r['size']} | {r['cpu_s'] * 1e6:.3g} | {r['wall_s'] * 1e6:.3g} | {step} | "
            f"{r['ok']:.3f} | {r['compile_s']:.2f} |"
        )
    b1_s = 1.0 / b1["cpu_rate"]
    ours = rows[-1]["cpu_s"]
    total = counted["flops_per_sample"]
    calls = counted["libm_calls_per_sample"]
    print()
    print(f"largest step between consecutive n: {worst:.2f}x")
    print(
        f"n={largest}: B1 {b1_s * 1e6:.4g} us/sample CPU, lyacomp {ours * 1e6:.4g}: "
        f"{b1_s / ours:.2f}x B1"
    )
    print(f"n={largest}: {total:.4g} flops per sample counted = {total / largest**3:.2f} n^3")
    print(f"n={largest}: library calls per sample: {calls or 'none'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
