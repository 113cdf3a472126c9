"""Floating-point peak of this machine, measured with fma_peak.c under lyacomp's own flags."""

from __future__ import annotations

import os
import statistics
import subprocess
import tempfile
from pathlib import Path

SOURCE = Path(__file__).with_name("fma_peak.c")
OP_COSTS = Path(__file__).with_name("op_costs.c")
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
    """GFLOP/s of the FMA loop for each thread count (median and all repeats).

    ``gflops_per_cpu_second_<k>t`` divides by the CPU time the threads actually got: the
    peak of one core, which other users' load does not dilute.
    """
    command, flags, origin = toolchain_flags()
    with tempfile.TemporaryDirectory(prefix="lyacomp-peak-") as tmp:
        exe = Path(tmp) / "fma_peak"
        subprocess.run([*command, *flags, str(SOURCE), "-o", str(exe), "-lm"], check=True)
        result = {"compiler": " ".join(command), "flags": flags, "flags_from": origin}
        for threads in threads_list:
            env = dict(os.environ, OMP_NUM_THREADS=str(threads))
            runs, per_cpu = [], []
            for _ in range(repeats):
                out = subprocess.run(
                    [str(exe), str(seconds)], env=env, check=True, capture_output=True, text=True
                ).stdout.split()
                runs.append(float(out[1]) / float(out[2]) / 1e9)
                per_cpu.append(float(out[1]) / float(out[3]) / 1e9)
            result[f"gflops_{threads}t"] = statistics.median(runs)
            result[f"gflops_{threads}t_runs"] = runs
            result[f"gflops_per_cpu_second_{threads}t"] = statistics.median(per_cpu)
    return result


def measure_op_costs(rounds: int, repeats: int) -> dict[str, float]:
    """ns per operation (one core) of divisions, square roots and libm calls (op_costs.c)."""
    command, flags, _ = toolchain_flags()
    flags = [f for f in flags if f != "-fopenmp"] + [
        "-fno-tree-vectorize",
        "-fno-tree-slp-vectorize",
    ]
    with tempfile.TemporaryDirectory(prefix="lyacomp-ops-") as tmp:
        exe = Path(tmp) / "op_costs"
        subprocess.run([*command, *flags, str(OP_COSTS), "-o", str(exe), "-lm"], check=True)
        runs: dict[str, list[float]] = {}
        for _ in range(repeats):
            out = subprocess.run(
                [str(exe), str(rounds)], check=True, capture_output=True, text=True
            ).stdout
            for line in out.splitlines():
                name, value = line.split()
                runs.setdefault(name, []).append(float(value))
    return {name: statistics.median(values) for name, values in runs.items()}
