"""Cost of the exact parameter derivatives against one plain evaluation (M2, M3).

For each model the same batch of perturbed parameter sets is evaluated plain and with
``derivatives=True`` (every parameter other than the bifurcation parameter), one thread,
alternating the two in each repeat so that both see the same machine load. Prints the
medians of wall and CPU time per sample and their ratios; the target is at most 3x. The
derivative batch runs the plain batch and then the derivative stage at its solved points
(in SIMD lanes for two and three states, like the plain batch), so its results are the
plain batch's (to rounding: the two libraries are compiled apart;
checked before timing). On a loaded machine the
CPU-time ratio is the one to read; callgrind's instruction counts do not depend on load.
Run: python benchmarks/derivatives_cost.py [--samples N] [--repeats R]
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

import lyacomp  # noqa: E402
from benchmarks.timing import load_average  # noqa: E402

MODELS = ("m2_towed_sensor.toml", "m3_servo_integral.toml")


def _inputs(ev: lyacomp.Evaluator, samples: int) -> dict[str, np.ndarray]:
    """Each parameter other than the bifurcation parameter within +-2 % of nominal."""
    rng = np.random.default_rng(5)
    return {
        name: value * (1.0 + 0.02 * rng.uniform(-1.0, 1.0, samples))
        for name, value in ev.nominal.items()
        if name != ev.bifurcation
    }


def _timed(fn) -> tuple[float, float]:
    start, start_cpu = time.perf_counter(), time.process_time()
    fn()
    return time.perf_counter() - start, time.process_time() - start_cpu


def measure(path: Path, samples: int, repeats: int) -> dict:
    ev = lyacomp.compile(path)
    inputs = _inputs(ev, samples)
    plain = ev.batch(inputs, threads=1)
    full = ev.batch(inputs, threads=1, derivatives=True)
    # the plain and the derivative library are compiled apart: equal to rounding
    assert np.allclose(plain.l1, full.l1, rtol=1e-13, atol=0, equal_nan=True)
    walls: dict[str, list[float]] = {"plain": [], "derivatives": []}
    cpus: dict[str, list[float]] = {"plain": [], "derivatives": []}
    for _ in range(repeats):
        for kind, options in (("plain", {}), ("derivatives", {"derivatives": True})):
            wall, cpu = _timed(lambda o=options: ev.batch(inputs, threads=1, **o))
            walls[kind].append(wall / samples)
            cpus[kind].append(cpu / samples)
    med = {k: statistics.median(v) for k, v in walls.items()}
    med_cpu = {k: statistics.median(v) for k, v in cpus.items()}
    return {
        "model": ev.model.name,
        "states": len(ev.states),
        "parameters_differentiated": len(ev.derivative_parameters),
        "ok_fraction": float(plain.ok.mean()),
        "wall_per_sample_s": med,
        "cpu_per_sample_s": med_cpu,
        "ratio_wall": med["derivatives"] / med["plain"],
        "ratio_cpu": med_cpu["derivatives"] / med_cpu["plain"],
    }


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=20_000)
    parser.add_argument("--repeats", type=int, default=7)
    parser.add_argument("--json", action="store_true")
    args = parser.parse_args(argv)
    load_before = load_average()
    rows = [measure(HERE / "models" / m, args.samples, args.repeats) for m in MODELS]
    if args.json:
        print(json.dumps({"load_average": load_before, "models": rows}, indent=2))
        return 0
    print(f"load average before: {load_before}")
    print(
        f"{'model':<20} {'params':>6} {'plain us':>9} {'deriv us':>9} {'ratio':>6}"
        f" {'plain cpu':>10} {'deriv cpu':>10} {'ratio':>6}"
    )
    for r in rows:
        w, c = r["wall_per_sample_s"], r["cpu_per_sample_s"]
        print(
            f"{r['model']:<20} {r['parameters_differentiated']:>6} {1e6 * w['plain']:>9.3f}"
            f" {1e6 * w['derivatives']:>9.3f} {r['ratio_wall']:>6.2f}"
            f" {1e6 * c['plain']:>10.3f} {1e6 * c['derivatives']:>10.3f} {r['ratio_cpu']:>6.2f}"
        )
    print("target: derivatives for all parameters at most 3x one plain evaluation")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
