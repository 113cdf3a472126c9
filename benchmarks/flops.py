"""Floating-point operations per sample of a compiled lyacomp kernel, counted by instrumentation.

Method (gcc only, no extra tools): the C that lyacomp emits for the model is compiled with
lyacomp's own flags plus ``-fprofile-generate`` and driven by flop_harness.c over the
benchmark's samples (one ``<prefix>_evaluate`` call per sample, as in a batch). It is then
recompiled with ``-fprofile-use -fdump-tree-optimized-blocks-details``: gcc's final GIMPLE,
in which every basic block carries its measured execution count. Each floating-point
statement is weighted by its block's count and its vector width:

- ``+ - * /`` on double (or on vector(k) double: k operations) count 1 each, fused
  multiply-adds (``.FMA``, ``.VEC_FMADDSUB``, ...) 2;
  unlowered complex operations count as their real arithmetic (add 2, multiply 6, divide 11);
- ``sqrt`` counts 1 and is listed on its own, like the divisions, because both are slow;
- negation, absolute value, min/max, comparisons and conversions count 0;
- calls into libm (cabs/hypot, fmax, exp, tanh, ...) are listed per sample, their inner work
  is not counted (so the figure is a lower bound on the work done).
"""

from __future__ import annotations

import re
import subprocess
import tempfile
from collections import Counter
from pathlib import Path

import numpy as np
from compiled import argument_roles, prefix_of

HARNESS = Path(__file__).with_name("flop_harness.c")

_FUNCTION = re.compile(r"^;; Function (\S+)")
_BLOCK = re.compile(r"^;;\s+basic block \d+, loop depth \d+, count (\d+)")
_DECL = re.compile(r"^\s+(?:const )?((?:vector\((\d+)\) )?(complex )?(?:double|float)) ([\w.$]+);")
_ASSIGN = re.compile(r"^\s+([\w.$]+) = (.+);$")
_BINARY = re.compile(r"^(\S+) ([+\-*/]) (\S+)$")
_CALL = re.compile(r"^(?:__builtin_)?\.?([A-Za-z_]\w*) \(")

_COMPLEX_COST = {"+": 2, "-": 2, "*": 6, "/": 11}
_NO_FLOP_CALLS = {"ABS_EXPR", "MIN_EXPR", "MAX_EXPR", "REALPART_EXPR", "IMAGPART_EXPR"}
_FMA = {"FMA", "FMS", "FNMA", "FNMS", "VEC_FMADDSUB", "VEC_FMSUBADD"}


def _type_of(name: str, types: dict[str, tuple[int, bool]]) -> tuple[int, bool] | None:
    """(lanes, complex) of a floating-point variable, or None for other types."""
    if name in types:
        return types[name]
    base = re.sub(r"_\d+$", "", name)
    return types.get(base)


def count_dump(text: str) -> dict:
    """Weighted operation counts from a ``-fdump-tree-optimized-blocks-details`` dump."""
    totals: Counter = Counter()
    calls: Counter = Counter()
    types: dict[str, tuple[int, bool]] = {}
    weight = 0
    for line in text.splitlines():
        if _FUNCTION.match(line):
            types, weight = {}, 0
            continue
        block = _BLOCK.match(line)
        if block:
            weight = int(block.group(1))
            continue
        decl = _DECL.match(line)
        if decl and weight == 0:
            types[decl.group(4)] = (int(decl.group(2) or 1), bool(decl.group(3)))
            continue
        assign = _ASSIGN.match(line)
        if not assign or weight == 0:
            continue
        target, expr = assign.groups()
        kind = _type_of(target, types)
        call = _CALL.match(expr)
        if call:
            name = call.group(1)
            if name in _NO_FLOP_CALLS:
                continue
            lanes = kind[0] if kind else 1
            if name in _FMA:
                totals["flops"] += 2 * lanes * weight
                totals["vector_flops"] += 2 * lanes * weight if lanes > 1 else 0
            elif name in ("sqrt", "SQRT"):
                totals["flops"] += lanes * weight
                totals["sqrt"] += lanes * weight
            elif kind is not None:
                calls[name] += weight
            continue
        binary = _BINARY.match(expr)
        if not binary or kind is None:
            continue
        lanes, is_complex = kind
        op = binary.group(2)
        cost = _COMPLEX_COST[op] if is_complex else 1
        totals["flops"] += cost * lanes * weight
        if lanes > 1:
            totals["vector_flops"] += cost * lanes * weight
        if op == "/":
            totals["divisions"] += lanes * weight
    return {"totals": dict(totals), "calls": dict(calls)}


_C_ARGUMENT = {
    "params": "row",
    "guess": "guess",
    "start": "&start",
    "options": "&options",
    "result": "&result",
}


def _c_arguments(ev, function: str, params: str) -> str:
    roles = argument_roles(ev, function)
    return ", ".join(params if r == "params" else _C_ARGUMENT[r] for r in roles)


def count_kernel(ev, samples: np.ndarray, flags: list[str], compiler: list[str]) -> dict:
    """Per-sample operation counts of the kernel emitted for ``ev``'s model over ``samples``."""
    import lyacomp

    model, prefix = ev.model, prefix_of(ev)
    sources = lyacomp.generate(model, prefix=prefix, header_name="model.h")
    calls = [f"-DEVALUATE_ARGS={_c_arguments(ev, f'{prefix}_evaluate', 'row')}"]
    if "start" in argument_roles(ev, f"{prefix}_evaluate"):
        prepare = _c_arguments(ev, f"{prefix}_prepare_start", "nominal")
        calls.append(f"-DPREPARE_ARGS={prepare}")
    with tempfile.TemporaryDirectory(prefix="lyacomp-flops-") as tmp:
        work = Path(tmp)
        (work / "model.c").write_text(sources.standalone)
        (work / "model.h").write_text(sources.header)
        samples.astype("<f8").tofile(work / "params.bin")
        guess = np.array([model.state_guess[s] for s in model.state_names], dtype="<f8")
        guess.tofile(work / "guess.bin")
        nominal = np.array([ev.nominal[k] for k in ev.parameters], dtype="<f8")
        nominal.tofile(work / "nominal.bin")
        base = [*compiler, *[f for f in flags if f != "-fPIC"], f"-DPREFIX={prefix}", "-I."]

        def run(*args: str) -> str:
            done = subprocess.run([*args], cwd=work, capture_output=True, text=True)
            if done.returncode != 0:
                raise RuntimeError(f"{' '.join(args)} failed:\n{done.stderr}")
            return done.stdout

        run(*base, "-fprofile-generate", "-c", "model.c", "-o", "model.o")
        run(*base, *calls, "-c", str(HARNESS), "-o", "harness.o")
        run(*compiler, "-fprofile-generate", *flags, "model.o", "harness.o", "-o", "h", "-lm")
        rows, nparams = samples.shape
        ok = int(
            run(
                "./h",
                "params.bin",
                str(rows),
                str(nparams),
                "guess.bin",
                str(len(guess)),
                "nominal.bin",
            )
        )
        run(
            *base,
            "-fprofile-use",
            "-fdump-tree-optimized-blocks-details",
            "-c",
            "model.c",
            "-o",
            "model.o",
        )
        dumps = list(work.glob("model.c.*.optimized"))
        counted = count_dump(dumps[0].read_text())
    per = {k: v / rows for k, v in counted["totals"].items()}
    return {
        "method": "gcc -fprofile-generate/-fprofile-use, final GIMPLE weighted by block counts",
        "entry_point": f"{prefix}_evaluate({calls[0].split('=', 1)[1]})",
        "samples": rows,
        "samples_ok": ok,
        "flops_per_sample": per.get("flops", 0.0),
        "vector_flops_per_sample": per.get("vector_flops", 0.0),
        "divisions_per_sample": per.get("divisions", 0.0),
        "sqrt_per_sample": per.get("sqrt", 0.0),
        "libm_calls_per_sample": {k: v / rows for k, v in sorted(counted["calls"].items())},
    }
