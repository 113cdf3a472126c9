"""Stage 3, extra: lowering the parameter derivatives to C fragments.

The same guarantees as :mod:`.lower`: user names never reach the C text (state j is
``x[j]``, parameter k is ``p[k]``). Arrays are parameter-major: ``fp[k * N + i]``,
``jp[k * N * N + i * N + j]``, ``d2p[k * ND2 + e]``, ``d3p[k * ND3 + e]``.

The derivative stage works with contracted forms (an adjoint sweep): ``sum_i w_i
F_i(u, ..., e_m)`` for every m, and per stored entry the real part of ``w_i`` times the
products of its slots, so that each parameter costs dot products with its generated
derivative entries instead of forms evaluated per parameter.
"""

from __future__ import annotations

from dataclasses import dataclass

import sympy as sp

from ..derive import Derivatives, SensitivityDerivatives
from ..errors import InternalError
from .lower import Accumulation, Block, _distinct_orders, lower_block


@dataclass(frozen=True)
class SensitivityLowered:
    """The fragments of the derivative stage (``templates/stage_sensitivity.c.j2``)."""

    terms: Block
    n_fourth: int
    has_f: tuple[int, ...]
    """Per parameter: 1 when F depends on it (else the equilibrium does not move)."""
    b_left: tuple[Accumulation, ...]
    """``out[m] += w[i] * d2[e] * (u products)``: sum_i w_i B(u, e_m)_i."""
    c_left: tuple[Accumulation, ...]
    """Likewise sum_i w_i C(u, v, e_m)_i."""
    b_weight: tuple[Accumulation, ...]
    """``out[e] += Re(w[i] * (u v products))``: the weight of second-derivative entry e."""
    c_weight: tuple[Accumulation, ...]
    """Likewise for third-derivative entries (slots u, v, z)."""
    contract: tuple[Accumulation, ...]
    """``target += weight * entry`` over the non-zero parameter derivatives of the Jacobian
    and of the stored entries: per parameter k, ``lam[k]`` (with ``pq``, the eigenvalue
    change) and ``l1p[k]`` (with ``wa``, ``w2``, ``w3``, the l1 change)."""
    c_left_same: tuple[Accumulation, ...]
    """sum_i w_i C(u, u, e_m)_i, repeated products merged."""
    lift: tuple[Accumulation, ...]
    """``gx[m] += weight * entry``: weights of the Jacobian (``wa``), second (``w2``) and
    third (``w3``) derivative entries carried to a state change e_m, through the entries
    one order higher (``d2``, ``d3``, ``d4``)."""

    def forms(self) -> dict[str, tuple[Accumulation, ...]]:
        """The contracted forms by name (for their lane versions, ``codegen/lanes.py``)."""
        return {
            "b_left": self.b_left,
            "c_left": self.c_left,
            "c_left_same": self.c_left_same,
            "b_weight": self.b_weight,
            "c_weight": self.c_weight,
            "lift": self.lift,
            "contract": self.contract,
        }


def _products(order: tuple[int, ...], slots: str) -> str:
    return " * ".join(f"{v}[{a}]" for v, a in zip(slots, order, strict=True))


def _left_open(keys: list[tuple[int, ...]], array: str, slots: str) -> tuple[Accumulation, ...]:
    """The form contracted with w in its output and with its last slot open: one
    accumulation per (entry, open index)."""
    out = []
    for e, (i, *idx) in enumerate(keys):
        by_last: dict[int, list[str]] = {}
        for order in _distinct_orders(tuple(idx)):
            *first, last = order
            by_last.setdefault(last, []).append(_products(tuple(first), slots))
        for last, products in sorted(by_last.items()):
            out.append(Accumulation(f"out[{last}]", f"w[{i}] * {array}[{e}]", tuple(products)))
    return tuple(out)


def _left_open_same(keys: list[tuple[int, ...]], array: str) -> tuple[Accumulation, ...]:
    """sum_i w_i F_i(u, u, e_m): like :func:`_left_open` with both open slots u, equal
    products counted once with their multiplicity."""
    out = []
    for e, (i, *idx) in enumerate(keys):
        by_last: dict[int, dict[tuple[int, ...], int]] = {}
        for order in _distinct_orders(tuple(idx)):
            *first, last = order
            counts = by_last.setdefault(last, {})
            key = tuple(sorted(first))
            counts[key] = counts.get(key, 0) + 1
        for last, counts in sorted(by_last.items()):
            products = tuple(
                ("" if c == 1 else f"{c}.0 * ") + _products(key, "u" * len(key))
                for key, c in sorted(counts.items())
            )
            out.append(Accumulation(f"out[{last}]", f"w[{i}] * {array}[{e}]", products))
    return tuple(out)


def _contract(
    der: Derivatives, sens: SensitivityDerivatives, n2: int, n3: int
) -> tuple[Accumulation, ...]:
    """The per-parameter dot products with the non-zero generated derivative entries."""
    n = len(der.model.states)
    out = []
    for k, i, j in sorted(sens.j_p):
        entry = f"jp[{k * n * n + i * n + j}]"
        out.append(Accumulation(f"lam[{k}]", f"pq[{i * n + j}]", (entry,)))
        out.append(Accumulation(f"l1p[{k}]", f"wa[{i * n + j}]", (entry,)))
    for k, e in sorted(sens.second_p):
        out.append(Accumulation(f"l1p[{k}]", f"w2[{e}]", (f"d2p[{k * n2 + e}]",)))
    for k, e in sorted(sens.third_p):
        out.append(Accumulation(f"l1p[{k}]", f"w3[{e}]", (f"d3p[{k * n3 + e}]",)))
    return tuple(out)


def _weights(keys: list[tuple[int, ...]], slots: str) -> tuple[Accumulation, ...]:
    """Per entry e = (i, j, ...): the products of every distinct ordering of its slots."""
    return tuple(
        Accumulation(
            f"out[{e}]",
            f"w[{i}]",
            tuple(_products(order, slots) for order in _distinct_orders(tuple(idx))),
        )
        for e, (i, *idx) in enumerate(keys)
    )


def _lift(
    keys: list[tuple[int, ...]], array: str, weight_of: dict[tuple[int, ...], str]
) -> list[Accumulation]:
    """For each entry (i, j, ...) and each distinct index m in it: the entry times the
    weight of the lower-order entry (i, rest) that it differentiates along e_m."""
    out = []
    for e, (i, *idx) in enumerate(keys):
        for m in sorted(set(idx)):
            rest = list(idx)
            rest.remove(m)
            weight = weight_of.get((i, *rest))
            if weight is None:
                raise InternalError(f"entry {(i, *idx)} has no lower-order entry {(i, *rest)}")
            out.append(Accumulation(f"gx[{m}]", weight, (f"{array}[{e}]",)))
    return out


def _uses(entries, k: int) -> int:
    return int(any(key[0] == k for key in entries))


def lower_sensitivity(der: Derivatives, sens: SensitivityDerivatives) -> SensitivityLowered:
    """Print the parameter derivatives and the contracted forms B, C and D."""
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
    second_keys = sorted(der.second)
    third_keys = sorted(der.third)
    fourth_keys = sorted(sens.fourth)
    # One CSE pass with the Jacobian and the second and third derivatives too, so that
    # exp, tanh, ... shared by all of them are evaluated once per call.
    assign = [(f"jac[{i * n + j}]", e) for (i, j), e in sorted(der.jacobian.items())]
    assign += [(f"d2[{k}]", der.second[key]) for k, key in enumerate(second_keys)]
    assign += [(f"d3[{k}]", der.third[key]) for k, key in enumerate(third_keys)]
    assign += [(f"fp[{k * n + i}]", e) for (k, i), e in sorted(sens.f_p.items())]
    assign += [(f"jp[{k * n * n + i * n + j}]", e) for (k, i, j), e in sorted(sens.j_p.items())]
    assign += [(f"d2p[{k * n2 + e}]", v) for (k, e), v in sorted(sens.second_p.items())]
    assign += [(f"d3p[{k * n3 + e}]", v) for (k, e), v in sorted(sens.third_p.items())]
    assign += [(f"d4[{e}]", sens.fourth[key]) for e, key in enumerate(fourth_keys)]
    terms = lower_block(assign, subs, "t", der.chain)
    jacobian_weights = {(i, j): f"wa[{i * n + j}]" for i in range(n) for j in range(n)}
    return SensitivityLowered(
        terms=terms,
        n_fourth=len(fourth_keys),
        has_f=tuple(_uses(sens.f_p, k) for k in range(n_params)),
        b_left=_left_open(second_keys, "d2", "u"),
        c_left=_left_open(third_keys, "d3", "uv"),
        b_weight=_weights(second_keys, "uv"),
        c_weight=_weights(third_keys, "uvz"),
        contract=_contract(der, sens, n2, n3),
        c_left_same=_left_open_same(third_keys, "d3"),
        lift=tuple(
            _lift(second_keys, "d2", jacobian_weights)
            + _lift(third_keys, "d3", {key: f"w2[{e}]" for e, key in enumerate(second_keys)})
            + _lift(fourth_keys, "d4", {key: f"w3[{e}]" for e, key in enumerate(third_keys)})
        ),
    )
