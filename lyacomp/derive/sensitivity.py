"""Stage 2, extra: the symbolic derivatives behind exact parameter derivatives.

The implicit function theorem on the Hopf conditions (docs/mathematics.md, "Exact parameter
derivatives") needs, for every parameter, the parameter derivative of F, of its Jacobian and
of the stored second and third derivative entries, and the fourth state derivatives (the
state derivative of C along the moving equilibrium). Entries stay sparse like the others.
"""

from __future__ import annotations

from dataclasses import dataclass

import sympy as sp

from .chain import DefinitionChain
from .derivatives import Derivatives, Index2, Index3, Index4, _depends, _diff

Index5 = tuple[int, int, int, int, int]


@dataclass(frozen=True)
class SensitivityDerivatives:
    """Parameter derivatives (keys start with the parameter index) and fourth derivatives.

    ``f_p[(k, i)] = dF_i/dp_k``, ``j_p[(k, i, j)] = d(dF_i/dx_j)/dp_k``,
    ``second_p[(k, e)]`` and ``third_p[(k, e)]`` differentiate the e-th entry of the
    sorted second (third) derivative keys of :class:`Derivatives` with respect to p_k;
    ``fourth[(i, j, k, l, m)]`` holds d^4 F_i / dx_j dx_k dx_l dx_m for j <= k <= l <= m.
    """

    f_p: dict[Index2, sp.Expr]
    j_p: dict[Index3, sp.Expr]
    second_p: dict[Index2, sp.Expr]
    third_p: dict[Index2, sp.Expr]
    fourth: dict[Index5, sp.Expr]


def _nonzero(
    expr: sp.Expr, var: sp.Symbol, what: str, chain: DefinitionChain | None = None
) -> sp.Expr | None:
    # ``chain``: the definitions' chain rule (derive/chain.py), None without definitions.
    if not _depends(expr, var, chain):
        return None
    d = _diff(expr, var, what, chain)
    return None if d == 0 else d


def derive_sensitivity(der: Derivatives) -> SensitivityDerivatives:
    """Differentiate F, the Jacobian and the stored entries once more (see the class)."""
    model = der.model
    xs = model.states
    n = len(xs)
    f_p: dict[Index2, sp.Expr] = {}
    j_p: dict[Index3, sp.Expr] = {}
    second_p: dict[Index2, sp.Expr] = {}
    third_p: dict[Index2, sp.Expr] = {}
    second_keys: list[Index3] = sorted(der.second)
    third_keys: list[Index4] = sorted(der.third)
    for k, par in enumerate(model.parameters):
        for i, f in enumerate(der.equations):
            d = _nonzero(f, par, f"equation {i}", der.chain)
            if d is not None:
                f_p[(k, i)] = d
        for (i, j), a in sorted(der.jacobian.items()):
            d = _nonzero(a, par, f"Jacobian entry ({i}, {j})", der.chain)
            if d is not None:
                j_p[(k, i, j)] = d
        for e, key in enumerate(second_keys):
            d = _nonzero(der.second[key], par, f"equation {key[0]}", der.chain)
            if d is not None:
                second_p[(k, e)] = d
        for e, key in enumerate(third_keys):
            d = _nonzero(der.third[key], par, f"equation {key[0]}", der.chain)
            if d is not None:
                third_p[(k, e)] = d
    fourth: dict[Index5, sp.Expr] = {}
    for key, d3 in sorted(der.third.items()):
        for m in range(key[3], n):
            d = _nonzero(d3, xs[m], f"equation {key[0]}", der.chain)
            if d is not None:
                fourth[(*key, m)] = d
    return SensitivityDerivatives(f_p, j_p, second_p, third_p, fourth)
