"""lyacomp speed benchmark (issue 4): one command, ``python benchmarks/run.py [--quick]``.

Measures the compiled evaluator against two baselines built in the same run on the same
samples (B1 vectorized numpy, B2 per-sample scipy loop), checks that all three agree,
and reports compile times, call latency, scaling with n, streamed memory and GFLOP/s
against a peak measured in the same run. Prints markdown tables, writes
benchmarks/results.json and benchmarks/scaling.png. The machine is shared: every figure
is a median over repeats, and the load average is recorded. The compiled rates write into
output buffers kept across calls (``out=``, as the Monte Carlo study does); the rate with
fresh output arrays on 1 thread is reported beside them.
"""

from __future__ import annotations

import os

# Baselines are measured per core, like the single-threaded kernel. OpenBLAS threads also
# make small batched solves far slower here (measured: 16 ms against 1 ms for a 194 x 194
# solve), so pin them before numpy loads.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import argparse  # noqa: E402
import hashlib  # noqa: E402
import platform  # noqa: E402
import shutil  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
from dataclasses import dataclass  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))  # benchmark the lyacomp of this working tree

import bench_models  # noqa: E402
import compiled  # noqa: E402
import flops  # noqa: E402
import peak  # noqa: E402
import probes  # noqa: E402
import report  # noqa: E402
import selfcheck  # noqa: E402
import targets  # noqa: E402
from timing import load_average, median_rate  # noqa: E402

import lyacomp  # noqa: E402

AGREE_TOL = 1e-6
"""Agreement: max |a - b| / (1 + |b|) over samples and outputs (B2 uses scipy's default tol)."""
OUTPUTS = ("l1", "omega", "critical_value", "transversality", "equilibrium", "amplitude")


@dataclass(frozen=True)
class Settings:
    """Sample counts and repeats of a full or a quick run."""

    compiled_samples: int
    b1_samples: int
    b2_samples: int
    repeats: int
    compile_repeats: int
    ring_sizes: tuple[int, ...]
    ring_seconds: float
    memory_samples: int
    latency_blocks: int
    latency_calls: int
    peak_seconds: float
    flop_samples: int


FULL = Settings(10**6, 10**5, 1000, 3, 3, bench_models.RING_SIZES, 1.0, 10**8, 30, 1000, 0.5, 20000)
QUICK = Settings(10**5, 10**4, 100, 1, 1, (4, 8, 16), 0.2, 10**6, 5, 200, 0.2, 2000)


def agreement(ours, ref: dict, count: int) -> dict:
    """Largest mixed error of lyacomp's outputs against a baseline's on the first samples."""
    ok_ours = np.asarray(ours.ok)[:count]
    both = ok_ours & ref["ok"]
    errors = {}
    for key in OUTPUTS:
        a = np.asarray(getattr(ours, key))[:count][both]
        b = np.asarray(ref[key])[both]
        errors[key] = float(np.max(np.abs(a - b) / (1.0 + np.abs(b)))) if a.size else float("nan")
    return {
        "samples": count,
        "both_ok": int(both.sum()),
        "status_mismatch": int(np.count_nonzero(ok_ours != ref["ok"])),
        "max_err": max(errors.values()),
        "errors": errors,
    }


def baseline_rate(solve, samples: np.ndarray, repeats: int) -> tuple[dict, dict]:
    """Rate of a baseline ``solve(samples)`` and its last result."""
    holder = {}

    def call():
        holder["r"] = solve(samples)

    return median_rate(call, len(samples), repeats), holder["r"]


def compiled_rate(
    ev, inputs: dict, threads: int | None, repeats: int, kept: bool = True
) -> tuple[dict, object]:
    """Rate of ``ev.batch`` on ``inputs`` (threads None: all cores) and its last result.

    ``kept``: the outputs go into buffers kept across the calls (``out=``, mapped by the
    first, untimed call), as a streaming caller's do; each call of this function gets its
    own buffers, so the returned result stays valid. Otherwise every call returns fresh
    arrays, the previous result alive while the next call runs.
    """
    count = len(next(iter(inputs.values())))
    out = {"out": ev.batch_buffers(count)} if kept else {}
    holder = {}

    def call():
        holder["r"] = ev.batch(inputs, threads=threads, **out)

    return median_rate(call, count, repeats), holder["r"]


def fit_count(seconds_per_sample: float, budget: float, low: int, high: int) -> int:
    """Sample count that takes about ``budget`` seconds, clamped to [low, high]."""
    return int(min(high, max(low, budget / max(seconds_per_sample, 1e-9))))


def bench_model(
    label: str, path: Path, s: Settings, scratch: Path, compile_repeats: int, counts: dict | None
) -> dict:
    """Compile (cold and warm), time compiled vs B1 vs B2 on one sample set, check agreement.

    ``counts`` None sizes the sample counts to the measured cost (used for M4).
    """
    log(f"{label}: compile cold x{compile_repeats} and warm (fresh processes)")
    compile_info, cache = probes.compile_times(path, scratch, compile_repeats)
    os.environ["LYACOMP_CACHE_DIR"] = str(cache)
    model = lyacomp.load_model(path)
    ev = lyacomp.compile(model)
    log(f"{label}: baselines (symbolic setup, outside the timing)")
    base = bench_models.build_baselines(model)
    counts = counts or ring_counts(ev, model, base, s)
    n_compiled, n_b1, n_b2 = counts["compiled"], counts["b1"], counts["b2"]
    samples = bench_models.draw_samples(model, max(n_compiled, n_b1, n_b2), seed=20240)
    inputs = bench_models.batch_inputs(model, samples[:n_compiled])
    log(f"{label}: compiled, {n_compiled} samples, 1 thread and all threads")
    one, ours = compiled_rate(ev, inputs, 1, s.repeats)
    every, _ = compiled_rate(ev, inputs, None, s.repeats)
    fresh, _ = compiled_rate(ev, inputs, 1, s.repeats, kept=False)
    log(f"{label}: B1 on {n_b1} samples, B2 on {n_b2} samples")
    b1, ref1 = baseline_rate(base.b1.solve, samples[:n_b1], s.repeats)
    b2, ref2 = baseline_rate(base.b2.solve, samples[:n_b2], s.repeats)
    if n_compiled < max(n_b1, n_b2):
        ours = ev.batch(bench_models.batch_inputs(model, samples), threads=None)
    agree1 = agreement(ours, ref1, n_b1)
    agree2 = agreement(ours, ref2, n_b2)
    return {
        "states": len(model.state_names),
        "model_file": str(path.relative_to(HERE.parent))
        if path.is_relative_to(HERE.parent)
        else path.name,
        "compile": compile_info,
        "cache_key": ev.key,
        "compiled_1t": one,
        "compiled_all": every,
        "compiled_1t_fresh_outputs": fresh,
        "status_counts": ours.status_counts(),
        "b1": b1,
        "b2": b2,
        "ratios": {
            "compiled_1t_over_b1": one["rate"] / b1["rate"],
            "compiled_1t_over_b2": one["rate"] / b2["rate"],
            "all_over_1t": every["rate"] / one["rate"],
            "all_over_1t_per_cpu_second": every["cpu_rate"] / one["cpu_rate"],
            "compiled_1t_over_b1_cpu": one["cpu_rate"] / b1["cpu_rate"],
            "fresh_outputs_over_b1": fresh["rate"] / b1["rate"],
            "fresh_outputs_over_b1_cpu": fresh["cpu_rate"] / b1["cpu_rate"],
            "compiled_1t_over_b2_cpu": one["cpu_rate"] / b2["cpu_rate"],
        },
        "agreement": {
            "b1_max_err": agree1["max_err"],
            "b2_max_err": agree2["max_err"],
            "b1": agree1,
            "b2": agree2,
            "tolerance": AGREE_TOL,
            "ok": agree1["max_err"] <= AGREE_TOL
            and agree2["max_err"] <= AGREE_TOL
            and agree1["status_mismatch"] == 0
            and agree2["status_mismatch"] == 0,
        },
        "_ev": ev,
        "_model": model,
        "_samples": samples,
        "_cache": cache,
    }


def ring_counts(ev, model, base: bench_models.Baselines, s: Settings) -> dict:
    """Sample counts for M4-n: about ``ring_seconds`` per timing for lyacomp and B2.

    B1 gets as many samples as a memory budget allows (a few copies of the (3n+2)^2 Newton
    matrices in 200 MB), since its per-sample cost only settles on large batches.
    """
    samples = bench_models.draw_samples(model, 8, seed=1)
    per = {}
    for key, solve, count in (
        ("compiled", lambda p: ev.batch(bench_models.batch_inputs(model, p), threads=1), 8),
        ("b2", base.b2.solve, 2),
    ):
        solve(samples[:1])  # first calls pay one-time costs
        start = time.perf_counter()
        solve(samples[:count])
        per[key] = (time.perf_counter() - start) / count
    n = len(model.state_names)
    return {
        "compiled": fit_count(per["compiled"], s.ring_seconds, 64, s.compiled_samples),
        "b1": max(8, min(s.b1_samples, int(2e8 / (4 * 8 * (3 * n + 2) ** 2)))),
        "b2": fit_count(per["b2"], s.ring_seconds, 3, s.b2_samples),
    }


def log(message: str) -> None:
    print(f"[{time.strftime('%H:%M:%S')}] {message}", file=sys.stderr, flush=True)


def fit_exponent(ns: list[int], costs: list[float]) -> float:
    """Least-squares slope of log(cost) against log(n)."""
    return float(np.polyfit(np.log(ns), np.log(costs), 1)[0])


def measure_latency(models: dict, s: Settings) -> dict:
    """Scalar Python call and raw C call on M1..M3 (first sample's parameters)."""
    latency = {}
    for label in ("M1", "M2", "M3"):
        m = models[label]
        log(f"{label}: scalar call latency")
        row, model, ev = m["_samples"][0], m["_model"], m["_ev"]
        kwargs = {
            k: float(row[i]) for i, k in enumerate(model.parameter_names) if k != model.bifurcation
        }
        latency[label] = {
            "python": compiled.python_call(ev, kwargs, s.latency_calls, s.latency_blocks),
            "raw_c": compiled.raw_c_call(
                ev, [float(v) for v in row], s.latency_calls, s.latency_blocks
            ),
            "batch_1t_per_sample": 1.0 / m["compiled_1t"]["rate"],
        }
    return latency


def measure_limits(m1: dict, s: Settings, cores: int, quick: bool) -> tuple[dict, dict, dict]:
    """FMA peak, the M1 kernel's flops and GFLOP/s, and the cost of its slow operations."""
    log("peak: FMA-bound loop under lyacomp's flags")
    pk = peak.measure_peak(sorted({1, cores}), s.peak_seconds, s.repeats)
    log("M1: counting floating-point operations of the batch (lane) path")
    command, flags, _ = peak.toolchain_flags()
    # the path the timed rates ran: the batch, counted one lane wide (useful work only)
    fl = flops.count_kernel(m1["_ev"], m1["_samples"][: s.flop_samples], flags, command, batch=True)
    per = fl["flops_per_sample"]
    fl["gflops_1t"] = per * m1["compiled_1t"]["rate"] / 1e9
    fl["gflops_all"] = per * m1["compiled_all"]["rate"] / 1e9
    fl["fraction_of_peak_1t"] = fl["gflops_1t"] / pk["gflops_1t"]
    fl["fraction_of_peak_all"] = fl["gflops_all"] / pk[f"gflops_{cores}t"]
    # The same per CPU second: the kernel's efficiency on the core it got.
    fl["gflops_per_cpu_second"] = per * m1["compiled_1t"]["cpu_rate"] / 1e9
    fl["fraction_of_core_peak"] = fl["gflops_per_cpu_second"] / pk["gflops_per_cpu_second_1t"]
    log("cost of divisions, square roots and libm calls on one core")
    ops = peak.measure_op_costs(300_000 if quick else 2_000_000, s.repeats)
    slow = {
        "division": fl["divisions_per_sample"],
        "sqrt": fl["sqrt_per_sample"],
        **fl["libm_calls_per_sample"],
    }
    other = per - fl["divisions_per_sample"] - fl["sqrt_per_sample"]
    fl["time_per_sample_ns"] = 1e9 / m1["compiled_1t"]["cpu_rate"]
    fl["slow_ops_floor_ns"] = sum(c * ops[k] for k, c in slow.items() if k in ops)
    fl["slow_ops_untimed"] = sorted(k for k in slow if k not in ops)
    fl["other_flops_at_peak_ns"] = other / pk["gflops_per_cpu_second_1t"]
    return pk, fl, ops


def measure_lane_flops(models: dict, pk: dict, s: Settings) -> dict:
    """Flops per sample of the batch (lane) path of M2 and M3 and the share of the FMA peak
    they reach, per CPU second of the 1-thread run (issue 11).

    The figure is callgrind's count of executed instructions when valgrind is there (exact,
    4 lanes), else gcc's profile-weighted GIMPLE (8 lanes; its block counts are gcc's own
    where it copied code); both are kept when both run.
    """
    command, flags, _ = peak.toolchain_flags()
    out = {}
    for label in ("M2", "M3"):
        m = models[label]
        samples = m["_samples"][: s.flop_samples]
        log(f"{label}: counting floating-point operations of the batch (lane) path")
        entry = {"gimple": flops.count_kernel(m["_ev"], samples, flags, command, batch=True)}
        if shutil.which("valgrind") and shutil.which("objdump"):
            entry["callgrind"] = flops.count_executed(m["_ev"], samples, flags, command)
        used = entry.get("callgrind", entry["gimple"])
        entry["counted_by"] = "callgrind" if "callgrind" in entry else "gimple"
        entry["flops_per_sample"] = used["flops_per_sample"]
        entry["gflops_per_cpu_second"] = (
            used["flops_per_sample"] * m["compiled_1t"]["cpu_rate"] / 1e9
        )
        entry["fraction_of_core_peak"] = (
            entry["gflops_per_cpu_second"] / pk["gflops_per_cpu_second_1t"]
        )
        out[label] = entry
    return out


def measure_scaling(models: dict, ring: list[int], scratch: Path) -> dict:
    """Per-sample cost against n on M4, fitted exponents, and a perf profile at the largest n.

    Single-thread costs are taken per CPU second received: robust to other users' load.
    """
    per_n = {}
    for n in ring:
        m = models[f"M4-{n}"]
        per_n[str(n)] = {
            "compiled_1t_s": 1.0 / m["compiled_1t"]["cpu_rate"],
            "b1_s": 1.0 / m["b1"]["cpu_rate"],
            "b2_s": 1.0 / m["b2"]["cpu_rate"],
            "compiled_1t_wall_s": 1.0 / m["compiled_1t"]["rate"],
            "cold_compile_s": m["compile"]["cold_s"],
        }
    costs = {k: [per_n[str(n)][f"{k}_s"] for n in ring] for k in ("compiled_1t", "b1", "b2")}
    local = [
        fit_exponent(ring[i : i + 2], costs["compiled_1t"][i : i + 2]) for i in range(len(ring) - 1)
    ]
    biggest = models[f"M4-{ring[-1]}"]
    log(f"M4-{ring[-1]}: perf profile of one thread")
    samples = fit_count(1.0 / biggest["compiled_1t"]["rate"], 3.0, 64, 10**6)
    profile = probes.perf_profile(
        bench_models.model_path(f"M4-{ring[-1]}", scratch), samples, biggest["_cache"]
    )
    return {
        "per_n": per_n,
        "fit": {
            "compiled": fit_exponent(ring, costs["compiled_1t"]),
            "compiled_top3": fit_exponent(ring[-3:], costs["compiled_1t"][-3:]),
            "compiled_local": local,
            "b1": fit_exponent(ring, costs["b1"]),
            "b2": fit_exponent(ring, costs["b2"]),
        },
        "profile_n": ring[-1],
        "profile": profile,
    }


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="short smoke run (about a minute)")
    parser.add_argument("--json", type=Path, default=HERE / "results.json", help="JSON output")
    parser.add_argument("--plot", type=Path, default=HERE / "scaling.png", help="PNG output")
    parser.add_argument("--markdown", type=Path, help="also write the printed tables to this file")
    args = parser.parse_args(argv)
    s = QUICK if args.quick else FULL
    cores = len(os.sched_getaffinity(0))
    results: dict = {
        "command": "python benchmarks/run.py" + (" --quick" if args.quick else ""),
        "lyacomp_version": lyacomp.__version__,
        "machine": {
            "cpu": _cpu_name(),
            "cores": cores,
            "python": platform.python_version(),
            "numpy": np.__version__,
        },
        "load_average_start": load_average(),
        "templates_digest_start": templates_digest(),
        "settings": s.__dict__,
    }
    log("baselines: check against the published planar formula")
    results["baseline_check"] = selfcheck.planar_check()
    if not results["baseline_check"]["ok"]:
        print(f"baselines disagree with the planar formula: {results['baseline_check']}")
        return 1
    models: dict = {}
    with tempfile.TemporaryDirectory(prefix="lyacomp-bench-") as tmp:
        scratch = Path(tmp)
        fixed = {"compiled": s.compiled_samples, "b1": s.b1_samples, "b2": s.b2_samples}
        for label in ("M1", "M2", "M3"):
            path = bench_models.model_path(label, scratch)
            models[label] = bench_model(label, path, s, scratch, s.compile_repeats, fixed)
        for n in s.ring_sizes:
            label = f"M4-{n}"
            path = bench_models.model_path(label, scratch)
            # Only n = 32 has a compile-time target; one cold compile of the others is enough.
            repeats = s.compile_repeats if n == 32 else 1
            models[label] = bench_model(label, path, s, scratch, repeats, None)
        results["latency"] = measure_latency(models, s)
        m1 = models["M1"]
        results["peak"], results["flops"], results["op_costs_ns"] = measure_limits(
            m1, s, cores, args.quick
        )
        results["lane_flops"] = measure_lane_flops(models, results["peak"], s)
        results["scaling"] = measure_scaling(models, list(s.ring_sizes), scratch)
        log(f"M1: streamed robustness run, {s.memory_samples:.0e} samples (peak RSS)")
        results["memory"] = probes.streamed_memory(
            bench_models.model_path("M1", scratch),
            s.memory_samples,
            bench_models.uncertainty_table(m1["_model"]),
            m1["_cache"],
        )
    # Drop the live objects (evaluator, samples) kept for the later sections.
    results["models"] = {
        label: {k: v for k, v in m.items() if not k.startswith("_")} for label, m in models.items()
    }
    results["load_average_end"] = load_average()
    results["templates_digest_end"] = templates_digest()
    results["targets"] = targets.check_targets(results)
    text = report.markdown(results, AGREE_TOL)
    print(text, end="")
    if args.markdown:
        args.markdown.write_text(text)
    report.write_json(args.json, results)
    report.plot_scaling(args.plot, results["scaling"])
    log(f"wrote {args.json} and {args.plot}")
    return 0 if all(m["agreement"]["ok"] for m in results["models"].values()) else 1


def templates_digest() -> str:
    """Hash of the C templates, to detect a change of the core while the benchmark runs."""
    digest = hashlib.sha256()
    for path in sorted((HERE.parent / "templates").glob("*")):
        digest.update(path.name.encode() + path.read_bytes())
    return digest.hexdigest()[:16]


def _cpu_name() -> str:
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown CPU"


if __name__ == "__main__":
    sys.exit(main())
