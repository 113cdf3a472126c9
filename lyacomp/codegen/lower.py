"""Stage 3: lowering derivatives to finished C fragments for the templates.

Every symbolic quantity becomes a :class:`Block`: common subexpressions are pulled
out into named temporaries, then each output is assigned. User names never reach
the C text: state j is ``x[j]`` and parameter k is ``p[k]``; comments in the
generated file map the indices back to the names.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import sympy as sp

from ..derive import Derivatives
from ..derive.chain import DefinitionChain
from .intermediates import straight_line
from .printer import ccode


@dataclass(frozen=True)
class Statement:
    """``target = code;`` in C."""

    target: str
    code: str


@dataclass(frozen=True)
class Block:
    """Straight-line C: temporaries first, then the outputs."""

    temporaries: tuple[Statement, ...]
    outputs: tuple[Statement, ...]

    @property
    def uses(self) -> str:
        """All code text, to tell which inputs a function body reads."""
        return " ".join(s.code for s in self.temporaries + self.outputs)


@dataclass(frozen=True)
class Accumulation:
    """``target += factor * (product);`` lines for the multilinear forms."""

    target: str
    factor: str
    terms: tuple[str, ...]


@dataclass(frozen=True)
class Lowered:
    """Everything the templates need, already printed as C."""

    n: int
    n_params: int
    bif_index: int
    f_jac: Block
    linear: Block | None
    curvature: Block
    n_second: int
    n_third: int
    b_form: tuple[Accumulation, ...]
    c_form: tuple[Accumulation, ...]
    hess_dir: tuple[Accumulation, ...]
    chain: tuple[Accumulation, ...]
    critical_value: Block | None
    equilibrium: Block | None
    hopf_point: Block | None = None
    """The Jacobian, second and third derivatives and the mu derivatives in one block, for
    the lane stage's evaluation at a Hopf point (two and three states with a bifurcation
    parameter, no delays; else None)."""
    n_delays: int = 0
    """Number of distinct delays; the stacked variables number ``n * (n_delays + 1)``."""
    delays: Block | None = None
    """``tau[k]`` and ``tau_mu[k]`` from the parameters (delay models only)."""


def lower_block(
    assignments: list[tuple[str, sp.Expr]],
    subs: dict[sp.Symbol, sp.Symbol],
    temp_prefix: str,
    chain: DefinitionChain | None = None,
) -> Block:
    """CSE over all assignments together, then print to C; with definitions (``chain``)
    the intermediates the assignments use come first (``intermediates.py``)."""
    if not assignments:
        return Block((), ())
    if chain is not None:
        temps, codes = straight_line([e for _, e in assignments], subs, temp_prefix, chain)
        return Block(
            tuple(Statement(name, code) for name, code in temps),
            tuple(Statement(target, code) for (target, _), code in zip(assignments, codes)),
        )
    exprs = [expr.xreplace(subs) for _, expr in assignments]
    temps_sym = sp.numbered_symbols(temp_prefix)
    replacements, reduced = sp.cse(exprs, symbols=temps_sym)
    temporaries = tuple(Statement(str(sym), ccode(value)) for sym, value in replacements)
    outputs = tuple(
        Statement(target, ccode(value)) for (target, _), value in zip(assignments, reduced)
    )
    return Block(temporaries, outputs)


def _distinct_orders(idx: tuple[int, ...]) -> list[tuple[int, ...]]:
    return sorted(set(itertools.permutations(idx)))


def lower(der: Derivatives) -> Lowered:
    """Print every generated function body of the model."""
    model = der.model
    n = len(model.states)
    # Stacked variables of a delay model: x[k * n + j] is state j at t - tau_k (k = 0:
    # undelayed), so Jacobian rows have ns = n (m + 1) entries; ns = n for an ODE.
    ns = n * (len(model.delays) + 1)
    subs: dict[sp.Symbol, sp.Symbol] = {}
    for j, s in enumerate(model.states):
        subs[s] = sp.Symbol(f"x[{j}]", real=True)
    for k, lagged in enumerate(model.lagged):
        for j, s in enumerate(lagged):
            subs[s] = sp.Symbol(f"x[{(k + 1) * n + j}]", real=True)
    for k, s in enumerate(model.parameters):
        subs[s] = sp.Symbol(f"p[{k}]", real=True)
    bif_index = model.parameters.index(model.bifurcation) if model.bifurcation is not None else -1

    chain = der.chain
    rhs_assign = [(f"f[{i}]", e) for i, e in enumerate(der.equations)]
    jac_assign = [(f"jac[{i * ns + j}]", e) for (i, j), e in sorted(der.jacobian.items())]
    mu_assign = [(f"f_mu[{i}]", e) for i, e in sorted(der.f_mu.items())]
    mu_assign += [(f"j_mu[{i * ns + j}]", e) for (i, j), e in sorted(der.j_mu.items())]
    second_keys = sorted(der.second)
    third_keys = sorted(der.third)
    second_assign = [(f"d2[{k}]", der.second[key]) for k, key in enumerate(second_keys)]
    # One CSE pass per set of quantities needed together, so that expensive functions
    # (exp, tanh, ...) shared by F and its derivatives are evaluated once.
    f_jac = lower_block(rhs_assign + jac_assign, subs, "t", chain)
    solves_mu = model.bifurcation is not None and model.critical_value is None
    linear = (
        lower_block(rhs_assign + jac_assign + second_assign + mu_assign, subs, "t", chain)
        if solves_mu
        else None
    )
    third_assign = [(f"d3[{k}]", der.third[key]) for k, key in enumerate(third_keys)]
    curvature = lower_block(second_assign + third_assign + mu_assign, subs, "t", chain)
    hopf_point = None
    if n <= 3 and model.bifurcation is not None and not model.delays:
        point_assign = jac_assign + second_assign + third_assign + mu_assign
        hopf_point = lower_block(point_assign, subs, "t", chain)

    b_form = []
    hess_dir = []
    for k, (i, j1, j2) in enumerate(second_keys):
        orders = _distinct_orders((j1, j2))
        b_form.append(
            Accumulation(f"out[{i}]", f"d2[{k}]", tuple(f"u[{a}] * v[{b}]" for a, b in orders))
        )
        # H(w)_ij = sum_l F_ijl w_l: entry (j, l) feeds column j with w_l and column l with w_j.
        for a, b in orders:
            hess_dir.append(Accumulation(f"h[{i * n + a}]", f"d2[{k}]", (f"w[{b}]",)))
    # d h(A)/dx_b = sum_ia dh/dA_ia d2F_i/dx_a dx_b, from the stored (sorted) entries.
    chain = []
    for k, (i, j1, j2) in enumerate(second_keys):
        for a, b in _distinct_orders((j1, j2)):
            chain.append(Accumulation(f"grad[{b}]", f"d2[{k}]", (f"dh[{i * n + a}]",)))
    c_form = []
    for k, (i, j1, j2, j3) in enumerate(third_keys):
        orders = _distinct_orders((j1, j2, j3))
        c_form.append(
            Accumulation(
                f"out[{i}]", f"d3[{k}]", tuple(f"u[{a}] * v[{b}] * w[{c}]" for a, b, c in orders)
            )
        )

    crit = None
    if model.critical_value is not None:
        crit = lower_block([(f"p[{bif_index}]", model.critical_value)], subs, "t")
    equilibrium = None
    if model.equilibrium is not None:
        equilibrium = lower_block(
            [(f"x[{j}]", e) for j, e in enumerate(model.equilibrium)], subs, "t"
        )
    return Lowered(
        n=n,
        n_params=len(model.parameters),
        bif_index=bif_index,
        f_jac=f_jac,
        linear=linear,
        curvature=curvature,
        n_second=len(second_keys),
        n_third=len(third_keys),
        b_form=tuple(b_form),
        c_form=tuple(c_form),
        hess_dir=tuple(hess_dir),
        chain=tuple(chain),
        critical_value=crit,
        equilibrium=equilibrium,
        hopf_point=hopf_point,
        n_delays=len(model.delays),
        delays=_lower_delays(der, subs),
    )


def _lower_delays(der: Derivatives, subs: dict[sp.Symbol, sp.Symbol]) -> Block | None:
    """The delays and their mu-derivatives as one block (None for an ODE model)."""
    if not der.delays:
        return None
    assign = [(f"tau[{k}]", tau) for k, tau in enumerate(der.delays)]
    assign += [(f"tau_mu[{k}]", d) for k, d in enumerate(der.delays_mu)]
    return lower_block(assign, subs, "t")
