"""Latency of one scalar call on M1-M3: ``ev(**kw)``, ``ev()``, the mapping form and the
raw C calls, measured in one run.

Every figure is per call, from blocks of back-to-back calls: median and quartiles over the
blocks of wall time and of this thread's CPU time (the machine is shared; CPU time is the
steadier figure). The blocks of the cases of a model take turns, so that a change of load
during the run reaches every case alike. The raw C call (``lib.<prefix>_evaluate`` through
cffi with prepared buffers, see ``compiled.raw_c_args``) is the floor of any Python call;
the ratios to it show what the Python side adds. ``C entry`` is the call the keyword fast
path makes (``<prefix>_evaluate_values``: the parameters as arguments, the result struct
returned by value, so it includes the result's allocation), and ``keywords only`` an empty
``__call__`` of the same signature called with the same keywords: the interpreter's cost
of passing them. What ``ev(**kw)`` costs beyond these two is the shim's own work (printed
as "shim"). ``ev({...})`` (a mapping) goes through the general checks rather than the
keyword fast path, so its ratio shows what the fast path saves.

Run: python benchmarks/scalar_call.py [--calls 2000] [--blocks 41] [--json out.json]
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import sys
import time
from collections.abc import Callable
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))

import bench_models  # noqa: E402
import compiled  # noqa: E402

import lyacomp  # noqa: E402

LABELS = ("M1", "M2", "M3")
SEED = 20240  # run.py's sample seed: the first sample is the one its latency figures use


def blocks_per_call(cases: dict[str, Callable[[], object]], calls: int, blocks: int) -> dict:
    """Per-call wall and CPU seconds of ``blocks`` blocks of ``calls`` calls of each case (the
    cases' blocks taking turns): quartiles."""
    wall: dict[str, list[float]] = {name: [] for name in cases}
    cpu: dict[str, list[float]] = {name: [] for name in cases}
    for _ in range(blocks):
        for name, fn in cases.items():
            start, start_cpu = time.perf_counter(), time.thread_time()
            for _ in range(calls):
                fn()
            cpu[name].append((time.thread_time() - start_cpu) / calls)
            wall[name].append((time.perf_counter() - start) / calls)
    return {
        name: {
            "wall": _quartiles(wall[name]),
            "cpu": _quartiles(cpu[name]),
            "calls": calls,
            "blocks": blocks,
        }
        for name in cases
    }


class _KeywordsOnly:
    """An empty ``__call__`` with the evaluator's signature: what passing the keywords costs."""

    def __call__(self, params=None, /, **values):
        return None


def _quartiles(values: list[float]) -> dict[str, float]:
    q1, median, q3 = statistics.quantiles(values, n=4, method="inclusive")
    return {"q1": q1, "median": median, "q3": q3}


def measure(label: str, calls: int, blocks: int, workdir: Path) -> dict:
    """The four calls on one model, measured one after the other in this process (after
    checking that ``ev(**kw)`` and the raw C call give the same status and l1)."""
    model = lyacomp.load_model(bench_models.model_path(label, workdir))
    ev = lyacomp.compile(model)
    row = [float(v) for v in bench_models.draw_samples(model, 1, seed=SEED)[0]]
    kw = {k: row[i] for i, k in enumerate(model.parameter_names) if k != model.bifurcation}
    evaluate, args, raw = compiled.raw_c_args(ev, row)
    evaluate(*args)
    check = ev(**kw)
    if check.status_code != raw.status or not (check.l1 == raw.l1 or check.l1 != check.l1):
        raise RuntimeError(f"{label}: ev(**kw) and the raw C call disagree")
    floor = _KeywordsOnly()
    cases = {
        "raw C": lambda: evaluate(*args),
        "ev(**kw)": lambda: ev(**kw),
        "ev()": lambda: ev(),
        "ev({...})": lambda: ev(kw),
        "keywords only": lambda: floor(**kw),
    }
    prefix = compiled.prefix_of(ev)
    entry = getattr(ev.lib, f"{prefix}_evaluate_values", None)
    if entry is not None:
        # the raw call's buffers (guess, start, options) in the entry's call struct
        roles = dict(zip(compiled.argument_roles(ev, f"{prefix}_evaluate"), args))
        call, values = ev.ffi.new(f"{prefix}_call *"), tuple(row)
        call.state_guess = roles["guess"]
        call.start = roles.get("start", ev.ffi.NULL)
        call.opt = roles["options"]
        if entry(call, *values).l1 != raw.l1 and raw.l1 == raw.l1:
            raise RuntimeError(f"{label}: the C entry and the raw C call disagree")
        cases["C entry"] = lambda: entry(call, *values)
    for fn in cases.values():  # warm up (caches)
        fn()
    return blocks_per_call(cases, calls, blocks)


def report(results: dict) -> None:
    print(f"load average {os.getloadavg()[0]:.1f} (2 cores shared); microseconds per call")
    head = f"{'':4} {'call':13} {'wall q1/med/q3':>22} {'CPU q1/med/q3':>22} {'/raw (CPU)':>10}"
    print(head)
    for label, cases in results.items():
        raw = cases["raw C"]["cpu"]["median"]
        for name, r in cases.items():
            w, c = r["wall"], r["cpu"]
            wall = f"{w['q1'] * 1e6:.2f}/{w['median'] * 1e6:.2f}/{w['q3'] * 1e6:.2f}"
            cpu = f"{c['q1'] * 1e6:.2f}/{c['median'] * 1e6:.2f}/{c['q3'] * 1e6:.2f}"
            print(f"{label:4} {name:13} {wall:>22} {cpu:>22} {c['median'] / raw:>10.2f}")
        fast, general = cases["ev(**kw)"]["cpu"]["median"], cases["ev({...})"]["cpu"]["median"]
        print(f"{label:4} fast keyword path / mapping path (CPU): {fast / general:.2f}")
        if "C entry" in cases:
            shim = (
                fast - cases["keywords only"]["cpu"]["median"] - cases["C entry"]["cpu"]["median"]
            )
            print(f"{label:4} shim (ev(**kw) - keywords only - C entry, CPU): {shim * 1e6:.2f} us")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--calls", type=int, default=2000, help="calls per block")
    parser.add_argument("--blocks", type=int, default=41, help="blocks per figure")
    parser.add_argument("--json", type=Path, help="also write the figures here")
    parser.add_argument("--workdir", type=Path, default=Path("/tmp"), help="for ring models")
    opts = parser.parse_args()
    results = {label: measure(label, opts.calls, opts.blocks, opts.workdir) for label in LABELS}
    report(results)
    if opts.json:
        opts.json.write_text(json.dumps({"load": os.getloadavg(), "results": results}, indent=1))


if __name__ == "__main__":
    main()
