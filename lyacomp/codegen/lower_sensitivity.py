"""Stage 3, extra: lowering the parameter derivatives to C fragments.

The same guarantees as :mod:`.lower`: user names never reach the C text (state j is
``x[j]``, parameter k is ``p[k]``). Arrays are parameter-major: ``fp[k * N + i]``,
``jp[k * N * N + i * N + j]``, ``d2p[k * ND2 + e]``, ``d3p[k * ND3 + e]``.
"""

from __future__ import annotations

from dataclasses import dataclass

import sympy as sp

from ..derive import Derivatives, SensitivityDerivatives
from .lower import Accumulation, Block, _distinct_orders, lower_block


@dataclass(frozen=True)
class SensitivityLowered:
    """The fragments of the derivative stage (``templates/stage_sensitivity.c.j2``)."""

    terms: Block
    n_fourth: int
    has_second: tuple[int, ...]
    """Per parameter: 1 when it enters a second derivative entry (else B_k = 0)."""
    has_third: tuple[int, ...]
    """Per parameter: 1 when it enters a third derivative entry (else C_k = 0)."""
    c_mat: tuple[Accumulation, ...]
    """C(u, v, .) as an N x N matrix: ``out[i * N + m] += d3 * (u v products)``."""
    d_mat: tuple[Accumulation, ...]
    """D(u, v, w, .) as an N x N matrix, likewise."""


def _partial(
    keys: list[tuple[int, ...]], array: str, slots: str, n: int
) -> tuple[Accumulation, ...]:
    """The form with its last slot left open: one accumulation per (entry, open index)."""
    out = []
    for e, (i, *idx) in enumerate(keys):
        by_last: dict[int, list[str]] = {}
        for order in _distinct_orders(tuple(idx)):
            *first, last = order
            product = " * ".join(f"{v}[{a}]" for v, a in zip(slots, first, strict=True))
            by_last.setdefault(last, []).append(product)
        for last, products in sorted(by_last.items()):
            out.append(Accumulation(f"out[{i * n + last}]", f"{array}[{e}]", tuple(products)))
    return tuple(out)


def lower_sensitivity(der: Derivatives, sens: SensitivityDerivatives) -> SensitivityLowered:
    """Print the parameter derivatives and the forms C and D with their last slot open."""
    model = der.model
    n = len(model.states)
    n_params = len(model.parameters)
    n2 = max(len(der.second), 1)
    n3 = max(len(der.third), 1)
    subs: dict[sp.Symbol, sp.Symbol] = {}
    for j, s in enumerate(model.states):
        subs[s] = sp.Symbol(f"x[{j}]", real=True)
    for k, s in enumerate(model.parameters):
        subs[s] = sp.Symbol(f"p[{k}]", real=True)
    fourth_keys = sorted(sens.fourth)
    # One CSE pass with the Jacobian and the second and third derivatives too, so that
    # exp, tanh, ... shared by all of them are evaluated once per call.
    assign = [(f"jac[{i * n + j}]", e) for (i, j), e in sorted(der.jacobian.items())]
    assign += [(f"d2[{k}]", der.second[key]) for k, key in enumerate(sorted(der.second))]
    assign += [(f"d3[{k}]", der.third[key]) for k, key in enumerate(sorted(der.third))]
    assign += [(f"fp[{k * n + i}]", e) for (k, i), e in sorted(sens.f_p.items())]
    assign += [(f"jp[{k * n * n + i * n + j}]", e) for (k, i, j), e in sorted(sens.j_p.items())]
    assign += [(f"d2p[{k * n2 + e}]", v) for (k, e), v in sorted(sens.second_p.items())]
    assign += [(f"d3p[{k * n3 + e}]", v) for (k, e), v in sorted(sens.third_p.items())]
    assign += [(f"d4[{e}]", sens.fourth[key]) for e, key in enumerate(fourth_keys)]
    terms = lower_block(assign, subs, "t", der.chain)
    return SensitivityLowered(
        terms=terms,
        n_fourth=len(fourth_keys),
        has_second=tuple(int(any(k == kk for kk, _ in sens.second_p)) for k in range(n_params)),
        has_third=tuple(int(any(k == kk for kk, _ in sens.third_p)) for k in range(n_params)),
        c_mat=_partial(sorted(der.third), "d3", "uv", n),
        d_mat=_partial(fourth_keys, "d4", "uvw", n),
    )
