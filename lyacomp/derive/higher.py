"""Stage 2, continued: fourth and fifth derivatives for the second Lyapunov coefficient.

Formed from the stored third derivatives, again once per sorted index tuple and only
where non-zero, so the cost stays proportional to the entries that exist. With
definitions the entries continue the chain rule of ``derive/chain.py`` (the intermediates
up to fifth order are made here, on first use).
"""

from __future__ import annotations

from dataclasses import dataclass

import sympy as sp

from .derivatives import Derivatives, _depends, _diff

Index5 = tuple[int, int, int, int, int]
Index6 = tuple[int, int, int, int, int, int]


@dataclass(frozen=True)
class HigherDerivatives:
    """``fourth[(i, j, k, last, m)]`` is d^4 F_i / dx_j dx_k dx_l dx_m for j <= k <= l <= m;
    ``fifth`` likewise with five sorted state indices."""

    base: Derivatives
    fourth: dict[Index5, sp.Expr]
    fifth: dict[Index6, sp.Expr]


def derive_higher(der: Derivatives) -> HigherDerivatives:
    """Differentiate each stored third derivative once and twice more."""
    xs = der.model.states
    n = len(xs)
    chain = der.chain
    fourth: dict[Index5, sp.Expr] = {}
    fifth: dict[Index6, sp.Expr] = {}
    for (i, j, k, last), d3 in sorted(der.third.items()):
        for m in range(last, n):
            if not _depends(d3, xs[m], chain):
                continue
            d4 = _diff(d3, xs[m], f"equation {i}", chain)
            if d4 == 0:
                continue
            fourth[(i, j, k, last, m)] = d4
            for r in range(m, n):
                if not _depends(d4, xs[r], chain):
                    continue
                d5 = _diff(d4, xs[r], f"equation {i}", chain)
                if d5 != 0:
                    fifth[(i, j, k, last, m, r)] = d5
    return HigherDerivatives(der, fourth, fifth)
