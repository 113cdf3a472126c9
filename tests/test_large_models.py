"""The large-model path (n >= 4: Hopf Newton by blocks, real double-shift QR spectrum check,
eigenvectors and factors of A reused by l1) against outside references on 4- to 24-state
models.

References: the independent 40-digit mpmath implementation in tests/reference/mp_hopf.py
(projection formulas of Kuznetsov, Elements of Applied Bifurcation Theory, 3rd ed. 2004,
Ch. 3, conventions of docs/mathematics.md), and numpy.linalg.eigvals for the count of
unstable eigenvalues.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import lyacomp
from tests.reference.mp_hopf import MpHopf
from tests.test_reference_mpmath import build_family, close, reference_draws

# n -> (structure seed, nonlinear terms per equation, draws): random models with a Hopf point
# by construction (see tests/test_reference_mpmath.py); one nonlinear term per equation at 12
# states keeps the symbolic derivation and the 40-digit reference short.
LARGE_CASES = {8: (41, 2, 3), 12: (43, 1, 2)}


@pytest.mark.parametrize("n", sorted(LARGE_CASES))
def test_large_random_models_match_mpmath(n):
    # Source: independent 40-digit reference (mpmath + sympy), Kuznetsov 2004, Ch. 3.
    seed, terms, count = LARGE_CASES[n]
    family = build_family(n, seed, terms)
    reference = MpHopf(family.rhs, family.states, family.parameters, family.bifurcation)
    draws = reference_draws(family, reference, count, seed + 1000)
    ev = lyacomp.compile(family.model(f"random_large{n}"))
    batch = ev.batch({k: np.array([v[k] for v, _ in draws]) for k in ev.parameters})
    assert batch.ok.all(), batch.status_counts()
    for row, (_, ref) in enumerate(draws):
        assert close(batch.l1[row], ref.l1), (row, batch.l1[row], ref.l1)
        assert close(batch.omega[row], ref.omega), row
        assert close(batch.critical_value[row], ref.critical_value, 1.0), row
        assert close(batch.transversality[row], ref.transversality), row
        amp_scale = max(ref.amplitude)
        for j, expected in enumerate(ref.amplitude):
            assert close(batch.amplitude[row, j], expected, amp_scale), (row, j)
        # All other eigenvalues are stable by the draw's design (checked on the reference).
        assert batch.unstable_count[row] == 0
    # The scalar call gives the same point (the family's nominal values are all zero, so
    # the draw's own guess of mu is passed, as in the batch).
    values, ref = draws[0]
    single = ev(**values)
    assert single.ok, single.status
    assert close(single.l1, ref.l1)


def _linear_cubic(n: int) -> lyacomp.Evaluator:
    """x' = (M + mu I) x - x_i^3: a Hopf point at mu = 0 where M has the pair +-2i."""
    names = [f"s{i}" for i in range(n)]
    params = {f"m{i}_{j}": 0.0 for i in range(n) for j in range(n)}
    params["mu"] = 0.0
    eqs = {
        names[i]: " + ".join(f"m{i}_{j}*{names[j]}" for j in range(n))
        + f" + mu*{names[i]} - {names[i]}**3"
        for i in range(n)
    }
    model = lyacomp.Model(
        name=f"linear cubic {n}",
        states={s: 0.0 for s in names},
        parameters=params,
        equations=eqs,
        bifurcation="mu",
    )
    return lyacomp.compile(model)


@pytest.mark.parametrize("n", [4, 5, 16, 24])
def test_unstable_counts_match_numpy_eigvals(n):
    # Counts compared with numpy.linalg.eigvals of the same matrix (reference library).
    # Four states take the deflation of the Newton pair (the other two eigenvalues from a
    # 2 x 2 block), more states the QR of the whole matrix.
    # Spectra: the pair +-2i, real eigenvalues on both sides of the axis (|Re| down to 1e-4),
    # stable complex pairs, in a random orthogonal basis, so the QR has no structure to use.
    rng = np.random.default_rng(100 + n)
    ev = _linear_cubic(n)
    columns: dict[str, list[float]] = {k: [] for k in ev.parameters}
    expected = []
    for _ in range(5):
        d = np.zeros((n, n))
        d[0, 1], d[1, 0] = -2.0, 2.0
        k = 2
        while k < n:
            sign = rng.choice([-1.0, 1.0])
            re = sign * 10.0 ** rng.uniform(-4, 0)
            if n - k >= 2 and rng.random() < 0.5:
                # Other pairs to the left (down to 1e-4 of the axis): from a cold start the
                # rightmost pair is the one followed, and it must be the pair +-2i.
                im = rng.uniform(0.3, 4.0)
                d[k : k + 2, k : k + 2] = [[-abs(re), -im], [im, -abs(re)]]
                k += 2
            else:
                d[k, k] = re
                k += 1
        q, _ = np.linalg.qr(rng.normal(size=(n, n)))
        m = q @ d @ q.T
        lam = np.linalg.eigvals(m)
        pair = np.abs(np.abs(lam.imag) - 2.0) < 1e-9
        assert pair.sum() == 2
        expected.append(int((lam[~pair].real > 0).sum()))
        for i in range(n):
            for j in range(n):
                columns[f"m{i}_{j}"].append(m[i, j])
        columns["mu"].append(0.0)
    b = ev.batch({k: np.array(v) for k, v in columns.items()})
    assert b.ok.all(), b.status_counts()
    assert list(b.unstable_count) == expected
    assert np.allclose(b.critical_value, 0.0, atol=1e-9)
    assert np.allclose(b.omega, 2.0, rtol=1e-10)


def _ring(n: int) -> lyacomp.Evaluator:
    """n identical tanh stages in a loop with one inverting link (benchmarks/ring.py)."""
    gain = math.cosh(0.2) ** 2 / math.cos(math.pi / n)
    eqs = {"x1": f"-a*x1 - g*(tanh(x{n} + b) - tanh(b))"}
    eqs.update({f"x{i}": f"-a*x{i} + g*(tanh(x{i - 1} + b) - tanh(b))" for i in range(2, n + 1)})
    model = lyacomp.Model(
        name=f"ring {n}",
        states={f"x{i}": 0.0 for i in range(1, n + 1)},
        parameters={"g": gain, "a": 1.0, "b": 0.2},
        equations=eqs,
        bifurcation="g",
    )
    return lyacomp.compile(model)


@pytest.mark.parametrize("n", [4, 5, 9])
def test_symmetric_ring_converges(n):
    # The ring's Jacobian at rest is -a I plus a cyclic shift with slopes g/cosh(b)^2 and one
    # sign flip, so the Hopf gain is a cosh(b)^2 / cos(pi/n) with omega = a tan(pi/n)
    # (common practice, no source). Its eigenvector has components that vanish by symmetry,
    # and its cyclic Hessenberg form stalls the usual QR shifts: both must not matter.
    ev = _ring(n)
    rng = np.random.default_rng(n)
    a = 1.0 + 0.05 * rng.uniform(-1.0, 1.0, 400)
    b = 0.2 * (1.0 + 0.05 * rng.uniform(-1.0, 1.0, 400))
    res = ev.batch(a=a, b=b)
    assert res.ok.all(), res.status_counts()
    gain = a * np.cosh(b) ** 2 / math.cos(math.pi / n)
    assert np.allclose(res.critical_value, gain, rtol=1e-11, atol=0.0)
    assert np.allclose(res.omega, a * math.tan(math.pi / n), rtol=1e-11, atol=0.0)
    assert (res.unstable_count == 0).all()
