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

Only blocks whose count comes from the profile are weighted ("precise", or "adjusted" when
gcc scaled it for a copy); functions the run never entered still carry gcc's local
estimates, which once made this count absurd. The lane stage's ``vdouble`` variables and
operations with vector constants ``{ a, b, ... }`` are counted at the lane width. Where gcc
copies code (unrolling, peeling, jump threading) its scaled counts are approximate:
:func:`count_executed` counts the executed instructions instead (callgrind), and the two
agreed within 8 % on M2 and M3 (the GIMPLE count of M3 is the higher).
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
_BLOCK = re.compile(r"^;;\s+basic block \d+, loop depth \d+, count (\d+) \(([^)]*)\)")
# Counts gcc took from the profile (as measured, or scaled when a block was copied by
# inlining, peeling or unrolling). The other qualities are gcc's own guesses: "estimated
# locally, globally 0" in functions the run never entered (there gcc still writes large
# local estimates), "guessed" in copies it could not relate to the profile.
_MEASURED = ("precise", "adjusted")
_DECL = re.compile(r"^\s+(?:const )?((?:vector\((\d+)\) )?(complex )?(?:double|float)) ([\w.$]+);")
_LANE_DECL = re.compile(r"^\s+(?:const )?vdouble ([\w.$]+);")
_LANES_MACRO = re.compile(r"^#define LYACOMP_LANES (\d+)$", re.M)
_ASSIGN = re.compile(r"^\s+([\w.$]+) = (.+);$")
_OPERAND = r"(\S+|\{[^}]*\})"  # a name, a number or a vector constant { a, b, ... }
_BINARY = re.compile(rf"^{_OPERAND} ([+\-*/]) {_OPERAND}$")
_CALL = re.compile(r"^(?:__builtin_)?\.?([A-Za-z_]\w*) \(")

_COMPLEX_COST = {"+": 2, "-": 2, "*": 6, "/": 11}
_NO_FLOP_CALLS = {"ABS_EXPR", "MIN_EXPR", "MAX_EXPR", "REALPART_EXPR", "IMAGPART_EXPR"}
# Masked vector arithmetic (the lanes' selects folded into the operation): flops per lane.
_COND = {"COND_ADD": 1, "COND_SUB": 1, "COND_MUL": 1, "COND_RDIV": 1, "COND_FMA": 2, "COND_FMS": 2}
_FMA = {"FMA", "FMS", "FNMA", "FNMS", "VEC_FMADDSUB", "VEC_FMSUBADD"}


def _type_of(name: str, types: dict[str, tuple[int, bool]]) -> tuple[int, bool] | None:
    """(lanes, complex) of a floating-point variable, or None for other types."""
    if name in types:
        return types[name]
    base = re.sub(r"_\d+$", "", name)
    return types.get(base)


def count_dump(text: str, lane_width: int = 1) -> dict:
    """Weighted operation counts from a ``-fdump-tree-optimized-blocks-details`` dump.

    ``lane_width``: the width of the lane stage's ``vdouble`` (gcc prints the typedef's name,
    not ``vector(k) double``, for variables declared with it).
    """
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
            measured = block.group(2) in _MEASURED
            weight = int(block.group(1)) if measured else 0
            totals["guessed_blocks"] += 0 if measured else 1
            continue
        decl = _DECL.match(line)
        if decl and weight == 0:
            types[decl.group(4)] = (int(decl.group(2) or 1), bool(decl.group(3)))
            continue
        lane_decl = _LANE_DECL.match(line)
        if lane_decl and weight == 0:
            types[lane_decl.group(1)] = (lane_width, False)
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
            if name in _COND:
                cost = _COND[name] * lanes
                totals["flops"] += cost * weight
                totals["vector_flops"] += cost * weight if lanes > 1 else 0
                totals["divisions"] += lanes * weight if name == "COND_RDIV" else 0
            elif name in _FMA:
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


def count_kernel(
    ev, samples: np.ndarray, flags: list[str], compiler: list[str], batch: bool = False
) -> dict:
    """Per-sample operation counts of the kernel emitted for ``ev``'s model over ``samples``.

    ``batch``: one ``<prefix>_evaluate_batch`` call on one thread over all samples (the lane
    path of two- and three-state models, built one lane wide: the work of the samples, not
    of lanes that run on masked out) instead of one ``<prefix>_evaluate`` per sample.
    """
    import lyacomp

    model, prefix = ev.model, prefix_of(ev)
    sources = lyacomp.generate(model, prefix=prefix, header_name="model.h", variant="plain")
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
        # The batch's useful work: lanes one wide, so that no masked-out lane is counted.
        base += ["-DLYACOMP_LANES=1"] if batch else []

        def run(*args: str) -> str:
            done = subprocess.run([*args], cwd=work, capture_output=True, text=True)
            if done.returncode != 0:
                raise RuntimeError(f"{' '.join(args)} failed:\n{done.stderr}")
            return done.stdout

        run(*base, "-fprofile-generate", "-c", "model.c", "-o", "model.o")
        batch_flag = ["-DBATCH"] if batch else []
        run(*base, *calls, *batch_flag, "-c", str(HARNESS), "-o", "harness.o")
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
        macros = run(*base, "-dM", "-E", "model.c")
        width = _LANES_MACRO.search(macros)
        counted = count_dump(dumps[0].read_text(), int(width.group(1)) if width else 1)
    per = {k: v / rows for k, v in counted["totals"].items()}
    return {
        "method": "gcc -fprofile-generate/-fprofile-use, final GIMPLE weighted by block counts",
        "entry_point": f"{prefix}_evaluate_batch(one thread)"
        if batch
        else f"{prefix}_evaluate({calls[0].split('=', 1)[1]})",
        "samples": rows,
        "samples_ok": ok,
        "flops_per_sample": per.get("flops", 0.0),
        "vector_flops_per_sample": per.get("vector_flops", 0.0),
        "divisions_per_sample": per.get("divisions", 0.0),
        "sqrt_per_sample": per.get("sqrt", 0.0),
        "libm_calls_per_sample": {k: v / rows for k, v in sorted(counted["calls"].items())},
    }


# ---- The same count from the executed machine instructions (callgrind) ----
# valgrind has no AVX-512, so this build leaves it out (the lanes are 4 wide then) and
# calls libm lane by lane (no libmvec): library internals are not counted, as above.
_NO_AVX512 = ("-mno-avx512f",)
_ARITH = re.compile(r"^v?(fn?m(?:add|sub)(?:sub|add)?\d{3}|add|sub|mul|div|sqrt)(pd|sd)$")
_OBJDUMP = re.compile(r"^\s*([0-9a-f]+):\s+(\S+)\s*(.*)$")


def _callgrind_counts(path: Path, binary: str) -> Counter:
    """Executions per instruction address of ``binary``'s own code in a callgrind file
    written with ``--dump-instr=yes --dump-line=no`` (names and addresses compressed)."""
    counts: Counter = Counter()
    names: dict[str, str] = {}
    current, last, skip = "", 0, False
    for line in path.read_text().splitlines():
        key, _, value = line.partition("=")
        if key in ("ob", "cob"):
            ref = re.match(r"\((\d+)\)(?: (.*))?", value)
            name = value if not ref else ref.group(2) or names[ref.group(1)]
            if ref and ref.group(2):
                names[ref.group(1)] = ref.group(2)
            current = name if key == "ob" else current
            continue
        if key == "calls":
            skip = True  # the next cost line is the call's inclusive cost
            continue
        if not line or line[0] not in "0123456789+-*":
            continue
        position, *cost = line.split()
        if position.startswith(("+", "-")):
            last += int(position, 0) if position[1:].startswith("0x") else int(position)
        elif position != "*":
            last = int(position, 0)
        if skip:
            skip = False
        elif current.endswith(binary) and cost:
            counts[last] += int(cost[0])
    return counts


def count_executed(ev, samples: np.ndarray, flags: list[str], compiler: list[str]) -> dict:
    """Flops per sample of one ``<prefix>_evaluate_batch`` call (one thread) counted from
    the executed instructions: callgrind's per-instruction counts against objdump's
    disassembly (packed: 2/4 per instruction by register width, FMA twice). The check of
    :func:`count_kernel`, whose block counts gcc estimates where it copied code.

    ``flops_per_sample`` is the useful work: the lane code built one lane wide, so that no
    lane computes on after its sample has converged or left (in wider lanes a block runs
    until its slowest lane is done, and that work is not the sample's). The count of the
    same code four lanes wide, masked-out lanes included, is kept beside it as
    ``executed_4_lanes``."""
    one = _count_executed(ev, samples, flags, compiler, 1)
    four = _count_executed(ev, samples, flags, compiler, 4)
    one["method"] += "; the lane code one lane wide (no work of masked-out lanes)"
    one["executed_4_lanes"] = four
    return one


def _count_executed(
    ev, samples: np.ndarray, flags: list[str], compiler: list[str], lanes: int
) -> dict:
    """:func:`count_executed` with the lane code ``lanes`` wide."""
    import lyacomp

    model, prefix = ev.model, prefix_of(ev)
    sources = lyacomp.generate(model, prefix=prefix, header_name="model.h", variant="plain")
    own = [f for f in flags if f not in ("-fPIC", "-DLYACOMP_MVEC", "-fopenmp")]
    defines = [f"-DPREFIX={prefix}", "-DBATCH", "-I.", f"-DLYACOMP_LANES={lanes}"]
    defines.append(f"-DEVALUATE_ARGS={_c_arguments(ev, f'{prefix}_evaluate', 'row')}")
    if "start" in argument_roles(ev, f"{prefix}_evaluate"):
        prepare = _c_arguments(ev, f"{prefix}_prepare_start", "nominal")
        defines.append(f"-DPREPARE_ARGS={prepare}")
    rows, nparams = samples.shape
    with tempfile.TemporaryDirectory(prefix="lyacomp-callgrind-") as tmp:
        work = Path(tmp)
        (work / "model.c").write_text(sources.standalone)
        (work / "model.h").write_text(sources.header)
        samples.astype("<f8").tofile(work / "params.bin")
        guess = np.array([model.state_guess[s] for s in model.state_names], dtype="<f8")
        guess.tofile(work / "guess.bin")
        np.array([ev.nominal[k] for k in ev.parameters], dtype="<f8").tofile(work / "nominal.bin")
        build = [*compiler, *own, *_NO_AVX512, *defines, "model.c", str(HARNESS), "-o", "h"]
        for cmd in (
            [*build, "-no-pie", "-lm"],
            ["valgrind", "--tool=callgrind", "--dump-instr=yes", "--dump-line=no",
             "--callgrind-out-file=cg.out", "./h", "params.bin", str(rows), str(nparams),
             "guess.bin", str(len(guess)), "nominal.bin"],
        ):  # fmt: skip
            done = subprocess.run(cmd, cwd=work, capture_output=True, text=True)
            if done.returncode != 0:
                raise RuntimeError(f"{' '.join(cmd)} failed:\n{done.stderr}")
        counts = _callgrind_counts(work / "cg.out", "/h")
        listing = subprocess.run(
            ["objdump", "-d", "--no-show-raw-insn", str(work / "h")],
            capture_output=True,
            text=True,
            check=True,
        ).stdout
    totals: Counter = Counter()
    for line in listing.splitlines():
        ins = _OBJDUMP.match(line)
        executed = counts.get(int(ins.group(1), 16), 0) if ins else 0
        arith = _ARITH.match(ins.group(2)) if executed else None
        if not arith:
            continue
        kind, precision = arith.groups()
        operands = ins.group(3)
        width = (
            1 if precision == "sd" else 8 if "zmm" in operands else 4 if "ymm" in operands else 2
        )
        totals["flops"] += (2 if kind.startswith(("fm", "fnm")) else 1) * width * executed
        totals["divisions"] += width * executed if kind == "div" else 0
        totals["sqrt"] += width * executed if kind == "sqrt" else 0
    return {
        "method": f"callgrind per-instruction counts, {lanes} lane(s) (valgrind: no AVX-512), libm",
        "lanes": lanes,
        "samples": rows,
        "flops_per_sample": totals["flops"] / rows,
        "divisions_per_sample": totals["divisions"] / rows,
        "sqrt_per_sample": totals["sqrt"] / rows,
    }
