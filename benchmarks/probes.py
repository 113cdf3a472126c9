"""Measurements that need a fresh process: compile time, streamed-run memory, perf profile."""

from __future__ import annotations

import json
import os
import re
import shutil
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
REPO = HERE.parent


def _env(cache_dir: Path) -> dict[str, str]:
    path = os.pathsep.join(p for p in (str(REPO), os.environ.get("PYTHONPATH", "")) if p)
    return dict(os.environ, PYTHONPATH=path, LYACOMP_CACHE_DIR=str(cache_dir))


def _run_json(args: list[str], cache_dir: Path) -> dict:
    done = subprocess.run(
        [sys.executable, *args], env=_env(cache_dir), capture_output=True, text=True
    )
    if done.returncode != 0:
        raise RuntimeError(f"{' '.join(args)} failed:\n{done.stderr[-2000:]}")
    return json.loads(done.stdout.strip().splitlines()[-1])


def compile_times(model_path: Path, scratch: Path, repeats: int) -> tuple[dict, Path]:
    """Cold compiles (each into a new empty cache) and warm loads (cache hit), new processes.

    Returns the timings and the cache directory that now holds the compiled model.
    """
    cold, warm = [], []
    cache = scratch
    for _ in range(repeats):
        cache = Path(tempfile.mkdtemp(prefix="cache-", dir=scratch))
        cold.append(_run_json([str(HERE / "compile_probe.py"), str(model_path)], cache))
    for _ in range(repeats):
        warm.append(_run_json([str(HERE / "compile_probe.py"), str(model_path)], cache))
    result = {
        "cold_s": statistics.median(r["compile_s"] for r in cold),
        "warm_s": statistics.median(r["compile_s"] for r in warm),
        "cold_runs_s": [r["compile_s"] for r in cold],
        "warm_runs_s": [r["compile_s"] for r in warm],
        "import_s": statistics.median(r["import_s"] for r in cold + warm),
        "load_model_s": statistics.median(r["load_s"] for r in cold + warm),
        "nominal_ok": all(r["nominal_ok"] for r in cold + warm),
    }
    return result, cache


def streamed_memory(model_path: Path, samples: int, table: dict, cache: Path) -> dict:
    """Peak RSS of a streamed robustness run in a fresh process."""
    args = [str(HERE / "memory_probe.py"), str(model_path), str(samples), json.dumps(table)]
    return _run_json(args, cache)


def perf_profile(model_path: Path, samples: int, cache: Path, top: int = 12) -> dict:
    """Where one thread spends its time in a batch call (``perf record``, cpu-clock sampling)."""
    perf = shutil.which("perf")
    if perf is None:
        return {"error": "perf is not installed"}
    with tempfile.TemporaryDirectory(prefix="lyacomp-perf-") as tmp:
        data = Path(tmp) / "perf.data"
        record = [perf, "record", "-q", "-e", "cpu-clock", "-F", "2000", "-o", str(data), "--"]
        probe = [sys.executable, str(HERE / "profile_probe.py"), str(model_path), str(samples)]
        done = subprocess.run([*record, *probe], env=_env(cache), capture_output=True, text=True)
        if done.returncode != 0:
            return {"error": f"perf record failed: {done.stderr.strip()[-500:]}"}
        report = subprocess.run(
            [perf, "report", "-i", str(data), "--stdio", "--sort", "dso,symbol", "-q"],
            capture_output=True,
            text=True,
        ).stdout
    rows = []
    for line in report.splitlines():
        match = re.match(r"\s*([\d.]+)%\s+(\S+)\s+\[\.\]\s+(\S+)", line)
        # Only the compiled model and the C libraries it calls, not Python's start-up.
        if match and re.search(r"_lyacomp|libm|libgomp|libc", match[2]):
            rows.append({"percent": float(match[1]), "object": match[2], "symbol": match[3]})
    kernel = sum(r["percent"] for r in rows) or 1.0
    for r in rows:
        r["share_of_kernel"] = r["percent"] / kernel
    return {"samples": samples, "top": rows[:top]}
