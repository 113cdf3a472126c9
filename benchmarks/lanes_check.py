"""The lane path against the scalar path on many samples of M1, M2 and M3 (issue 11).

``python benchmarks/lanes_check.py [--count 1000000]`` draws the benchmark's samples (every
parameter but the bifurcation parameter within +-5 %), evaluates them once with the batch
call (warm start: the lane path) and once with one scalar call per sample (the scalar
path), and prints per model: samples whose status differs, the largest relative
difference of every output (l1 also against the size of its cancelling terms), and the CPU
and wall time of the batch. Exits non-zero when a status differs or a value differs by
more than 1e-14.

``--fallbacks`` also counts, per model, the lanes that leave the fast path for the scalar
code: the emitted C is built with gcc's coverage instrumentation, driven by
flop_harness.c (one batch call on one thread over the same samples), and gcov's count of
the scalar call in the lane driver is read. The last ``count % LANES`` samples never enter
the lanes and are part of that count.
"""

from __future__ import annotations

import argparse
import re
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from bench_models import FILES, MODEL_DIR, batch_inputs, draw_samples  # noqa: E402

import lyacomp  # noqa: E402

FIELDS = ("l1", "omega", "period", "critical_value", "transversality")
MODELS = ("M1", "M2", "M3")  # M1: closed-form critical value and equilibrium; M2, M3: Newton


def check(label: str, count: int) -> bool:
    model = lyacomp.load_model(MODEL_DIR / FILES[label])
    ev = lyacomp.compile(model)
    inputs = batch_inputs(model, draw_samples(model, count, seed=11))
    wall, cpu = time.perf_counter(), time.process_time()
    batch = ev.batch(inputs, threads=1)
    wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    names = list(inputs)
    columns = [inputs[k] for k in names]
    worst = dict.fromkeys((*FIELDS, "l1 / l1_scale", "equilibrium", "amplitude"), 0.0)
    status_diff = 0
    for i in range(count):
        one = ev(dict(zip(names, (float(c[i]) for c in columns))))
        if int(one.status_code) != int(batch.status[i]):
            status_diff += 1
            continue
        if not one.ok:
            continue
        for f in FIELDS:
            a, b = getattr(one, f), float(getattr(batch, f)[i])
            worst[f] = max(worst[f], abs(a - b) / max(abs(a), 1e-300))
        worst["l1 / l1_scale"] = max(
            worst["l1 / l1_scale"], abs(one.l1 - float(batch.l1[i])) / one._raw.l1_scale
        )
        for f in ("equilibrium", "amplitude"):
            a = np.array(list(getattr(one, f).values()))
            worst[f] = max(
                worst[f], float(np.max(np.abs(a - getattr(batch, f)[i]))) / np.max(np.abs(a))
            )
    print(
        f"{label}: {count} samples, {int(batch.ok.sum())} ok; status differs on {status_diff}; "
        f"batch (1 thread) {1e9 * wall / count:.0f} ns wall, "
        f"{1e9 * cpu / count:.0f} ns CPU per sample"
    )
    for f, v in worst.items():
        print(f"  max relative difference {f}: {v:.2e}")
    return (
        status_diff == 0
        and worst["l1 / l1_scale"] <= 1e-14
        and all(v <= 1e-14 for f, v in worst.items() if f != "l1")
    )


def fallbacks(label: str, count: int) -> int:
    """Lanes of ``count`` samples that the lane driver hands to the scalar code (gcov)."""
    import flops
    import peak
    from compiled import argument_roles, prefix_of

    model = lyacomp.load_model(MODEL_DIR / FILES[label])
    ev = lyacomp.compile(model)
    prefix = prefix_of(ev)
    sources = lyacomp.generate(model, prefix=prefix, header_name="model.h", variant="plain")
    samples = draw_samples(model, count, seed=11)
    command, flags, _ = peak.toolchain_flags()
    defines = [f"-DPREFIX={prefix}", "-DBATCH", "-I."]
    defines.append(f"-DEVALUATE_ARGS={flops._c_arguments(ev, f'{prefix}_evaluate', 'row')}")
    if "start" in argument_roles(ev, f"{prefix}_evaluate"):
        prepare = flops._c_arguments(ev, f"{prefix}_prepare_start", "nominal")
        defines.append(f"-DPREPARE_ARGS={prepare}")
    own = [f for f in flags if f not in ("-fPIC", "-O3", "-fopenmp")]
    with tempfile.TemporaryDirectory(prefix="lyacomp-lanes-") as tmp:
        work = Path(tmp)
        (work / "model.c").write_text(sources.standalone)
        (work / "model.h").write_text(sources.header)
        samples.astype("<f8").tofile(work / "params.bin")
        guess = np.array([model.state_guess[s] for s in model.state_names], dtype="<f8")
        guess.tofile(work / "guess.bin")
        np.array([ev.nominal[k] for k in ev.parameters], dtype="<f8").tofile(work / "nominal.bin")
        steps = (
            [*command, *own, "-O1", "--coverage", *defines, "-c", "model.c", "-o", "model.o"],
            [*command, *own, "-O1", *defines, "-c", str(flops.HARNESS), "-o", "harness.o"],
            [*command, *own, "--coverage", "model.o", "harness.o", "-o", "h", "-lm", "-lmvec"],
            ["./h", "params.bin", str(count), str(samples.shape[1]), "guess.bin",
             str(len(guess)), "nominal.bin"],
            ["gcov", "model.o"],
        )  # fmt: skip
        for cmd in steps:
            done = subprocess.run(cmd, cwd=work, capture_output=True, text=True)
            if done.returncode != 0:
                raise RuntimeError(f"{' '.join(cmd)} failed:\n{done.stderr}")
        listing = (work / "model.c.gcov").read_text()
    call = re.search(rf"^\s*([0-9#]+)\*?:\s*\d+:\s*{prefix}_evaluate_impl\(lane_p", listing, re.M)
    if not call:
        raise RuntimeError("the scalar call of the lane driver is not in the gcov listing")
    return 0 if call.group(1).startswith("#") else int(call.group(1))


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--count", type=int, default=1_000_000)
    parser.add_argument(
        "--fallbacks", action="store_true", help="count lanes the scalar code redoes"
    )
    args = parser.parse_args()
    ok = [check(label, args.count) for label in MODELS]
    if args.fallbacks:
        for label in MODELS:
            redone = fallbacks(label, args.count)
            print(f"{label}: {redone} of {args.count} samples handed to the scalar code")
    return 0 if all(ok) else 1


if __name__ == "__main__":
    raise SystemExit(main())
