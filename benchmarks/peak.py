"""Floating-point peak of this machine, measured with fma_peak.c under lyacomp's own flags."""

from __future__ import annotations

import os
import statistics
import subprocess
import tempfile
from pathlib import Path

SOURCE = Path(__file__).with_name("fma_peak.c")
FALLBACK_FLAGS = ("-O3", "-march=native", "-fopenmp")


def toolchain_flags() -> tuple[list[str], list[str], str]:
    """(compiler command, compile flags, where they came from): lyacomp's toolchain if exposed."""
    try:
        from lyacomp.build.compiler import toolchain
        from lyacomp.config import BuildConfig

        tc = toolchain(BuildConfig.from_environment())
    except (ImportError, AttributeError):
        return ["gcc"], list(FALLBACK_FLAGS), "fallback (lyacomp toolchain not exposed)"
    flags = [f for f in tc.compile_flags if f not in ("-fPIC",)]
    if "-fopenmp" not in flags:
        flags.append("-fopenmp")
    return list(tc.command), flags, "lyacomp.build.compiler.toolchain"


def measure_peak(threads_list: list[int], seconds: float, repeats: int) -> dict:
    """GFLOP/s of the FMA loop for each thread count (median and all repeats)."""
    command, flags, origin = toolchain_flags()
    with tempfile.TemporaryDirectory(prefix="lyacomp-peak-") as tmp:
        exe = Path(tmp) / "fma_peak"
        subprocess.run([*command, *flags, str(SOURCE), "-o", str(exe), "-lm"], check=True)
        result = {"compiler": " ".join(command), "flags": flags, "flags_from": origin}
        for threads in threads_list:
            env = dict(os.environ, OMP_NUM_THREADS=str(threads))
            runs = []
            for _ in range(repeats):
                out = subprocess.run(
                    [str(exe), str(seconds)], env=env, check=True, capture_output=True, text=True
                ).stdout.split()
                runs.append(float(out[1]) / float(out[2]) / 1e9)
            result[f"gflops_{threads}t"] = statistics.median(runs)
            result[f"gflops_{threads}t_runs"] = runs
    return result
