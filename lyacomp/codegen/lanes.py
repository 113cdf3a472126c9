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

    ``linear`` (the reduced Hopf Newton's: residual, Jacobian and what its derivatives
    need) is None for a model with a closed-form critical value, which has
    ``critical_value`` and ``equilibrium`` instead; ``hopf_point`` is the evaluation at
    the Hopf point (Jacobian and derivatives)."""

    linear: Block | None
    hopf_point: Block
    b_form: tuple[str, ...]
    c_form: tuple[str, ...]
    functions: tuple[tuple[str, int], ...]
    critical_value: Block | None = None
    equilibrium: Block | None = None
    b_form_real: tuple[str, ...] = ()
    """``B(u, v)`` with a real ``v``."""
    b_form_same: tuple[str, ...] = ()
    """``B(u, u)``."""
    b_form_conj_re: tuple[str, ...] = ()
    """``Re B(u, conj u)``, into real outputs."""


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


def _lane_expr(code: str, prefix: str, used: dict[str, int], calls: str = "v") -> str:
    """``code`` on lane values; a libm function ``f`` becomes ``<prefix>_<calls>_f``:
    ``v`` the vector math where the build found it, ``lane`` libm lane by lane."""
    out, pos = [], 0
    for m in _TOKEN.finditer(code):
        if m.start() < pos:
            continue
        name = m.group("name")
        after = m.end()
        if name and after < len(code) and code[after] == "(":
            args, end = _split_call(code, after)
            used[name] = len(args)
            lanes = [_spread(_lane_expr(a, prefix, used, calls), prefix, a) for a in args]
            out.append(f"{prefix}_{calls}_{name}({', '.join(lanes)})")
            pos = end
        else:
            out.append(m.group(0))
            pos = m.end()
    return "".join(out)


def _spread(lane_code: str, prefix: str, original: str) -> str:
    return f"{prefix}_splat({lane_code})" if _is_constant(original) else lane_code


def _lane_block(block: Block, prefix: str, used: dict[str, int], calls: str = "v") -> Block:
    def one(s: Statement) -> Statement:
        return Statement(s.target, _spread(_lane_expr(s.code, prefix, used, calls), prefix, s.code))

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


def _orders(term: str) -> tuple[str, str]:
    """The two factors ``u[a]``, ``v[b]`` of a term of the bilinear form."""
    first, second = (f.strip() for f in term.split(" * "))
    return first, second


def _lane_form_special(
    accumulations: tuple[Accumulation, ...], prefix: str, kind: str
) -> tuple[str, ...]:
    """Cheaper versions of :func:`_lane_form` for the bilinear form ``B(u, v)`` with a
    known second argument, each exactly equal to the general lines for finite values
    (``kind``): ``real``: v real, so each complex product ``u[a] (v[b] + 0 i)`` is the
    scaling ``v[b] u[a]`` (subtracting or adding the zero products changes nothing);
    ``same``: v = u, where the two terms ``u[a] u[b] + u[b] u[a]`` of a mixed entry are
    equal products (multiplication and addition commute exactly), so their sum is twice
    one; ``conj_re``: the real part of B(u, conj u), the same pairing on the real parts
    ``Re(u[a] conj u[b]) = u[a].re u[b].re + u[a].im u[b].im``."""
    lines = []
    for a in accumulations:
        factor = a.factor if not _is_constant(a.factor) else f"{prefix}_splat({a.factor})"
        pairs = [_orders(t) for t in a.terms]
        if kind == "real":
            total = ""
            for u, v in pairs:
                product = f"{prefix}_cscale({v}, {u})"
                total = product if not total else f"{prefix}_cadd({total}, {product})"
            lines.append(
                f"{a.target} = {prefix}_cadd({a.target}, {prefix}_cscale({factor}, {total}));"
            )
            continue
        u, v = pairs[0]
        w = "u" + v[1:]
        if kind == "same":
            total = f"{prefix}_cmul({u}, {w})"
            if len(pairs) == 2:
                total = f"{prefix}_cscale({prefix}_splat(2.0), {total})"
            lines.append(
                f"{a.target} = {prefix}_cadd({a.target}, {prefix}_cscale({factor}, {total}));"
            )
        else:
            total = f"({u}.re * {w}.re + {u}.im * {w}.im)"
            if len(pairs) == 2:
                total = f"2.0 * {total}"
            lines.append(f"{a.target} += {factor} * {total};")
    return tuple(lines)


def lane_code(
    linear: Block | None,
    hopf_point: Block,
    b_form: tuple[Accumulation, ...],
    c_form: tuple[Accumulation, ...],
    prefix: str,
    critical_value: Block | None = None,
    equilibrium: Block | None = None,
    vector_math: bool = True,
) -> LaneCode:
    """Lane versions of the model functions and multilinear forms of the lane stage (with
    the closed-form critical value and equilibrium, when the model gives them).
    ``vector_math`` False: the model functions call libm lane by lane (``<prefix>_lane_f``),
    so that the lanes compute exactly what the scalar code computes."""
    used: dict[str, int] = {}
    calls = "v" if vector_math else "lane"

    def lanes_of(block: Block | None) -> Block | None:
        return _lane_block(block, prefix, used, calls) if block is not None else None

    linear_lanes, point_lanes = map(lanes_of, (linear, hopf_point))
    critical_lanes, equilibrium_lanes = map(lanes_of, (critical_value, equilibrium))
    return LaneCode(
        linear_lanes,
        point_lanes,
        _lane_form(b_form, prefix),
        _lane_form(c_form, prefix),
        tuple(sorted(used.items())),
        critical_lanes,
        equilibrium_lanes,
        _lane_form_special(b_form, prefix, "real"),
        _lane_form_special(b_form, prefix, "same"),
        _lane_form_special(b_form, prefix, "conj_re"),
    )


@dataclass(frozen=True)
class SensitivityLanes:
    """Lane versions of the derivative stage's model code and contracted forms
    (``templates/stage_lanes_sensitivity.c.j2``), and the libm functions they call."""

    terms: Block
    b_left: tuple[str, ...]
    c_left: tuple[str, ...]
    c_left_same: tuple[str, ...]
    b_weight: tuple[str, ...]
    c_weight: tuple[str, ...]
    lift: tuple[str, ...]
    contract: tuple[str, ...]
    functions: tuple[tuple[str, int], ...]


# The complex vectors of the derivative stage's forms (every other array there is real).
_COMPLEX_ARRAYS = frozenset({"w", "u", "v", "z", "pq"})


def _lane_value(code: str, prefix: str) -> tuple[str, bool]:
    """A factor of a generated product as lane code and whether it is complex."""
    if _is_constant(code):
        return f"{prefix}_splat({code})", False
    return code, code.split("[", 1)[0] in _COMPLEX_ARRAYS


def _lane_mul(a: tuple[str, bool], b: tuple[str, bool], prefix: str) -> tuple[str, bool]:
    if a[1] and b[1]:
        return f"{prefix}_cmul({a[0]}, {b[0]})", True
    if a[1] or b[1]:
        real, cplx = (b[0], a[0]) if a[1] else (a[0], b[0])
        return f"{prefix}_cscale({real}, {cplx})", True
    return f"{a[0]} * {b[0]}", False


def _lane_product(code: str, prefix: str) -> tuple[str, bool]:
    factors = [_lane_value(f.strip(), prefix) for f in code.split(" * ")]
    value = factors[0]
    for f in factors[1:]:
        value = _lane_mul(value, f, prefix)
    return value


def _lane_accumulations(
    accumulations: tuple[Accumulation, ...], prefix: str, complex_target: bool
) -> tuple[str, ...]:
    """``target += factor * (terms)`` in lanes, products left to right as in the scalar
    text; a real target of a complex value takes its real part (the scalar ``creal``)."""
    lines = []
    for a in accumulations:
        total: tuple[str, bool] | None = None
        for term in a.terms:
            product = _lane_product(term, prefix)
            if total is None:
                total = product
            elif total[1]:
                total = (f"{prefix}_cadd({total[0]}, {product[0]})", True)
            else:
                total = (f"{total[0]} + {product[0]}", False)
        if total is None:
            raise CodegenError(f"an accumulation into {a.target} has no terms")
        value = _lane_mul(_lane_product(a.factor, prefix), total, prefix)
        if complex_target:
            lines.append(f"{a.target} = {prefix}_cadd({a.target}, {value[0]});")
        else:
            lines.append(f"{a.target} += {value[0]}{'.re' if value[1] else ''};")
    return tuple(lines)


def lane_sensitivity(
    terms: Block,
    forms: dict[str, tuple[Accumulation, ...]],
    prefix: str,
) -> SensitivityLanes:
    """Lane versions of the derivative stage's fragments (``codegen/lower_sensitivity.py``:
    ``forms`` maps b_left, c_left, c_left_same, b_weight, c_weight, lift and contract to
    their accumulations); ``contract`` writes the complex ``lam`` and the real ``l1p``."""
    used: dict[str, int] = {}
    complex_out = {"b_left", "c_left", "c_left_same"}
    lines = {
        name: _lane_accumulations(acc, prefix, name in complex_out)
        for name, acc in forms.items()
        if name != "contract"
    }
    contract = tuple(
        _lane_accumulations((a,), prefix, a.target.startswith("lam["))[0] for a in forms["contract"]
    )
    return SensitivityLanes(
        terms=_lane_block(terms, prefix, used),
        b_left=lines["b_left"],
        c_left=lines["c_left"],
        c_left_same=lines["c_left_same"],
        b_weight=lines["b_weight"],
        c_weight=lines["c_weight"],
        lift=lines["lift"],
        contract=contract,
        functions=tuple(sorted(used.items())),
    )
