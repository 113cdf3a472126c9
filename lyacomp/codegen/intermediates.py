"""Stage 3, with definitions: one C function's straight-line code over the intermediates.

The derivative entries of a model with definitions are expressions over intermediate
values (``derive/chain.py``: each definition and its partial derivatives, named
``q{k}``, ``q{k}_x0_p1``, ...). A function gets exactly the intermediates its outputs
use, each once, in an order of evaluation. Common subexpressions are eliminated over
the intermediates and outputs of the function together (as ``lower_block`` does without
definitions); the CSE temporaries are placed just before the first statement that uses
them, so every temporary comes after everything it reads.
"""

from __future__ import annotations

import sympy as sp

from ..derive.chain import DefinitionChain
from .printer import ccode


def straight_line(
    exprs: list[sp.Expr],
    subs: dict[sp.Symbol, sp.Symbol],
    temp_prefix: str,
    chain: DefinitionChain,
) -> tuple[list[tuple[str, str]], list[str]]:
    """``(temporaries, outputs)`` as C: ``(name, code)`` pairs in evaluation order, and the
    code of each expression of ``exprs``."""
    names = {**subs, **chain.c_names}
    inter = chain.needed(exprs)
    inputs = [value.xreplace(names) for _, value in inter] + [e.xreplace(names) for e in exprs]
    replacements, reduced = sp.cse(inputs, symbols=sp.numbered_symbols(temp_prefix))
    cse_value = dict(replacements)
    cse_rank = {sym: r for r, (sym, _) in enumerate(replacements)}
    placed: set[sp.Symbol] = set()
    temporaries: list[tuple[str, str]] = []

    def place_cse_inputs(expr: sp.Expr) -> None:
        # An intermediate's expression only reads earlier intermediates, so the CSE
        # temporaries it reads (subexpressions of it) only read earlier ones too.
        wanted: set[sp.Symbol] = set()
        stack = [s for s in expr.free_symbols if s in cse_value and s not in placed]
        while stack:
            s = stack.pop()
            if s not in wanted:
                wanted.add(s)
                stack.extend(t for t in cse_value[s].free_symbols if t in cse_value)
        for s in sorted(wanted - placed, key=cse_rank.__getitem__):
            temporaries.append((str(s), ccode(cse_value[s])))
            placed.add(s)

    for (sym, _), value in zip(inter, reduced, strict=False):
        place_cse_inputs(value)
        temporaries.append((str(sym.xreplace(names)), ccode(value)))
    outputs = reduced[len(inter) :]
    for value in outputs:
        place_cse_inputs(value)
    return temporaries, [ccode(v) for v in outputs]
