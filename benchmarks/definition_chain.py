"""Cost of a chain of definitions, each nonlinear in the one before (derive/chain.py).

For chains of 5, 10, 20 and 30 definitions (an invented two-state model, the same family as
tests/test_definition_chain.py) it prints, measured in this run:

- the symbolic part of the plain compile (derive + lower) and of the extended library's
  extra stages (fourth and fifth derivatives for l2, the exact parameter derivatives),
  wall and CPU seconds;
- a cold ``lyacomp.compile`` (the plain library) in a fresh process into an empty cache,
  wall and CPU seconds (CPU includes the C compiler's child processes);
- the static operation count of the plain model functions (``f_jac``, ``linear``,
  ``curvature``: binary + - * / and calls, counted in the emitted C);
- the batch evaluation time per sample on one thread (CPU time) and that time per operation,
  as a ratio to the 5-level chain (constant ratio: evaluation at the speed of the flop count);
- the baseline in the same run: the plain symbolic part with the definitions pasted into the
  equations (what lyacomp did before), for the chains it finishes within ``--limit`` seconds.

The machine is shared: compare the ratios and the CPU times, not absolute wall times.
Run: python benchmarks/definition_chain.py [--levels 5 10 20 30] [--limit 300]
"""

from __future__ import annotations

import argparse
import os
import re
import resource
import subprocess
import sys
import tempfile
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

import lyacomp
from lyacomp.codegen import lower, lower_sensitivity
from lyacomp.codegen.lower_higher import lower_higher
from lyacomp.config import BuildConfig
from lyacomp.derive import derive, derive_sensitivity
from lyacomp.derive.higher import derive_higher

FUNCTIONS = ("tanh(a*{})", "sin({} + b)", "exp(-{}**2/2)")
SAMPLES = 20000
_TOKEN = re.compile(r"\d+\.\d*(?:e[+-]?\d+)?|\d+|\w+|\S")


def chain_model(levels: int, pasted: bool = False) -> lyacomp.Model:
    """The chain of ``levels`` definitions; ``pasted`` substitutes them into the equations."""
    defs = {"d0": "c0 + x + 0.5*y"}
    for k in range(1, levels + 1):
        defs[f"d{k}"] = FUNCTIONS[k % 3].format(f"d{k - 1}")
    model = lyacomp.Model(
        name=f"chain{levels}",
        states={"x": 0.0, "y": 0.0},
        parameters={"mu": -0.3, "a": 0.8, "b": 0.3, "c0": 0.4, "g": 0.05},
        definitions=defs,
        equations={"x": f"mu*x - y + x*d{levels} + g*x**2", "y": "x + mu*y - y**3"},
        bifurcation="mu",
    )
    if not pasted:
        return model
    rhs = model.symbolic().rhs
    return model.replace(definitions={}, equations=dict(zip(model.states, rhs, strict=True)))


def _times(fn, *args):
    wall, cpu = time.perf_counter(), time.process_time()
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    out = fn(*args)
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    child = after.ru_utime + after.ru_stime - kids.ru_utime - kids.ru_stime
    return out, time.perf_counter() - wall, time.process_time() - cpu + child


def operation_count(code: str) -> int:
    """Binary + - * / and function calls in C text (unary minus and casts not counted)."""
    count, previous = 0, ""
    tokens = _TOKEN.findall(code)
    for i, tok in enumerate(tokens):
        operand = previous[:1].isalnum() or previous[:1] == "_" or previous in (")", "]")
        if tok in "+-*/" and operand:
            count += 1
        elif tok[:1].isalpha() and i + 1 < len(tokens) and tokens[i + 1] == "(":
            count += 1
        previous = tok
    return count


def _plain_symbolic(model: lyacomp.Model):
    return lower(derive(model.symbolic()))


def _extended_symbolic(model: lyacomp.Model) -> None:
    der = derive(model.symbolic())
    lower_higher(derive_higher(der))
    lower_sensitivity(der, derive_sensitivity(der))


def _child_seconds(flag: str, levels: int, limit: float, cache: str | None = None):
    """(wall, CPU) seconds printed by a child run of this script (None past the limit).

    The children start with sympy's cache empty: in this process the symbolic stages have
    already run on the same expressions, which would make a compile here look cheaper."""
    env = {**os.environ, "LYACOMP_CACHE_DIR": cache} if cache else None
    try:
        out = subprocess.run(
            [sys.executable, __file__, flag, str(levels)],
            capture_output=True,
            text=True,
            timeout=limit,
            check=True,
            env=env,
        )
    except subprocess.TimeoutExpired:
        return None
    wall, cpu = out.stdout.split()
    return float(wall), float(cpu)


def _evaluation(ev: lyacomp.Evaluator) -> tuple[float, float]:
    """CPU seconds per sample of a one-thread batch, and the share of ok samples."""
    a = np.linspace(0.76, 0.84, SAMPLES)
    ev.batch(a=a[:100], threads=1)  # warm: the nominal start is solved once
    best = None
    for _ in range(3):
        start = time.process_time()
        res = ev.batch(a=a, threads=1)
        spent = time.process_time() - start
        best = spent if best is None else min(best, spent)
    return best / SAMPLES, float(np.mean(res.ok))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--levels", type=int, nargs="+", default=[5, 10, 20, 30])
    parser.add_argument("--limit", type=float, default=300.0)
    parser.add_argument("--pasted-child", type=int, help=argparse.SUPPRESS)
    parser.add_argument("--compile-child", type=int, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.pasted_child is not None:
        _, wall, cpu = _times(_plain_symbolic, chain_model(args.pasted_child, pasted=True))
        print(wall, cpu)
        return
    if args.compile_child is not None:
        # LYACOMP_CACHE_DIR is the parent's empty directory: a cold compile
        _, wall, cpu = _times(lyacomp.compile, chain_model(args.compile_child))
        print(wall, cpu)
        return
    base_per_op = None
    for levels in args.levels:
        model = chain_model(levels)
        low, wall_plain, cpu_plain = _times(_plain_symbolic, model)
        _, wall_ext, cpu_ext = _times(_extended_symbolic, model)
        with tempfile.TemporaryDirectory() as cache:
            compiled = _child_seconds("--compile-child", levels, args.limit, cache)
            if compiled is None:
                raise SystemExit(f"the {levels}-level chain did not compile in {args.limit} s")
            wall_compile, cpu_compile = compiled
            # the child's library, from the cache it filled
            config = replace(BuildConfig.from_environment(), cache_dir=Path(cache))
            per_sample, ok = _evaluation(lyacomp.compile(model, config=config))
        blocks = (low.f_jac, low.linear, low.curvature)
        ops = [sum(operation_count(s.code) for s in b.temporaries + b.outputs) for b in blocks]
        per_op = per_sample / sum(ops)
        base_per_op = base_per_op or per_op
        print(
            f"chain {levels:2d}: plain symbolic {wall_plain:6.2f} s wall / {cpu_plain:6.2f} s CPU;"
            f" extended stages {wall_ext:6.2f} / {cpu_ext:6.2f} s;"
            f" cold compile {wall_compile:6.1f} s wall / {cpu_compile:6.1f} s CPU"
        )
        print(
            f"          ops f_jac {ops[0]}, linear {ops[1]}, curvature {ops[2]};"
            f" {per_sample * 1e9:8.0f} ns/sample (CPU, 1 thread, ok {ok:.0%}),"
            f" {per_op * 1e9:.3f} ns/op = {per_op / base_per_op:.2f}x the 5-level chain"
        )
        pasted = _child_seconds("--pasted-child", levels, args.limit)
        if pasted is None:
            print(f"          definitions pasted: plain symbolic over {args.limit:.0f} s (stopped)")
        else:
            print(
                f"          definitions pasted: plain symbolic {pasted[0]:.2f} s wall / "
                f"{pasted[1]:.2f} s CPU = {pasted[1] / cpu_plain:.1f}x the chain rule (CPU)"
            )


if __name__ == "__main__":
    main()
