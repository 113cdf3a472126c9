"""Peak memory of a streamed robustness run (run by run.py as a subprocess).

Usage: python memory_probe.py MODEL.toml SAMPLES UNCERTAINTY_JSON
Runs lyacomp.studies.robustness.run_robustness on all cores and prints one JSON object
with the peak resident set size before and after the run.
"""

from __future__ import annotations

import json
import sys
import time
from pathlib import Path

import numpy as np


def peak_rss_mib() -> float:
    """Peak resident set size of this process so far (VmHWM, Linux).

    Not getrusage's ru_maxrss: on Linux that keeps the high-water mark of the parent's memory
    image from before exec, so a probe started by a big process would report the parent.
    """
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) / 1024.0
    raise RuntimeError("no VmHWM in /proc/self/status (the memory probe needs Linux)")


def main(path: str, samples: int, table: dict) -> None:
    import lyacomp
    from lyacomp.studies.robustness import DEFAULT_CHUNK, DEFAULT_KEEP, run_robustness

    ev = lyacomp.compile(lyacomp.load_model(path))
    ev.batch({k: np.full(16, v["low"]) for k, v in table.items()})
    before = peak_rss_mib()
    start = time.perf_counter()
    result = run_robustness(ev, samples, seed=1, uncertainty=table, progress=False)
    seconds = time.perf_counter() - start
    print(
        json.dumps(
            {
                "samples": result.samples,
                "ok": result.ok,
                "seconds": seconds,
                "chunk_size": DEFAULT_CHUNK,
                "keep": DEFAULT_KEEP,
                "peak_rss_before_mib": before,
                "peak_rss_mib": peak_rss_mib(),
            }
        )
    )


if __name__ == "__main__":
    main(sys.argv[1], int(float(sys.argv[2])), json.loads(sys.argv[3]))
