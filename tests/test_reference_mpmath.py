"""lyacomp against an independent 40-digit mpmath reference on random 3-, 4- and 6-state models.

Reference: tests/reference/mp_hopf.py (sympy derivatives + mpmath; the projection formulas of
Kuznetsov, Elements of Applied Bifurcation Theory, 3rd ed. 2004, Chapter 3, as written in
docs/mathematics.md; Hopf point located by a determinant condition, not lyacomp's system).

The random models have a Hopf point by construction: at the equilibrium ``xe`` and ``mu = m0``
the linear part is ``S diag([[0, -w], [w, 0]], D) S^-1`` with ``D`` stable, ``mu`` enters the
linear part, a forcing ``g (mu - m0)`` and one nonlinear term, and the nonlinear terms
(polynomial, exponential, trigonometric) vanish to first order at ``xe``. The random
coefficients are model PARAMETERS, so one compile serves every draw. Each draw then perturbs
the linear part so the Hopf point moves away from ``(xe, m0)`` and both Newton solvers must
find it from the same starting guess.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import mpmath
import numpy as np
import pytest
import sympy as sp

import lyacomp
from tests.reference.mp_hopf import MpHopf, MpHopfPoint, ReferenceSolveError

RTOL = 1e-9

# Nonlinear building blocks in the shifted states u = x - xe; each vanishes to first order at 0.
_CATALOGUE = (
    lambda u, j, k, m: u[j] * u[k],
    lambda u, j, k, m: u[j] * u[k] * u[m],
    lambda u, j, k, m: sp.exp(u[j]) - 1 - u[j],
    lambda u, j, k, m: u[j] * sp.sin(u[k]),
    lambda u, j, k, m: 1 - sp.cos(u[j]),
    lambda u, j, k, m: u[j] * (sp.exp(u[k]) - 1),
    lambda u, j, k, m: sp.sin(u[j]) - u[j],
    lambda u, j, k, m: u[j] ** 2 * sp.exp(u[k] / 2),
    lambda u, j, k, m: sp.cos(u[j]) * u[k] * u[m],
)


@dataclass(frozen=True)
class RandomFamily:
    """A random model structure whose coefficients are parameters."""

    n: int
    states: tuple[sp.Symbol, ...]
    parameters: tuple[sp.Symbol, ...]
    rhs: tuple[sp.Expr, ...]
    bifurcation: sp.Symbol
    equilibrium: tuple[float, ...]
    state_guess: tuple[float, ...]

    def names(self, prefix: str) -> list[str]:
        return [str(p) for p in self.parameters if str(p).startswith(prefix)]

    def model(self, name: str, with_bifurcation: bool = True) -> lyacomp.Model:
        nominal = {str(p): 0.0 for p in self.parameters}
        return lyacomp.Model(
            name=name,
            states={str(s): g for s, g in zip(self.states, self.state_guess, strict=True)},
            parameters=nominal,
            equations={str(s): f for s, f in zip(self.states, self.rhs, strict=True)},
            bifurcation=str(self.bifurcation) if with_bifurcation else None,
        )


def build_family(n: int, seed: int, terms: int = 3, mu_name: str = "mu") -> RandomFamily:
    """Fix the random structure: ``terms`` nonlinear terms per equation, chosen by ``seed``."""
    rng = np.random.default_rng(seed)
    x = sp.symbols(f"x1:{n + 1}")
    mu, m0 = sp.Symbol(mu_name), sp.Symbol("m0")
    xe = [sp.Rational(int(rng.integers(-9, 10)), 10) for _ in range(n)]
    u = [xi - ei for xi, ei in zip(x, xe, strict=True)]
    a = [[sp.Symbol(f"a{i}{j}") for j in range(n)] for i in range(n)]
    b = [[sp.Symbol(f"b{i}{j}") for j in range(n)] for i in range(n)]
    g = [sp.Symbol(f"g{i}") for i in range(n)]
    h = [sp.Symbol(f"h{i}") for i in range(n)]
    c = [[sp.Symbol(f"c{i}_{k}") for k in range(terms)] for i in range(n)]
    dm = mu - m0
    rhs = []
    for i in range(n):
        expr = sum((a[i][j] + dm * b[i][j]) * u[j] for j in range(n)) + g[i] * dm
        j, k = (int(v) for v in rng.integers(0, n, size=2))
        expr += h[i] * dm * u[j] * u[k]
        for k in range(terms):
            term = _CATALOGUE[int(rng.integers(0, len(_CATALOGUE)))]
            expr += c[i][k] * term(u, *(int(v) for v in rng.integers(0, n, size=3)))
        rhs.append(expr)
    params = (
        [p for row in a for p in row]
        + [p for row in b for p in row]
        + g
        + h
        + [p for row in c for p in row]
        + [m0, mu]
    )
    equilibrium = tuple(float(e) for e in xe)
    # The fixed equilibrium guess is off the true equilibrium, so Newton has to move x too.
    guess = tuple(e + 0.03 * (-1) ** i for i, e in enumerate(equilibrium))
    return RandomFamily(n, tuple(x), tuple(params), tuple(rhs), mu, equilibrium, guess)


def draw_parameters(family: RandomFamily, rng: np.random.Generator) -> dict[str, float]:
    """Coefficients with a Hopf point at (xe, m0) by design, then a perturbation that moves it."""
    n = family.n
    omega = rng.uniform(0.5, 2.0)
    block = np.zeros((n, n))
    block[0, 1], block[1, 0] = -omega, omega
    stable = -rng.uniform(0.4, 2.0, size=n - 2)
    block[2:, 2:] = np.diag(stable)
    if n >= 4:
        # A stable complex pair too, so the critical pair is not the only complex one.
        block[2, 3], block[3, 2] = 1.5, -1.5
    s = np.eye(n) + 0.4 * rng.standard_normal((n, n))
    while np.linalg.cond(s) > 10.0:
        # A badly conditioned basis gives huge coefficients and Hopf points crowded together.
        s = np.eye(n) + 0.4 * rng.standard_normal((n, n))
    linear = s @ block @ np.linalg.inv(s)
    linear += 0.01 * rng.standard_normal((n, n))  # the perturbation: the Hopf point moves
    values: dict[str, float] = {}
    for i in range(n):
        for j in range(n):
            values[f"a{i}{j}"] = float(linear[i, j])
            values[f"b{i}{j}"] = float(0.5 * rng.standard_normal())
        values[f"g{i}"] = float(0.5 * rng.standard_normal())
        values[f"h{i}"] = float(rng.standard_normal())
    for name in family.names("c"):
        values[name] = float(rng.uniform(-2.0, 2.0))
    m0 = float(rng.uniform(-1.0, 1.0))
    values["m0"] = m0
    values[str(family.bifurcation)] = m0 + 0.05  # Newton starting guess, off the Hopf point
    return values


def reference_draws(
    family: RandomFamily, reference: MpHopf, count: int, seed: int
) -> list[tuple[dict[str, float], MpHopfPoint]]:
    """Draws whose reference Hopf point is well posed.

    A random design can still be nearly degenerate (l1 or d close to zero), so sensitive to
    mu (|d| large) that the fixed starting guesses lie outside any solver's basin, have a
    second equilibrium branch so close that Newton on F = 0 at the guessed mu (from the state
    guess) lands on it, or a second Hopf point near the guess (reached from nearby starting
    values of mu): then the guesses do not single out one Hopf point. Such draws test luck,
    not the compiler, and are skipped.
    """
    rng = np.random.default_rng(seed)
    draws = []
    while len(draws) < count:
        values = draw_parameters(family, rng)
        try:
            point = reference.solve(values, family.state_guess)
        except ReferenceSolveError:
            continue
        stable = [e for e in point.eigenvalues if abs(e - 1j * point.omega) > 1e-6]
        well_posed = (
            abs(point.critical_value - values["m0"]) < 0.1
            and 0.1 < abs(point.transversality) < 10.0
            and abs(point.l1) > 1e-2
            and all(mpmath.re(e) < -0.1 for e in stable if abs(e + 1j * point.omega) > 1e-6)
        )
        if well_posed:
            start = reference.equilibrium(values, family.state_guess)
            gap = max(abs(a - b) for a, b in zip(start, point.equilibrium, strict=True))
            well_posed = gap < 0.1 and _single_hopf_point_near_guess(
                family, reference, values, point
            )
        if well_posed:
            draws.append((values, point))
    return draws


def _single_hopf_point_near_guess(family, reference, values, point) -> bool:
    """True when other starting values of mu near the guess reach no other Hopf point."""
    mu = str(family.bifurcation)
    for shift in (-0.1, -0.05, 0.0, 0.1, 0.15):
        probe = reference.rough_location({**values, mu: values["m0"] + shift}, family.state_guess)
        if probe is None:
            continue
        critical, omega = probe
        if abs(critical - values["m0"]) < 0.25 and abs(critical - point.critical_value) > 1e-6:
            return False
    return True


def close(actual: float, expected, scale=None) -> bool:
    """|actual - expected| <= RTOL * scale (scale defaults to |expected|)."""
    expected = float(expected)
    scale = abs(expected) if scale is None else float(scale)
    return math.isfinite(actual) and abs(actual - expected) <= RTOL * scale


# n -> (structure seed, nonlinear terms per equation, draws). The 6-state model carries fewer
# terms only to keep its compile time (symbolic derivation + C compile) small.
CASES = {3: (11, 3, 8), 4: (23, 3, 8), 6: (37, 2, 6)}


@pytest.fixture(scope="module", params=sorted(CASES), ids=lambda n: f"{n}states")
def family_setup(request):
    n = request.param
    seed, terms, count = CASES[n]
    # The 4-state model uses a bifurcation parameter named like a Python keyword.
    family = build_family(n, seed, terms, mu_name="lambda" if n == 4 else "mu")
    reference = MpHopf(family.rhs, family.states, family.parameters, family.bifurcation)
    draws = reference_draws(family, reference, count, seed + 1000)
    evaluator = lyacomp.compile(family.model(f"random{n}"))
    return family, reference, draws, evaluator


def test_batch_matches_mpmath_reference(family_setup):
    # Source: independent 40-digit reference (mpmath + sympy), projection formula of
    # Kuznetsov 2004, Ch. 3, conventions of docs/mathematics.md.
    family, _, draws, evaluator = family_setup
    names = evaluator.parameters
    batch = evaluator.batch({k: np.array([v[k] for v, _ in draws]) for k in names})
    assert batch.ok.all(), batch.status_counts()
    # The perturbed draws really move the Hopf point off the designed (xe, m0).
    assert max(abs(ref.critical_value - values["m0"]) for values, ref in draws) > 1e-3
    for row, (values, ref) in enumerate(draws):
        where = f"draw {row}: {values}"
        assert close(batch.l1[row], ref.l1), (where, batch.l1[row], ref.l1)
        assert close(batch.omega[row], ref.omega), (where, batch.omega[row], ref.omega)
        assert close(batch.period[row], ref.period), where
        assert close(batch.critical_value[row], ref.critical_value, 1.0), (
            where,
            batch.critical_value[row],
            ref.critical_value,
        )
        assert close(batch.transversality[row], ref.transversality), (
            where,
            batch.transversality[row],
            ref.transversality,
        )
        eq_scale = max(1.0, max(abs(v) for v in ref.equilibrium))
        for j, expected in enumerate(ref.equilibrium):
            assert close(batch.equilibrium[row, j], expected, eq_scale), (where, j)
        amp_scale = max(ref.amplitude)
        for j, expected in enumerate(ref.amplitude):
            assert close(batch.amplitude[row, j], expected, amp_scale), (
                where,
                j,
                batch.amplitude[row, j],
                expected,
            )
        # Criticality and cycle side follow from the signs (docs/mathematics.md; common
        # practice, no source).
        expected_code = (
            lyacomp.Criticality.SUPERCRITICAL if ref.l1 < 0 else lyacomp.Criticality.SUBCRITICAL
        )
        assert batch.criticality[row] == int(expected_code), where
        expected_side = -1 if ref.transversality * ref.l1 > 0 else 1
        assert batch.cycle_side[row] == expected_side, where


def test_single_call_matches_mpmath_reference(family_setup):
    # Source: independent 40-digit mpmath reference (Kuznetsov 2004, Ch. 3 formulas).
    family, _, draws, evaluator = family_setup
    values, ref = draws[0]
    result = evaluator(**values)
    assert result.ok, result.status
    assert close(result.l1, ref.l1)
    assert close(result.critical_value, ref.critical_value, 1.0)
    assert close(result.transversality, ref.transversality)
    expected = {str(s): float(v) for s, v in zip(family.states, ref.equilibrium, strict=True)}
    for name, value in expected.items():
        assert close(result.equilibrium[name], value, max(1.0, abs(value)))
    assert result.criticality == ("supercritical" if ref.l1 < 0 else "subcritical")


def test_reference_transversality_equals_eigenvalue_slope(family_setup):
    # Checks the reference itself two ways: the projection formula for d (docs/mathematics.md)
    # against Re d(lambda)/d(mu) by numerical differentiation along the equilibrium branch
    # (mpmath.diff).
    _, reference, draws, _ = family_setup
    values, ref = draws[-1]
    slope = reference.eigenvalue_slope(ref, values)
    assert abs(slope - ref.transversality) < mpmath.mpf(10) ** -20 * abs(ref.transversality)


def given_point_values(family: RandomFamily, rng: np.random.Generator, omega: float) -> dict:
    """Coefficients whose designed equilibrium xe has exactly +-i*omega at mu = m0."""
    n = family.n
    block = np.diag([0.0, 0.0] + [-0.8] * (n - 2))
    block[0, 1], block[1, 0] = -omega, omega
    s = np.eye(n) + 0.4 * rng.standard_normal((n, n))
    linear = s @ block @ np.linalg.inv(s)
    values = draw_parameters(family, rng)
    for i in range(n):
        for j in range(n):
            values[f"a{i}{j}"] = float(linear[i, j])
    values[str(family.bifurcation)] = values["m0"]
    return values


def test_point_taken_as_given_without_bifurcation_parameter():
    # Without a bifurcation parameter the point is taken as given: at mu = m0 and the
    # unperturbed linear part the designed equilibrium has the pair +-i*omega (up to rounding
    # of the coefficients). Reference: mpmath, Kuznetsov 2004 Ch. 3.
    family = build_family(3, 5)
    reference = MpHopf(family.rhs, family.states, family.parameters, None)
    rng = np.random.default_rng(77)
    omega = 1.3
    for _ in range(20):
        # Keep a draw whose equilibrium reached from the state guess is the designed one.
        values = given_point_values(family, rng, omega)
        ref = reference.solve(values, family.state_guess)
        if max(abs(a - b) for a, b in zip(ref.equilibrium, family.equilibrium)) < 1e-12:
            break
    else:
        pytest.fail("no draw with the designed equilibrium in reach of the guess")
    assert abs(mpmath.re(min(ref.eigenvalues, key=lambda e: abs(e - 1j * omega)))) < 1e-12
    evaluator = lyacomp.compile(family.model("random3_given", with_bifurcation=False))
    result = evaluator(**values)
    assert result.ok, result.status
    assert close(result.l1, ref.l1)
    assert close(result.omega, ref.omega)
    assert close(result.omega, omega, 1.0)
    for name, expected in zip(family.states, ref.equilibrium, strict=True):
        assert close(result.equilibrium[str(name)], expected, 1.0)
