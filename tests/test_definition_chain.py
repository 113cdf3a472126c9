"""Definitions kept as intermediate values (derive/chain.py) against independent references.

Two references: sympy's own differentiation of the model with the definitions substituted
(every derivative entry the kernels use, up to fifth order and the parameter derivatives),
and the independent 40-digit mpmath Hopf reference of tests/reference/mp_hopf.py on the
substituted equations (Kuznetsov, Elements of Applied Bifurcation Theory, 3rd ed. 2004,
Ch. 3, conventions of docs/mathematics.md).
"""

from __future__ import annotations

import random

import mpmath
import numpy as np
import pytest
import sympy as sp

import lyacomp
from lyacomp.codegen import lower
from lyacomp.derive import derivatives as derivatives_module
from lyacomp.derive import derive, derive_sensitivity
from lyacomp.derive.chain import DefinitionChain
from lyacomp.derive.higher import derive_higher
from tests.reference.mp_hopf import MpHopf

LEVELS_FUNCTIONS = ("tanh(a*{})", "sin({} + b)", "exp(-{}**2/2)")


def chain_model(levels: int) -> lyacomp.Model:
    """A chain of definitions, each a nonlinear function of the one before (invented model)."""
    defs = {"d0": "c0 + x + 0.5*y"}
    for k in range(1, levels + 1):
        defs[f"d{k}"] = LEVELS_FUNCTIONS[k % 3].format(f"d{k - 1}")
    return lyacomp.Model(
        name=f"chain{levels}",
        states={"x": 0.0, "y": 0.0},
        parameters={"mu": -0.3, "a": 0.8, "b": 0.3, "c0": 0.4, "g": 0.05},
        definitions=defs,
        equations={"x": f"mu*x - y + x*d{levels} + g*x**2", "y": "x + mu*y - y**3"},
        bifurcation="mu",
    )


def _point(model: lyacomp.Model) -> dict[sp.Symbol, sp.Float]:
    """A generic point (states and parameters off every special value)."""
    sym = model.symbolic()
    rng = random.Random(7)
    values = [sp.Float(rng.uniform(-0.6, 0.6), 30) for _ in sym.states]
    values += [sp.Float(rng.uniform(0.2, 0.9), 30) for _ in sym.parameters]
    return dict(zip(sym.states + sym.parameters, values, strict=True))


def _chain_values(chain: DefinitionChain, exprs: list[sp.Expr], point: dict) -> list[sp.Float]:
    """Numbers of chain-form expressions: the intermediates first, in their order."""
    values = dict(point)
    for symbol, expr in chain.needed(exprs):
        values[symbol] = expr.xreplace(values).evalf(30)
    return [sp.Float(e.xreplace(values).evalf(30)) for e in exprs]


def _entries(model: lyacomp.Model):
    """Every derivative entry of the three derivation stages with its substituted twin."""
    sym = model.symbolic()
    xs, ps = sym.states, sym.parameters
    der = derive(sym)
    high = derive_higher(der)
    sens = derive_sensitivity(der)
    second_keys, third_keys = sorted(der.second), sorted(der.third)

    def direct(i: int, *variables: sp.Symbol) -> sp.Expr:
        return sp.diff(sym.rhs[i], *variables)

    out = []
    for (i, j), e in der.jacobian.items():
        out.append((("jac", i, j), e, direct(i, xs[j])))
    for i, e in der.f_mu.items():
        out.append((("f_mu", i), e, direct(i, sym.bifurcation)))
    for (i, j), e in der.j_mu.items():
        out.append((("j_mu", i, j), e, direct(i, xs[j], sym.bifurcation)))
    for table, name in ((der.second, "d2"), (der.third, "d3"), (high.fourth, "d4")):
        for (i, *idx), e in table.items():
            out.append(((name, i, *idx), e, direct(i, *[xs[j] for j in idx])))
    for (i, *idx), e in high.fifth.items():
        out.append((("d5", i, *idx), e, direct(i, *[xs[j] for j in idx])))
    for (k, i), e in sens.f_p.items():
        out.append((("f_p", k, i), e, direct(i, ps[k])))
    for (k, i, j), e in sens.j_p.items():
        out.append((("j_p", k, i, j), e, direct(i, xs[j], ps[k])))
    for (k, e_index), e in sens.second_p.items():
        i, *idx = second_keys[e_index]
        out.append((("d2p", k, e_index), e, direct(i, *[xs[j] for j in idx], ps[k])))
    for (k, e_index), e in sens.third_p.items():
        i, *idx = third_keys[e_index]
        out.append((("d3p", k, e_index), e, direct(i, *[xs[j] for j in idx], ps[k])))
    return der, high, sens, out


def _mismatches(model: lyacomp.Model) -> tuple[int, list]:
    """How many entries were compared, and those where the chain rule and sympy differ."""
    der, high, sens, entries = _entries(model)
    point = _point(model)
    got = _chain_values(der.chain, [e for _, e, _ in entries], point)
    bad = []
    for (key, _, expected), value in zip(entries, got, strict=True):
        want = sp.Float(expected.xreplace(point).evalf(30))
        if abs(value - want) > 1e-20 * max(1, abs(want)):
            bad.append((key, value, want))
    # Entries the substituted model has but the chain rule missed (wrongly zero).
    sym = model.symbolic()
    n = len(sym.states)
    for i in range(n):
        for j in range(n):
            if (i, j) not in der.jacobian and sp.diff(sym.rhs[i], sym.states[j]) != 0:
                bad.append((("jac missing", i, j), 0, None))
            for k in range(j, n):
                if (i, j, k) not in der.second and sp.diff(
                    sym.rhs[i], sym.states[j], sym.states[k]
                ) != 0:
                    bad.append((("d2 missing", i, j, k), 0, None))
    return len(entries), bad


def test_every_derivative_entry_equals_sympy_on_the_substituted_model():
    # Source: sympy.diff of the equations with the definitions substituted (an independent
    # route: no chain rule of ours), compared at a generic point to 1e-20 at 30 digits.
    count, bad = _mismatches(chain_model(4))
    assert count > 60  # all orders up to five and every parameter derivative are present
    assert not bad, bad[:5]


def test_dropping_a_chain_rule_term_is_caught(monkeypatch):
    # Mutation check: without the terms through derivative intermediates (the second-order
    # part of the chain rule, d expr/d D_b d_j * D_(b, m) d_j for |b| >= 1) the comparison
    # above must fail.
    class Dropped(DefinitionChain):
        def diff(self, expr, var):
            out = sp.diff(expr, var) if var in expr.free_symbols else sp.Integer(0)
            for s in expr.free_symbols & self._origin.keys():
                k, multi = self._origin[s]
                if multi:
                    continue
                ds = self._partial(k, multi + (var,))
                if ds != 0:
                    out += sp.diff(expr, s) * ds
            return out

    monkeypatch.setattr(derivatives_module, "DefinitionChain", Dropped)
    _, bad = _mismatches(chain_model(4))
    assert bad


def test_chain_model_matches_mpmath_reference():
    # Source: independent 40-digit mpmath reference (tests/reference/mp_hopf.py) on the
    # substituted equations; projection formula of Kuznetsov 2004, Ch. 3.
    model = chain_model(6)
    sym = model.symbolic()
    reference = MpHopf(sym.rhs, sym.states, sym.parameters, sym.bifurcation)
    ev = lyacomp.compile(model)
    draws = [{}, {"a": 1.1, "c0": 0.2}, {"b": -0.4, "g": 0.3}]
    for change in draws:
        values = {**model.nominal, **change}
        ref = reference.solve(values, list(model.state_guess.values()))
        res = ev(**values)
        assert res.ok, (change, res.status)
        assert abs(ref.l1) > 1e-2  # the check is not a near-zero comparison
        for got, want in (
            (res.l1, ref.l1),
            (res.critical_value, ref.critical_value),
            (res.omega, ref.omega),
            (res.transversality, ref.transversality),
        ):
            assert abs(got - float(want)) <= 1e-9 * abs(float(want)), (change, got, want)
    batch = ev.batch(a=np.array([0.8, 1.1]), c0=np.array([0.4, 0.2]))
    assert batch.ok.all()
    ref = reference.solve({**model.nominal, "a": 1.1, "c0": 0.2}, [0.0, 0.0])
    assert abs(batch.l1[1] - float(ref.l1)) <= 1e-9 * abs(float(ref.l1))
    assert mpmath.isfinite(ref.omega)


def _code_size(levels: int) -> int:
    low = lower(derive(chain_model(levels).symbolic()))
    blocks = (low.f_jac, low.linear, low.curvature)
    return sum(len(s.code) for b in blocks for s in b.temporaries + b.outputs)


def test_kernel_code_grows_linearly_with_the_chain():
    # Our own design claim (each definition and its derivatives computed once): doubling
    # the chain at most doubles the printed model functions, plus a little for rounding.
    # Substituting the definitions grows it by far more (the reason for derive/chain.py).
    small, large = _code_size(10), _code_size(20)
    assert large <= 2.2 * small


@pytest.mark.parametrize("levels", [1, 3])
def test_second_coefficient_and_parameter_derivatives_agree_with_substitution(levels):
    # The l2 and exact-derivative kernels through the chain against the same model with the
    # definitions pasted into the equations by hand (the plain path, no chain rule): both
    # must give the same numbers to rounding (sympy is the common source of truth).
    model = chain_model(levels)
    sym = model.symbolic()
    pasted = lyacomp.Model(
        name=f"pasted{levels}",
        states=model.states,
        parameters=model.parameters,
        equations=dict(zip(model.states, sym.rhs, strict=True)),
        bifurcation="mu",
    )
    a, b = lyacomp.compile(model), lyacomp.compile(pasted)
    ra, rb = a.evaluate_l2(), b.evaluate_l2()
    assert ra.ok and rb.ok
    assert abs(ra.l2 - rb.l2) <= 1e-10 * abs(rb.l2)
    da, db = a.evaluate_derivatives().derivatives, b.evaluate_derivatives().derivatives
    for quantity in ("l1", "critical_value", "omega"):
        for name, value in db[quantity].items():
            assert abs(da[quantity][name] - value) <= 1e-9 * max(1.0, abs(value)), (quantity, name)
