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
    d_form: tuple[Accumulation, ...]


def lower_sensitivity(der: Derivatives, sens: SensitivityDerivatives) -> SensitivityLowered:
    """Print the parameter derivatives and the fourth-derivative form D(u, v, w, z)."""
    model = der.model
    n = len(model.states)
    n2 = max(len(der.second), 1)
    n3 = max(len(der.third), 1)
    subs: dict[sp.Symbol, sp.Symbol] = {}
    for j, s in enumerate(model.states):
        subs[s] = sp.Symbol(f"x[{j}]", real=True)
    for k, s in enumerate(model.parameters):
        subs[s] = sp.Symbol(f"p[{k}]", real=True)
    fourth_keys = sorted(sens.fourth)
    assign = [(f"fp[{k * n + i}]", e) for (k, i), e in sorted(sens.f_p.items())]
    assign += [(f"jp[{k * n * n + i * n + j}]", e) for (k, i, j), e in sorted(sens.j_p.items())]
    assign += [(f"d2p[{k * n2 + e}]", v) for (k, e), v in sorted(sens.second_p.items())]
    assign += [(f"d3p[{k * n3 + e}]", v) for (k, e), v in sorted(sens.third_p.items())]
    assign += [(f"d4[{e}]", sens.fourth[key]) for e, key in enumerate(fourth_keys)]
    terms = lower_block(assign, subs, "t")
    d_form = []
    for e, (i, *idx) in enumerate(fourth_keys):
        orders = _distinct_orders(tuple(idx))
        d_form.append(
            Accumulation(
                f"out[{i}]",
                f"d4[{e}]",
                tuple(f"u[{a}] * v[{b}] * w[{c}] * z[{d}]" for a, b, c, d in orders),
            )
        )
    return SensitivityLowered(terms=terms, n_fourth=len(fourth_keys), d_form=tuple(d_form))
