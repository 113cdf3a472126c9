"""The stability context of delay models (roots of det Delta right of the imaginary axis,
besides the critical pair) against counts made without lyacomp: the closed-form roots of
Wright's characteristic equation (Lambert W, mpmath) and a Chebyshev collocation of the
generator of the solution semigroup (numpy eigenvalues)."""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest

import lyacomp
from tests.delay_models import random_delay_model, wright_model
from tests.reference.mp_delay import collocation_roots

PI = math.pi


def collocation_count(blocks, taus, points: int = 200, threshold: float = 1e-6) -> int:
    """Roots with Re > threshold, checked to be the same with a quarter more nodes (the
    rightmost roots converge spectrally; a count that moves is not resolved)."""
    counts = [
        int(np.sum(collocation_roots(blocks, taus, m).real > threshold))
        for m in (points, points + points // 4)
    ]
    assert counts[0] == counts[1], counts
    return counts[0]


# --- Wright's equation x'(t) = -r x(t - 1) (1 + x(t)) -----------------------------------------
# Characteristic equation lambda + r exp(-lambda) = 0, i.e. lambda exp(lambda) = -r, whose roots
# are the branches W_j(-r) of the Lambert W function (common practice, no source; Corless et
# al., Adv. Comput. Math. 5, 1996, for W). The pair i omega, omega = pi/2 + 2 pi k, is on the
# axis at r = omega; the other branches give the unstable count directly.
def _wright_count(r: float) -> int:
    mpmath.mp.dps = 30
    count = 0
    for j in range(-40, 41):
        root = mpmath.lambertw(-r, j)
        assert abs(root * mpmath.exp(root) + r) < 1e-20 * r
        if root.real > 1e-12:
            count += 1
    return count


@pytest.fixture(scope="module")
def wright_point() -> lyacomp.Evaluator:
    # No bifurcation parameter: the point itself is classified (it is a Hopf point).
    return lyacomp.compile(wright_model("wright fixed", {"r": 1.5}, delay="1"))


@pytest.mark.parametrize("crossing", [0, 1, 2, 3, 5])
def test_wright_equation_at_its_crossings(wright_point, crossing):
    # At r = pi/2 + 2 pi k the k-th pair is on the axis and 2 k roots lie right of it (each
    # earlier crossing moved a pair to the right).
    r = PI / 2 + 2 * PI * crossing
    expected = _wright_count(r)
    assert expected == 2 * crossing  # the closed form agrees with the crossing picture
    res = wright_point(r=r)
    assert res.status == "ok" and math.isclose(res.omega, r, rel_tol=1e-12)
    assert res.unstable_count == expected
    blocks = [np.zeros((1, 1)), np.array([[-r]])]
    assert collocation_count(blocks, [1.0]) == expected


def test_wright_equation_with_the_delay_as_bifurcation_parameter_just_above_the_onset():
    # r slightly above pi/2 with tau free: onset at tau = pi / (2 r) < 1, stable before it
    # (the scaled equation lambda + r tau exp(-lambda) = 0 at r tau = pi/2; Hassard,
    # Kazarinoff & Wan 1981 for the condition r tau = pi/2).
    r = PI / 2 * (1 + 1e-3)
    model = wright_model("wright tau free", {"r": r, "tau": 0.9}, bifurcation="tau")
    res = lyacomp.compile(model)()
    assert res.status == "ok" and math.isclose(res.critical_value, PI / (2 * r), rel_tol=1e-12)
    assert res.unstable_count == 0 == _wright_count(r * res.critical_value * (1 - 1e-9))


# --- random models, also with many unstable roots ----------------------------------------------
@pytest.mark.parametrize("n", [2, 3])
def test_unstable_counts_of_random_models_with_long_delays(n):
    # The constructed models keep the root i omega when tau1 grows by whole periods
    # 2 pi / omega (exp(-i omega tau_k) unchanged), and the longer delays put more roots
    # right of the axis: the counts are compared with the collocation at 200 and 250 nodes.
    counts = []
    for seed in range(30, 34):
        rm = random_delay_model(seed, n, seed % 2 == 0)
        ev = lyacomp.compile(
            lyacomp.Model(
                name=f"count {seed}",
                states={s: 0.0 for s in rm.states},
                parameters=rm.params,
                equations=rm.equations,
            )
        )
        for periods in (0, 1, 2, 4):
            tau1 = rm.params["tau1"] + periods * 2 * PI / rm.omega
            res = ev(tau1=tau1)
            taus = [tau1] + ([tau1 + rm.params["dt"]] if "dt" in rm.params else [])
            expected = collocation_count(rm.blocks, taus)
            assert res.status == "ok", (seed, periods)
            assert math.isclose(res.omega, rm.omega, rel_tol=1e-10), (seed, periods)
            assert res.unstable_count == expected, (seed, periods)
            counts.append(expected)
    print(counts)
    assert max(counts) >= 6 and len(set(counts)) > 3


# --- a second pair near the axis, at a large frequency ------------------------------------------
# Two uncoupled Wright equations: x(t - 1) at r = pi/2 holds the critical pair +-i pi/2; the
# second, y' = -a / u y(t - u) (1 + y) with u = pi / (2 * 30), has the characteristic equation
# lambda u exp(lambda u) = -a, so its roots are W_j(-a) / u (Lambert W as above), and at
# a = pi/2 its pair is +-30 i (Hassard, Kazarinoff & Wan 1981, for the onset a = pi/2). A
# small change of a moves that pair off the axis at a frequency twenty times the critical
# one, near the end of the scanned part of the line: missed by too coarse a scan (the pair
# turns the phase by pi within a few |Re lambda| of 30 i), or, inside the tolerance band,
# a second critical pair.
SECOND_FREQUENCY = 30.0


@pytest.fixture(scope="module")
def two_wright_point() -> lyacomp.Evaluator:
    model = lyacomp.Model(
        name="two wright fixed",
        states={"x": 0.0, "y": 0.0},
        parameters={"r": PI / 2, "a": PI / 2, "u": PI / (2 * SECOND_FREQUENCY)},
        equations={"x": "-r * x(t - 1) * (1 + x)", "y": "-a / u * y(t - u) * (1 + y)"},
    )
    return lyacomp.compile(model)


def _second_roots(a: float, u: float) -> list[complex]:
    mpmath.mp.dps = 30
    roots = [mpmath.lambertw(-a, j) / u for j in range(-40, 41)]
    assert all(abs(z * u * mpmath.exp(z * u) + a) < 1e-20 for z in roots)
    return [complex(z) for z in roots]


@pytest.mark.parametrize("shift", [1e-4, -1e-4, 1e-10, 0.0])
def test_a_second_pair_near_the_axis_at_a_large_frequency(two_wright_point, shift):
    u = PI / (2 * SECOND_FREQUENCY)
    a = PI / 2 * (1 + shift)
    roots = _second_roots(a, u)
    near = max(roots, key=lambda z: z.real)
    assert math.isclose(abs(near.imag), SECOND_FREQUENCY, rel_tol=1e-3)
    res = two_wright_point(a=a)
    band = 1e-8 * (PI / 2 + SECOND_FREQUENCY)  # axis_tol times a lower bound of the rate
    if abs(near.real) < band:
        assert res.status == "extra_critical_eigenvalue"
        return
    assert abs(near.real) > 1e-6  # the pair is clearly off the axis (about 1e-4 here)
    assert res.status == "ok" and math.isclose(res.omega, PI / 2, rel_tol=1e-12)
    assert res.unstable_count == sum(z.real > 0 for z in roots)
    assert res.unstable_count == (2 if shift > 0 else 0)
