"""Stage 3, continued: the fragments of the second-Lyapunov-coefficient kernel.

Two parts: the derivatives up to fifth order as one straight-line block with the forms
D and E (like B and C in :mod:`.lower`), and the *recipe* of l2 -- for each coefficient
of the center-manifold expansion that l2 needs, the list of multilinear-form calls that
make up its right-hand side. The recipe is enumerated here, not written out by hand, so
no term of the expansion can be forgotten (see docs/mathematics.md, "Second Lyapunov
coefficient").
"""

from __future__ import annotations

import itertools
from collections import Counter
from dataclasses import dataclass
from math import factorial, prod

import sympy as sp

from ..derive.higher import HigherDerivatives
from ..errors import InternalError
from .lower import Accumulation, Block, lower_block

Pair = tuple[int, int]

_FORMS = {2: ("bform", "d2"), 3: ("cform", "d3"), 4: ("dform", "d4"), 5: ("eform", "d5")}
_ARG_NAMES = ("u", "v", "w", "y", "z")

TARGETS: tuple[Pair, ...] = ((2, 0), (1, 1), (3, 0), (2, 1), (3, 1), (2, 2), (3, 2))
"""The expansion coefficients h_jk solved in this order (j + k <= 5, j <= 3, k <= 2)."""

SLOTS = ("q", "qb", "h20", "h02", "h11", "h30", "h21", "h12", "h31", "h22")
"""The vectors the kernel holds (q, conj q, the h_jk of TARGETS but h32, and conjugates)."""


@dataclass(frozen=True)
class FormCall:
    """One term ``form(args) / divisor`` of the right-hand side of a coefficient."""

    form: str
    tensor: str
    args: tuple[str, ...]
    divisor: int

    @property
    def slots(self) -> str:
        """The arguments as C slot names of the vector table (``LV_Q, LV_H20``)."""
        return ", ".join(f"LV_{a.upper()}" for a in self.args)


@dataclass(frozen=True)
class Coefficient:
    """The right-hand side ``rhs`` of the equation for h_jk, as a list of form calls."""

    name: str
    terms: tuple[FormCall, ...]


@dataclass(frozen=True)
class LoweredHigher:
    """Everything stage_l2.c.j2 needs, already printed as C."""

    derivatives: Block
    """d4[...] and d5[...] (the second and third come from the l1 kernel's function)."""
    n_fourth: int
    n_fifth: int
    d_form: tuple[Accumulation, ...]
    e_form: tuple[Accumulation, ...]
    recipe: tuple[Coefficient, ...]
    slots: tuple[str, ...] = SLOTS


def vector_name(pair: Pair) -> str:
    """C name of h_jk: q for h10, qb for h01, hJK otherwise."""
    return {(1, 0): "q", (0, 1): "qb"}.get(pair, f"h{pair[0]}{pair[1]}")


def _partitions(target: Pair, parts: list[Pair], size: int, start: int = 0):
    """Multisets of ``size`` pairs from ``parts[start:]`` (in order) summing to ``target``."""
    if size == 0:
        if target == (0, 0):
            yield ()
        return
    for i in range(start, len(parts)):
        a, b = parts[i]
        if a > target[0] or b > target[1]:
            continue
        for rest in _partitions((target[0] - a, target[1] - b), parts, size - 1, i):
            yield (parts[i],) + rest


def expansion_terms(target: Pair) -> tuple[FormCall, ...]:
    """The nonlinear part of F(x0 + H) at w^j conj(w)^k, H = sum h_ab w^a conj(w)^b.

    Taylor's formula gives sum_m D^mF[H, ..., H] / m!; the coefficient of w^j conj(w)^k
    collects, for each multiset of m index pairs summing to (j, k), m!/prod(mult!) equal
    ordered terms, so each multiset enters once divided by prod(mult!).
    """
    order = target[0] + target[1]
    parts = [(a, s - a) for s in range(1, order) for a in range(s, -1, -1)]
    terms = []
    for size in range(2, min(order, 5) + 1):
        for multiset in _partitions(target, parts, size):
            divisor = prod(factorial(c) for c in Counter(multiset).values())
            form, tensor = _FORMS[size]
            args = tuple(vector_name(p) for p in multiset)
            terms.append(FormCall(form, tensor, args, divisor))
    return tuple(terms)


def _symmetric(keys: list[tuple[int, ...]], arity: int) -> tuple[Accumulation, ...]:
    out = []
    for k, (i, *idx) in enumerate(keys):
        orders = sorted(set(itertools.permutations(idx)))
        products = tuple(
            " * ".join(f"{_ARG_NAMES[s]}[{j}]" for s, j in enumerate(order)) for order in orders
        )
        out.append(Accumulation(f"out[{i}]", f"d{arity}[{k}]", products))
    return tuple(out)


def lower_higher(high: HigherDerivatives) -> LoweredHigher:
    """Print the fourth and fifth derivatives (one CSE pass) and the forms D, E."""
    der = high.base
    model = der.model
    subs: dict[sp.Symbol, sp.Symbol] = {}
    for j, s in enumerate(model.states):
        subs[s] = sp.Symbol(f"x[{j}]", real=True)
    for k, s in enumerate(model.parameters):
        subs[s] = sp.Symbol(f"p[{k}]", real=True)
    fourth_keys = sorted(high.fourth)
    fifth_keys = sorted(high.fifth)
    # d2 and d3 come from the curvature function of the l1 kernel; only d4, d5 here.
    assign = [(f"d4[{k}]", high.fourth[key]) for k, key in enumerate(fourth_keys)]
    assign += [(f"d5[{k}]", high.fifth[key]) for k, key in enumerate(fifth_keys)]
    recipe = tuple(Coefficient(vector_name(t), expansion_terms(t)) for t in TARGETS)
    missing = {a for c in recipe for t in c.terms for a in t.args} - set(SLOTS)
    if missing:
        raise InternalError(f"the l2 recipe uses vectors the kernel lacks: {sorted(missing)}")
    return LoweredHigher(
        derivatives=lower_block(assign, subs, "t", der.chain),
        n_fourth=len(fourth_keys),
        n_fifth=len(fifth_keys),
        d_form=_symmetric(fourth_keys, 4),
        e_form=_symmetric(fifth_keys, 5),
        recipe=recipe,
    )
