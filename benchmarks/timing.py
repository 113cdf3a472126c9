"""Repeat-and-median timing (the machine is shared and noisy)."""

from __future__ import annotations

import os
import statistics
import time
from collections.abc import Callable


def repeat(fn: Callable[[], object], repeats: int) -> tuple[list[float], list[float]]:
    """Wall-clock and CPU seconds (all threads of this process) of ``repeats`` calls, after
    one untimed call: the first large calls of a process also pay for growing its heap
    (page faults until glibc's allocator settles; measured: 1e6 samples of M1 took 160 and
    226 ms in the first two calls, 53-69 ms after), which is not the cost of the work."""
    fn()
    wall, cpu = [], []
    for _ in range(repeats):
        start, start_cpu = time.perf_counter(), time.process_time()
        fn()
        wall.append(time.perf_counter() - start)
        cpu.append(time.process_time() - start_cpu)
    return wall, cpu


def median_rate(fn: Callable[[], object], count: int, repeats: int) -> dict:
    """Samples per second (median over repeats) of a call that evaluates ``count`` samples.

    ``cores_used`` (CPU time over wall time) shows how much of the machine the call got:
    on a shared machine a call may get less than the cores it asks for. ``cpu_rate`` (samples
    per CPU second) is the noise-robust figure for single-threaded calls.
    """
    wall, cpu = repeat(fn, repeats)
    middle = wall.index(statistics.median_low(wall))
    return {
        "samples": count,
        "seconds": wall,
        "rate": count / statistics.median(wall),
        "cpu_rate": count / statistics.median(cpu),
        "cores_used": cpu[middle] / wall[middle],
    }


def per_call(fn: Callable[[], object], calls: int, blocks: int) -> dict:
    """Median seconds per call over ``blocks`` blocks of ``calls`` back-to-back calls."""
    per = []
    for _ in range(blocks):
        start = time.perf_counter()
        for _ in range(calls):
            fn()
        per.append((time.perf_counter() - start) / calls)
    return {"median": statistics.median(per), "min": min(per), "blocks": blocks, "calls": calls}


def load_average() -> list[float]:
    """1, 5 and 15 minute load averages (other users' work shows up in every number)."""
    return list(os.getloadavg())
