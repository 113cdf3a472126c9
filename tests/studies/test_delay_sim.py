"""The delay-equation integrator against exact solutions, an ODE reference and the
characteristic roots of linear delay equations."""

from __future__ import annotations

import math

import numpy as np
import pytest

pytest.importorskip("scipy")

from scipy.integrate import RK45, solve_ivp  # noqa: E402
from scipy.special import lambertw  # noqa: E402

from lyacomp.errors import StudyError  # noqa: E402
from lyacomp.studies import delay_sim  # noqa: E402
from lyacomp.studies.delay_sim import breaking_points, integrate_delay  # noqa: E402


def test_tableau_is_scipy_dormand_prince():
    # scipy's RK45 is the same Dormand-Prince 5(4) pair with the same continuous extension
    # (scipy reference); a mistyped coefficient fails here.
    for i in range(1, 6):
        assert np.array(delay_sim._A[i]) == pytest.approx(RK45.A[i, :i], rel=1e-15, abs=0)
    assert delay_sim._B == pytest.approx(RK45.B, rel=1e-15, abs=0)
    assert delay_sim._C == pytest.approx(RK45.C, rel=1e-15, abs=0)
    # the sign of the error estimate does not matter, its size does
    assert np.abs(delay_sim._E) == pytest.approx(np.abs(RK45.E), rel=1e-15, abs=0)
    assert delay_sim._P == pytest.approx(RK45.P, rel=1e-15, abs=0)


def _steps_exact(order: int):
    """x' = -x(t - 1), x = 1 on [-1, 0], solved exactly by the method of steps with sympy
    (common practice, no source): on [k, k+1] the solution is the integral of the previous
    piece; the first pieces are 1 - t, t^2/2 - 2t + 3/2, ... so x(1) = 0, x(2) = -1/2,
    x(3) = -1/6."""
    import sympy

    t = sympy.Symbol("t")
    pieces = [sympy.Integer(1)]  # the history on [-1, 0]
    for k in range(order):
        start = pieces[-1].subs(t, k) if k else sympy.Integer(1)
        prev = pieces[-1].subs(t, t - 1)
        pieces.append(sympy.expand(start - sympy.integrate(prev, (t, k, t))))
    return t, pieces[1:]


def test_method_of_steps_exact_piecewise_polynomials():
    import sympy

    t, pieces = _steps_exact(5)
    values = [pieces[k].subs(t, k + 1) for k in range(3)]
    assert values == [0, sympy.Rational(-1, 2), sympy.Rational(-1, 6)]
    sol = integrate_delay(
        lambda _t, _x, d: -d[0], (1.0,), [1.0], (0.0, 5.0), rtol=1e-10, atol=1e-14
    )
    assert sol.status == 0
    # the mesh lands on the breaking points 1, 2, ..., 5 exactly, where the step values
    # are accurate to rounding; between them the continuous extension is one order lower
    assert set(range(1, 6)) <= set(sol.t.tolist())
    at_mesh = sol.sol(np.arange(1.0, 6.0))[0]
    assert at_mesh == pytest.approx(
        [float(p.subs(t, k + 1)) for k, p in enumerate(pieces)], abs=1e-13
    )
    for k, piece in enumerate(pieces):
        grid = np.linspace(k, k + 1, 9)
        exact = np.array([float(piece.subs(t, s)) for s in grid])
        assert sol.sol(grid)[0] == pytest.approx(exact, abs=2e-9)


def test_breaking_points_are_sums_of_delays():
    # jumps of the derivative propagate from t0 to t0 + sums of delays (common practice,
    # no source)
    bps = breaking_points(0.0, (1.0, 1.5), 10.0, order=2)
    assert bps.tolist() == [1.0, 1.5, 2.0, 2.5, 3.0]
    assert breaking_points(2.0, (1.0,), 4.5, order=5).tolist() == [3.0, 4.0]


def _chain_reference(f, n: int, lags: tuple[int, ...], history, intervals: int, rtol=1e-13):
    """Integer delays, unit interval: the method of steps written as one ODE system.

    On [k, k+1] put y_k(s) = x(k + s); then y_k' = f(y_k, (y_{k-l} for l in lags)) with
    y_j = history(j + s) for j < 0 and y_k(0) = y_{k-1}(1). Pass K integrates y_0..y_K
    jointly over s in [0, 1] with scipy's DOP853 (scipy reference for the ODE part).
    Returns a function x(t) on [0, intervals]."""
    starts = [np.asarray(history(0.0), float)]
    sols = []
    for K in range(intervals):

        def rhs(s, z, K=K):
            y = z.reshape(K + 1, n)
            out = np.empty_like(y)
            for k in range(K + 1):
                lagged = tuple(
                    y[k - lag] if k - lag >= 0 else np.asarray(history(k - lag + s), float)
                    for lag in lags
                )
                out[k] = f(y[k], lagged)
            return out.ravel()

        sol = solve_ivp(
            rhs,
            (0.0, 1.0),
            np.concatenate(starts),
            method="DOP853",
            rtol=rtol,
            atol=1e-14,
            dense_output=True,
        )
        sols.append(sol)
        starts.append(sol.y[-n:, -1])

    def x(t: float) -> np.ndarray:
        k = min(int(math.floor(t)), intervals - 1)
        return sols[-1].sol(t - k).reshape(intervals, n)[k]

    return x


def _wright(r: float):
    # Wright's equation x'(t) = -r x(t-1) (1 + x(t)) (Hassard, Kazarinoff & Wan 1981)
    return lambda x, d: -r * d[0] * (1.0 + x)


@pytest.mark.parametrize("r", [1.2, 1.7])
def test_wright_equation_against_chain_ode(r):
    f = _wright(r)
    ref = _chain_reference(f, 1, (1,), lambda _s: np.array([0.4]), 6)
    sol = integrate_delay(
        lambda _t, x, d: f(x, d), (1.0,), [0.4], (0.0, 6.0), rtol=1e-11, atol=1e-14
    )
    # mesh values to about the tolerance, interpolated values (one order lower) to 1e-9
    at_mesh = np.array([ref(s)[0] for s in sol.t])
    assert sol.x[:, 0] == pytest.approx(at_mesh, abs=1e-11)
    grid = np.linspace(0.0, 6.0, 61)
    expected = np.array([ref(s)[0] for s in grid])
    assert sol.sol(grid)[0] == pytest.approx(expected, abs=1e-9)


def test_hutchinson_logistic_against_chain_ode():
    # Hutchinson's delayed logistic equation N' = r N(t) (1 - N(t - 1)) (Hutchinson 1948;
    # from memory) with a sloped history, against the ODE chain of the method of steps
    r = 1.4

    def f(n, d):
        return r * n * (1.0 - d[0])

    def history(s):
        return np.array([1.3 + 0.1 * s])

    ref = _chain_reference(f, 1, (1,), history, 6)
    sol = integrate_delay(
        lambda _t, n, d: f(n, d), (1.0,), history, (0.0, 6.0), rtol=1e-11, atol=1e-14
    )
    grid = np.linspace(0.0, 6.0, 49)
    assert sol.sol(grid)[0] == pytest.approx([ref(s)[0] for s in grid], abs=1e-9)


def test_two_states_two_delays_against_chain_ode():
    # a 2-state system with delays 1 and 2 and a smooth non-constant history
    def f(x, d):
        return np.array(
            [x[1] - 0.6 * np.tanh(d[0][0]) + 0.1 * d[1][1], -0.5 * x[0] - 0.3 * d[1][0] * x[1]]
        )

    def history(s):
        return np.array([0.5 + 0.2 * s, math.cos(s)])

    ref = _chain_reference(f, 2, (1, 2), history, 5)
    sol = integrate_delay(
        lambda _t, x, d: f(x, d), (1.0, 2.0), history, (0.0, 5.0), rtol=1e-11, atol=1e-14
    )
    grid = np.linspace(0.0, 5.0, 41)
    expected = np.array([ref(s) for s in grid]).T
    assert sol.sol(grid) == pytest.approx(expected, abs=1e-9)


def test_convergence_order_with_fixed_steps():
    # A p-th order pair with a continuous extension of order p - 1 converges with order p
    # on delay equations once the mesh holds the breaking points (Bellen & Zennaro,
    # Numerical Methods for Delay Differential Equations, Oxford 2003; from memory).
    f = _wright(1.3)
    ref = _chain_reference(f, 1, (1,), lambda _s: np.array([0.4]), 4)
    errors = []
    for h in (1 / 8, 1 / 16, 1 / 32):
        # tolerances this loose accept every step, so each is max_step long
        sol = integrate_delay(
            lambda _t, x, d: f(x, d),
            (1.0,),
            [0.4],
            (0.0, 4.0),
            rtol=1e6,
            atol=1e6,
            max_step=h,
            first_step=h,
        )
        assert np.diff(sol.t) == pytest.approx(h)
        errors.append(abs(sol.x[-1, 0] - ref(4.0)[0]))
    orders = np.log2(np.array(errors[:-1]) / np.array(errors[1:]))
    assert np.all((orders > 4.6) & (orders < 5.5)), (errors, orders)


def _ratio_over_period(sol, t1: float, period: float) -> float:
    return float(sol.sol(t1 + period)[0] / sol.sol(t1)[0])


@pytest.mark.parametrize(
    ("a", "tau"),
    [(-1.0, 1.0), (-2.0, 1.0), (-0.8, 2.5)],
    ids=["decaying", "growing", "long-delay"],
)
def test_linear_oscillation_rate_is_principal_lambert_root(a, tau):
    # x' = a x(t - tau) has the characteristic roots W_k(a tau)/tau, the rightmost from the
    # principal branch (Asl & Ulsoy, J. Dyn. Sys. Meas. Control 125, 2003; Shinozaki &
    # Mori, Automatica 42, 2006). For a tau < -1/e it is complex: x ~ e^{Re l t} cos(Im l t)
    # once the other roots have died out, so x(t + T)/x(t) = exp(Re l T), T = 2 pi / Im l.
    lam = complex(lambertw(a * tau, 0)) / tau
    period = 2 * math.pi / lam.imag
    t1 = 12.0 * tau
    sol = integrate_delay(
        lambda _t, _x, d: a * d[0], (tau,), [1.0], (0.0, t1 + period), rtol=1e-11, atol=1e-14
    )
    assert sol.status == 0
    assert _ratio_over_period(sol, t1, period) == pytest.approx(
        math.exp(lam.real * period), rel=1e-6
    )
    # the next branch decays faster, so the principal root is what the solution shows
    assert (complex(lambertw(a * tau, 1)) / tau).real < lam.real - 0.5 / tau


def test_real_growth_rate_and_delay_shorter_than_steps():
    # x' = a x(t - tau) with a tau > -1/e: real rightmost root W_0(a tau)/tau (Asl & Ulsoy
    # 2003). With tau = 0.01 the steps become much longer than the delay, so every step
    # is iterated on its own continuous extension.
    for a, tau in ((0.5, 1.0), (-1.0, 0.01)):
        lam = complex(lambertw(a * tau, 0)).real / tau
        sol = integrate_delay(
            lambda _t, _x, d, a=a: a * d[0], (tau,), [1.0], (0.0, 15.0), rtol=1e-11, atol=1e-16
        )
        assert sol.sol(15.0)[0] / sol.sol(10.0)[0] == pytest.approx(math.exp(5 * lam), rel=1e-7)
        if tau < 0.1:
            assert sol.max_step > 5 * tau


@pytest.mark.parametrize("t0", [0.0, 3.0])
def test_callable_history_continued_exactly(t0):
    # x' = -x(t - pi/2) is solved by cos t (cos' = -sin, -cos(t - pi/2) = -sin t; common
    # practice, no source): started from the history cos on [t0 - pi/2, t0] it stays cos.
    sol = integrate_delay(
        lambda _t, _x, d: -d[0],
        (math.pi / 2,),
        lambda s: [math.cos(s)],
        (t0, t0 + 20.0),
        rtol=1e-10,
        atol=1e-12,
    )
    grid = np.linspace(t0 - 1.0, t0 + 20.0, 300)
    assert sol.sol(grid)[0] == pytest.approx(np.cos(grid), abs=5e-9)


def test_stop_condition_ends_the_run():
    # x' = -x(t-1) from 1 decays (principal root -0.318 +- 1.337i, Asl & Ulsoy 2003);
    # a stop condition on |x| < 0.05 fires on the way
    def small(t, x, rate):
        assert rate == pytest.approx(-sol_ref.sol(t - 1.0), abs=1e-6)  # x'(t) = -x(t - 1)
        return "small" if abs(x[0]) < 0.05 and t > 1.0 else None

    sol_ref = integrate_delay(lambda _t, _x, d: -d[0], (1.0,), [1.0], (0.0, 100.0))

    sol = integrate_delay(lambda _t, _x, d: -d[0], (1.0,), [1.0], (0.0, 100.0), stop=small)
    assert sol.status == 1 and sol.stopped_by == "small"
    assert abs(sol.x[-1, 0]) < 0.05 and sol.t[-1] < 100.0


def test_failures_are_reported_not_raised():
    # a right-hand side that turns NaN (a model leaving its domain) and a step budget
    def nan_after_half(t, x, _d):
        return np.sqrt(x - 0.8) if t > 0.5 else -x

    with np.errstate(invalid="ignore"):
        sol = integrate_delay(nan_after_half, (1.0,), [1.0], (0.0, 2.0))
    assert sol.status == -1 and "stopped being finite" in sol.message
    assert 0.49 < sol.t[-1] < 0.6
    sol = integrate_delay(lambda _t, _x, d: -d[0], (1.0,), [1.0], (0.0, 50.0), max_steps=20)
    assert sol.status == -1 and "more than 20 steps" in sol.message


@pytest.mark.parametrize(
    ("delays", "span", "message"),
    [
        ((0.0,), (0.0, 1.0), "delays must be positive"),
        ((-1.0,), (0.0, 1.0), "positive"),
        ((1.0,), (1.0, 1.0), "t_end > t0"),
    ],
)
def test_bad_arguments_refused(delays, span, message):
    with pytest.raises(StudyError, match=message):
        integrate_delay(lambda _t, x, _d: -x, delays, [1.0], span)
