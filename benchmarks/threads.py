"""Batch speed on 1 and on 2 threads, with fresh and with kept outputs (issue 11: 2 threads
>= 1.8x 1 thread on 10^6 samples).

``python benchmarks/threads.py [--count 1000000] [--repeats 3] [--models M1 M2 M3]`` times
``Evaluator.batch`` on the benchmark's samples with ``threads=1`` and ``threads=2``, each
two ways: fresh outputs (``r = ev.batch(inputs)`` in a loop, the previous result alive while
the next call runs, so every call writes into new pages) and kept outputs
(``ev.batch(inputs, out=buffers)`` with ``buffers = ev.batch_buffers(count)`` made once, so
the pages are mapped after the first call). Per model and way it prints the median wall and
CPU time of each thread count, the speedup by wall time, the cores the 2-thread call got
(CPU over wall time), the work per CPU second of 2 threads against 1, the speedup that
projects on 2 free cores (twice that ratio), and the minor page faults per timed call (and
of the first, untimed call).

The machine is shared: when the 2-thread call got less than 2 cores the wall-time speedup
says more about the other users than about lyacomp; the work per CPU second (about 1.0 when
the threads do not slow each other down) and the page faults are the figures to read then.
All four calls must give the same results, bit for bit (samples are independent).

Fresh outputs are mapped and zeroed by the kernel on first write (one page fault per 4 KiB):
about a third of a light model's time (M1). The C driver has each thread first touch its
own share of the fresh pages (before, threads writing into the same pages at once spent 1.6
times the CPU time of one thread on M1); kept outputs skip the faults altogether.
"""

from __future__ import annotations

import argparse
import dataclasses
import os
import resource
import statistics
import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent))  # the lyacomp of this working tree

from bench_models import FILES, MODEL_DIR, batch_inputs, draw_samples  # noqa: E402
from timing import load_average, median_rate  # noqa: E402

import lyacomp  # noqa: E402

TARGET = 1.8
WAYS = ("fresh", "kept")


def _minor_faults() -> int:
    return resource.getrusage(resource.RUSAGE_SELF).ru_minflt


def batch_rate(ev, inputs: dict, threads: int | None, repeats: int, kept: bool) -> dict:
    """Rate of ``ev.batch(inputs, threads=threads)`` (``median_rate``), the median minor page
    faults of the timed calls (``faults``) and the last result (``result``): with ``kept``
    into buffers made once for this measurement, else into fresh arrays with the previous
    result alive while the next call runs (as a caller's ``r = ev.batch(...)`` loop keeps
    it)."""
    count = len(next(iter(inputs.values())))
    out = {"out": ev.batch_buffers(count)} if kept else {}
    holder, faults = {}, []

    def call():
        before = _minor_faults()
        holder["r"] = ev.batch(inputs, threads=threads, **out)
        faults.append(_minor_faults() - before)

    rate = median_rate(call, count, repeats)  # after one untimed call (thread pool, heap)
    rate["faults"] = int(statistics.median(faults[1:]))
    rate["faults_first_call"] = faults[0]
    rate["result"] = holder["r"]
    return rate


def _same(a, b) -> bool:
    """Every array field of two batch results equal, NaN where NaN."""
    return all(
        np.array_equal(getattr(a, f.name), getattr(b, f.name), equal_nan=True)
        for f in dataclasses.fields(a)
        if isinstance(getattr(a, f.name), np.ndarray)
    )


def thread_scaling(ev, inputs: dict, repeats: int) -> dict:
    """1 against 2 threads with fresh and with kept outputs: per way the rates of both thread
    counts (``median_rate`` plus ``faults``), the wall-time speedup, the cores the 2-thread
    call got, the work per CPU second of 2 threads against 1 and the speedup that projects
    on 2 free cores; ``same_results``: all four calls equal bit for bit. (For run.py's thread
    section: the figures of one model.)"""
    out: dict = {}
    results = []
    for way in WAYS:
        rates = {t: batch_rate(ev, inputs, t, repeats, way == "kept") for t in (1, 2)}
        results += [rates[1].pop("result"), rates[2].pop("result")]
        per_cpu = rates[2]["cpu_rate"] / rates[1]["cpu_rate"]
        out[way] = {
            "rates": rates,
            "speedup_wall": rates[2]["rate"] / rates[1]["rate"],
            "cores_used_2t": rates[2]["cores_used"],
            "work_per_cpu_second_2t_over_1t": per_cpu,
            "projected_speedup_2_free_cores": 2 * per_cpu,
        }
    out["same_results"] = all(_same(results[0], r) for r in results[1:])
    return out


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--count", type=int, default=1_000_000)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--models", nargs="+", default=["M1", "M2", "M3"], choices=sorted(FILES))
    args = parser.parse_args()
    print(f"cores available: {len(os.sched_getaffinity(0))}, load average {load_average()}")
    print(
        "| model | outputs | 1 thread wall / CPU | 2 threads wall / CPU | speedup (wall) "
        "| cores the 2 threads got | work per CPU second, 2t / 1t | projected on 2 free cores "
        "| CPU ns per sample, 1t / 2t | page faults per call, 1t / 2t (first call) "
        "| same results |"
    )
    print("|---|---|---|---|---|---|---|---|---|---|---|")
    ok = True
    for label in args.models:
        model = lyacomp.load_model(MODEL_DIR / FILES[label])
        ev = lyacomp.compile(model)
        inputs = batch_inputs(model, draw_samples(model, args.count, seed=20240))
        r = thread_scaling(ev, inputs, args.repeats)
        for way in WAYS:
            w = r[way]
            one, two = w["rates"][1], w["rates"][2]
            print(
                f"| {label} | {way} | {args.count / one['rate']:.3f} s / "
                f"{args.count / one['cpu_rate']:.3f} s | {args.count / two['rate']:.3f} s / "
                f"{args.count / two['cpu_rate']:.3f} s | {w['speedup_wall']:.2f}x "
                f"| {w['cores_used_2t']:.2f} | {w['work_per_cpu_second_2t_over_1t']:.2f} "
                f"| {w['projected_speedup_2_free_cores']:.2f}x "
                f"| {1e9 / one['cpu_rate']:.0f} / {1e9 / two['cpu_rate']:.0f} "
                f"| {one['faults']} / {two['faults']} "
                f"({one['faults_first_call']} / {two['faults_first_call']}) "
                f"| {'yes' if r['same_results'] else 'NO'} |"
            )
        ok &= r["same_results"]
    print(f"load average at the end {load_average()}")
    print(
        f"target: 2 threads >= {TARGET}x 1 thread by wall time on 2 free cores (projected: twice"
        " the work per CPU second of 2 threads against 1)"
    )
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
