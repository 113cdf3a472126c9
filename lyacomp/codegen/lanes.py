"""Lane versions of printed model code: the same C text, on several samples at once.

In the SIMD stage (``templates/stage_lanes.c.j2``) every state, parameter and temporary
is a ``vdouble`` (one value per sample). The arithmetic of the printed code stays as it
is (GCC's vector types take + - * / and scalar operands); only the libm calls become
calls of lane functions, and expressions made of constants alone are spread over the
lanes, since C does not turn a scalar into a vector on assignment.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from ..errors import CodegenError
from .lower import Accumulation, Block, Statement

_TOKEN = re.compile(
    r"(?P<num>\d+\.?\d*(?:[eE][+-]?\d+)?)|(?P<name>[A-Za-z_]\w*)|(?P<other>.)", re.S
)

# The functions glibc's libmvec has (with the argument count); the lane stage calls
# those through the vector entry points when the build-time probe found them.
VECTOR_MATH = {"exp": 1, "log": 1, "sin": 1, "cos": 1, "tanh": 1, "pow": 2}


@dataclass(frozen=True)
class LaneCode:
    """Lane blocks of one model and the libm functions (name, arity) they call.

    ``linear`` (the reduced Hopf Newton's) is None for a model with a closed-form critical
    value, which has ``critical_value`` and ``equilibrium`` instead."""

    f_jac: Block
    linear: Block | None
    curvature: Block
    b_form: tuple[str, ...]
    c_form: tuple[str, ...]
    functions: tuple[tuple[str, int], ...]
    critical_value: Block | None = None
    equilibrium: Block | None = None


def _split_call(code: str, start: int) -> tuple[list[str], int]:
    """Arguments of the call whose '(' is at ``start``; returns them and the end index."""
    depth, args, begin = 0, [], start + 1
    for i in range(start, len(code)):
        ch = code[i]
        if ch == "(":
            depth += 1
        elif ch == ")":
            depth -= 1
            if depth == 0:
                args.append(code[begin:i])
                return args, i + 1
        elif ch == "," and depth == 1:
            args.append(code[begin:i])
            begin = i + 1
    raise CodegenError("unbalanced parentheses in generated code")


def _is_constant(code: str) -> bool:
    return not any(m.group("name") for m in _TOKEN.finditer(code))


def _lane_expr(code: str, prefix: str, used: dict[str, int]) -> str:
    out, pos = [], 0
    for m in _TOKEN.finditer(code):
        if m.start() < pos:
            continue
        name = m.group("name")
        after = m.end()
        if name and after < len(code) and code[after] == "(":
            args, end = _split_call(code, after)
            used[name] = len(args)
            lanes = [_spread(_lane_expr(a, prefix, used), prefix, a) for a in args]
            out.append(f"{prefix}_v_{name}({', '.join(lanes)})")
            pos = end
        else:
            out.append(m.group(0))
            pos = m.end()
    return "".join(out)


def _spread(lane_code: str, prefix: str, original: str) -> str:
    return f"{prefix}_splat({lane_code})" if _is_constant(original) else lane_code


def _lane_block(block: Block, prefix: str, used: dict[str, int]) -> Block:
    def one(s: Statement) -> Statement:
        return Statement(s.target, _spread(_lane_expr(s.code, prefix, used), prefix, s.code))

    return Block(tuple(map(one, block.temporaries)), tuple(map(one, block.outputs)))


def _lane_form(accumulations: tuple[Accumulation, ...], prefix: str) -> tuple[str, ...]:
    """``out[i] += d[k] * (u[j] * v[l] + ...)`` as complex lane calls, in the same order
    of operations (products and sums left to right)."""
    lines = []
    for a in accumulations:
        total = ""
        for term in a.terms:
            factors = [f.strip() for f in term.split(" * ")]
            product = factors[0]
            for f in factors[1:]:
                product = f"{prefix}_cmul({product}, {f})"
            total = product if not total else f"{prefix}_cadd({total}, {product})"
        factor = a.factor if not _is_constant(a.factor) else f"{prefix}_splat({a.factor})"
        lines.append(f"{a.target} = {prefix}_cadd({a.target}, {prefix}_cscale({factor}, {total}));")
    return tuple(lines)


def lane_code(
    f_jac: Block,
    linear: Block | None,
    curvature: Block,
    b_form: tuple[Accumulation, ...],
    c_form: tuple[Accumulation, ...],
    prefix: str,
    critical_value: Block | None = None,
    equilibrium: Block | None = None,
) -> LaneCode:
    """Lane versions of the model functions and multilinear forms of the lane stage (with
    the closed-form critical value and equilibrium, when the model gives them)."""
    used: dict[str, int] = {}

    def lanes_of(block: Block | None) -> Block | None:
        return _lane_block(block, prefix, used) if block is not None else None

    f_jac_lanes, linear_lanes, curvature_lanes = map(lanes_of, (f_jac, linear, curvature))
    critical_lanes, equilibrium_lanes = map(lanes_of, (critical_value, equilibrium))
    return LaneCode(
        f_jac_lanes,
        linear_lanes,
        curvature_lanes,
        _lane_form(b_form, prefix),
        _lane_form(c_form, prefix),
        tuple(sorted(used.items())),
        critical_lanes,
        equilibrium_lanes,
    )
