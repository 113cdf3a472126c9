"""Delay equations against sources outside lyacomp: published closed forms, the ODE kernel,
an independent mpmath implementation (tests/reference/mp_delay.py) and an independent
root count (Chebyshev collocation)."""

from __future__ import annotations

import math
from pathlib import Path

import pytest

import lyacomp
from tests.delay_models import random_delay_model, wright_model
from tests.reference.mp_delay import MpDelay, chebyshev_unstable_count

RTOL = 1e-9
PI = math.pi
EXAMPLES = Path(__file__).resolve().parent.parent / "examples"


def _close(a: float, b: float, rtol: float = RTOL) -> bool:
    return math.isclose(a, float(b), rel_tol=rtol, abs_tol=0.0)


# --- Wright's equation ---------------------------------------------------------------------
# x'(t) = -r x(t - 1) (1 + x(t)): Hopf bifurcation of x = 0 at r = pi/2 with omega = pi/2,
# supercritical, l1 = -2 (3 pi - 2) / (5 (4 + pi^2)) in our normalization, d = 2 pi/(4 + pi^2),
# cycle amplitude^2 ~ 40 (r - pi/2) / (3 pi - 2) (Hassard, Kazarinoff & Wan, Theory and
# Applications of Hopf Bifurcation, Cambridge 1981, the Wright example; Chow & Mallet-Paret
# 1977; the exact constants are those of docs/mathematics.md, from memory of the book).
WRIGHT_L1 = -2 * (3 * PI - 2) / (5 * (4 + PI**2))


def _wright(**extra) -> lyacomp.Evaluator:
    return lyacomp.compile(wright_model("wright", {"r": 1.4, "tau": 1.0}, **extra))


def test_wright_equation_closed_forms():
    res = _wright(bifurcation="r")()
    assert res.status == "ok" and res.criticality == "supercritical"
    assert _close(res.critical_value, PI / 2, 1e-13)
    assert _close(res.omega, PI / 2, 1e-13)
    assert _close(res.l1, WRIGHT_L1, 1e-12)
    assert _close(res.transversality, 2 * PI / (4 + PI**2), 1e-12)
    assert _close(res.amplitude["x"] ** 2, 40 / (3 * PI - 2), 1e-12)
    assert res.unstable_count == 0 and res.stable_side == "below" and res.cycle_side == "above"
    assert _close(res.period, 4.0, 1e-13)


def test_wright_equation_against_the_independent_reference():
    # The HKW algorithm in mpmath (its own derivation), at 40 digits.
    ref = MpDelay(["x"], {"r": 1.5}, ["-r*x__1*(1 + x)"], ["1"]).solve("r", {"r": 1.5}, [0.0], 1.5)
    res = _wright(bifurcation="r")()
    assert _close(res.l1, ref.l1) and _close(WRIGHT_L1, ref.l1, 1e-14)
    assert _close(res.transversality, ref.transversality)


def test_wright_equation_with_the_delay_as_bifurcation_parameter():
    # r fixed at 1: onset at tau = pi/2 with omega = 1 (Hassard, Kazarinoff & Wan 1981: the
    # condition is r tau = pi/2); d and l1 from the independent reference.
    ev = lyacomp.compile(wright_model("wright tau", {"r": 1.0, "tau": 1.4}, bifurcation="tau"))
    res = ev()
    ref = MpDelay(["x"], {"r": 1.0, "tau": 1.5}, ["-r*x__1*(1 + x)"], ["tau"]).solve(
        "tau", {"tau": 1.5}, [0.0], 1.0
    )
    assert res.status == "ok"
    assert _close(res.critical_value, PI / 2, 1e-13) and _close(res.omega, 1.0, 1e-13)
    assert _close(res.l1, ref.l1) and _close(res.transversality, ref.transversality)
    assert res.transversality > 0 and res.criticality == "supercritical"


# --- Hutchinson's delayed logistic equation ---------------------------------------------------
# N'(t) = r N(t) (1 - N(t - 1)/K) becomes Wright's equation under N = K (1 + x) (Hutchinson,
# Ann. N.Y. Acad. Sci. 50, 1948; the change of variables is common practice). States scaled
# by K: l1_N = l1_x / K^2 (docs/mathematics.md, linear change of states), amplitudes times K.
@pytest.mark.parametrize("capacity", [2.5, 40.0])
def test_hutchinson_equation_is_wright_with_scaled_l1(capacity):
    ev = lyacomp.compile(
        lyacomp.Model(
            name="hutchinson",
            states={"N": capacity * 1.01},
            parameters={"r": 1.4, "K": capacity},
            equations={"N": "r * N * (1 - N(t - 1) / K)"},
            bifurcation="r",
        )
    )
    res, wright = ev(), _wright(bifurcation="r")()
    assert res.status == "ok" and res.criticality == "supercritical"
    assert _close(res.critical_value, PI / 2, 1e-12)
    assert _close(res.equilibrium["N"], capacity, 1e-13)
    assert _close(res.l1, WRIGHT_L1 / capacity**2, 1e-11)
    assert _close(res.amplitude["N"], capacity * wright.amplitude["x"], 1e-11)


# --- regenerative turning -------------------------------------------------------------------
# x'' + 2 zeta x' + x = p (dh - dh^2/(8 h0) + 5 dh^3/(96 h0^2)), dh = x(t - tau) - x(t): the
# third-order expansion of a 3/4-power cutting force (Kalmar-Nagy, Stepan & Moon, Nonlinear
# Dynamics 26, 2001, who find the Hopf bifurcation subcritical along the whole stability
# boundary; coefficients derived here from (h0 + dh)^(3/4), the scaling of the paper from
# memory). Linear stability boundary (Stepan, Retarded Dynamical Systems, 1989):
# p = ((1 - w^2)^2 + 4 zeta^2 w^2) / (2 (w^2 - 1)).
TURNING = {
    "x": "v",
    "v": "-2*zeta*v - x + p*(dh - dh**2/(8*h0) + 5*dh**3/(96*h0**2))",
}


@pytest.mark.parametrize("tau", [3.0, 5.5, 9.0, 14.0, 60.0])
def test_turning_chatter_is_subcritical_along_the_stability_boundary(tau):
    ev = lyacomp.compile(
        lyacomp.Model(
            name="turning",
            states={"x": 0.0, "v": 0.0},
            parameters={"zeta": 0.02, "p": 0.1, "tau": 3.0, "h0": 1.0},
            definitions={"dh": "x(t - tau) - x"},
            equations=TURNING,
            bifurcation="p",
        )
    )
    res = ev(tau=tau)
    assert res.status == "ok"
    w, zeta = res.omega, 0.02
    assert _close(res.critical_value, ((1 - w * w) ** 2 + 4 * zeta**2 * w * w) / (2 * (w * w - 1)))
    assert res.criticality == "subcritical" and res.l1 > 0
    # On the stability boundary: the equilibrium is stable below p0 (first loss).
    assert res.critical_value > 0 and res.unstable_count == 0 and res.stable_side == "below"


# --- the ODE limit --------------------------------------------------------------------------
@pytest.mark.parametrize(
    "name", ["duct_flap.toml", "belt_friction_pad.toml", "dc_feeder_constant_power.toml"]
)
def test_a_delay_term_with_zero_coefficient_gives_the_ode_values(name):
    # A_k = 0 and every delayed derivative vanishes: Delta(lambda) = lambda I - A, so the
    # characteristic-matrix formulas must reduce to the ODE ones (docs/mathematics.md, Delay
    # equations).
    ode = lyacomp.load_model(EXAMPLES / name)
    first = ode.state_names[0]
    equations = dict(ode.equations)
    equations[first] = f"({equations[first]}) + c_lag*{first}(t - t_lag)"
    dde = ode.replace(
        equations=equations, parameters={**ode.parameters, "c_lag": 0.0, "t_lag": 0.7}
    )
    a, b = lyacomp.compile(ode)(), lyacomp.compile(dde)()
    assert a.status == b.status == "ok"
    for key in ("l1", "omega", "critical_value", "transversality", "period"):
        assert _close(getattr(b, key), getattr(a, key), 1e-12), key
    for state in ode.state_names:
        assert _close(b.equilibrium[state], a.equilibrium[state], 1e-12)
        assert _close(b.amplitude[state], a.amplitude[state], 1e-12)
    assert (b.unstable_count, b.stable_side, b.cycle_side, b.criticality) == (
        a.unstable_count,
        a.stable_side,
        a.cycle_side,
        a.criticality,
    )


# --- random models against the independent reference ----------------------------------------
@pytest.mark.parametrize(
    ("seed", "n", "two_delays", "bifurcation"),
    [
        (1, 2, False, "mu"),
        (5, 2, True, "mu"),
        (3, 3, False, "mu"),
        (4, 3, True, "mu"),
        (7, 2, True, "tau1"),
        (8, 3, False, "tau1"),
    ],
)
def test_random_delay_models_against_the_mpmath_reference(seed, n, two_delays, bifurcation):
    rm = random_delay_model(seed, n, two_delays)
    guess = {**rm.params, bifurcation: rm.params[bifurcation] * 1.002}
    ev = lyacomp.compile(
        lyacomp.Model(
            name=f"random {seed}",
            states={s: 0.0 for s in rm.states},
            parameters=guess,
            equations=rm.equations,
            bifurcation=bifurcation,
        )
    )
    res = ev()
    assert res.status == "ok"
    # The reference polishes the point lyacomp reports (by its own Newton) and computes
    # everything there independently.
    ref = MpDelay(rm.states, rm.params, rm.reference_rhs(), rm.delays).solve(
        bifurcation,
        {bifurcation: res.critical_value},
        [res.equilibrium[s] for s in rm.states],
        res.omega,
    )
    assert _close(res.critical_value, ref.mu) and _close(res.omega, ref.omega)
    assert _close(res.l1, ref.l1)
    assert _close(res.transversality, ref.transversality)
    for state, k_ref in zip(rm.states, ref.amplitude):
        assert _close(res.amplitude[state], k_ref)


def test_the_random_models_reach_the_constructed_hopf_point():
    # Guard against a reference that only agrees with lyacomp at some other point: where
    # the constructed pair crosses first, both find mu = 1 exactly as built.
    rm = random_delay_model(1, 2, False)
    ev = lyacomp.compile(
        lyacomp.Model(
            name="random built",
            states={s: 0.0 for s in rm.states},
            parameters={**rm.params, "mu": 1.002},
            equations=rm.equations,
            bifurcation="mu",
        )
    )
    res = ev()
    assert _close(res.critical_value, 1.0, 1e-12) and _close(res.omega, rm.omega, 1e-12)


# --- the stability context ------------------------------------------------------------------
@pytest.mark.parametrize("n", [2, 3])
def test_unstable_root_count_against_chebyshev_collocation(n):
    # At the constructed point (no bifurcation parameter: the point itself is the Hopf point)
    # the count of roots right of the axis is compared with the eigenvalues of a Chebyshev
    # collocation of the generator (Breda, Maset & Vermiglio, SIAM J. Sci. Comput. 27, 2005).
    counts = []
    for seed in range(10, 22):
        rm = random_delay_model(seed, n, seed % 2 == 0)
        ev = lyacomp.compile(
            lyacomp.Model(
                name=f"count {seed}",
                states={s: 0.0 for s in rm.states},
                parameters=rm.params,
                equations=rm.equations,
            )
        )
        res = ev()
        assert res.status == "ok", seed
        taus = [rm.params["tau1"]] + (
            [rm.params["tau1"] + rm.params["dt"]] if "dt" in rm.params else []
        )
        expected = chebyshev_unstable_count(rm.blocks, taus)
        assert res.unstable_count == expected, seed
        counts.append(expected)
    assert len(set(counts)) > 1  # the models do differ in stability
