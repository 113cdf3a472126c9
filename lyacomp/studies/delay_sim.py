"""Integrate delay differential equations with constant delays.

``x'(t) = f(t, x(t), (x(t - tau_1), ..., x(t - tau_m)))`` for ``t > t0``, with the
initial history ``x(s) = phi(s)`` for ``s <= t0`` (a constant vector or a callable).

Method of steps with the explicit Dormand-Prince 5(4) pair (Dormand & Prince, J. Comput.
Appl. Math. 6, 1980) and its fourth-order continuous extension (the coefficients scipy's
RK45 uses, from Shampine, Math. Comp. 46, 1986; a test compares the tables with scipy's).
Every accepted step stores its interpolating polynomial; a delayed argument
``s = t + c h - tau_k`` is read from the initial history (``s <= t0``) or from the
polynomial of the step that contains ``s``.

- Step size control: the embedded fourth-order solution estimates the local error in the
  mixed norm ``rms(err / (atol + rtol * max(|x_n|, |x_n+1|)))``; steps grow or shrink by
  ``0.9 * err**(-1/5)``, limited to a factor between 0.2 and 5.
- Delays shorter than the step: a step longer than the smallest delay needs values inside
  the step itself. It is then iterated: the first pass reads them from the previous step's
  polynomial, extended; every further pass from the polynomial of the pass before. The
  step is accepted when two passes agree to a tenth of the error tolerance (else it is
  halved). While ``h <= tau_min`` every delayed argument lies in the computed past and one
  pass is exact.
- Breaking points: the derivative of the solution generally jumps at ``t0`` (the history's
  slope differs from ``f`` there), a jump that the delays carry forward, one derivative
  smoother each time, to ``t0 + tau_k``, ``t0 + tau_k + tau_j``, .... The integrator steps
  exactly onto every such point made of at most ``breaking_order`` delays (default 5: past
  that the jump is in the sixth derivative, beyond what a fifth-order step resolves). A
  callable history is assumed smooth on ``[t0 - tau_max, t0]``.
"""

from __future__ import annotations

import itertools
import math
from bisect import bisect_right
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np

from lyacomp.errors import InternalError, StudyError

Rhs = Callable[[float, np.ndarray, tuple[np.ndarray, ...]], np.ndarray]
History = Callable[[float], np.ndarray]
#: Called after every accepted step with (t, x, x'); a non-None label stops the run.
StopCondition = Callable[[float, np.ndarray, np.ndarray], "str | None"]

# Dormand-Prince 5(4): nodes, stage coefficients, fifth-order weights (also the last
# stage, evaluated at t + h: first same as last), and the weights of the error estimate
# (fifth- minus fourth-order solution).
_C = np.array([0.0, 1 / 5, 3 / 10, 4 / 5, 8 / 9, 1.0])
_A = tuple(
    np.array(row)
    for row in (
        (),
        (1 / 5,),
        (3 / 40, 9 / 40),
        (44 / 45, -56 / 15, 32 / 9),
        (19372 / 6561, -25360 / 2187, 64448 / 6561, -212 / 729),
        (9017 / 3168, -355 / 33, 46732 / 5247, 49 / 176, -5103 / 18656),
    )
)
_B = np.array([35 / 384, 0.0, 500 / 1113, 125 / 192, -2187 / 6784, 11 / 84])
_E = np.array([71 / 57600, 0.0, -71 / 16695, 71 / 1920, -17253 / 339200, 22 / 525, -1 / 40])
# Continuous extension: x(t + theta h) = x + h * K^T P (theta, theta^2, theta^3, theta^4).
_P = np.array(
    [
        [1.0, -8048581381 / 2820520608, 8663915743 / 2820520608, -12715105075 / 11282082432],
        [0.0, 0.0, 0.0, 0.0],
        [0.0, 131558114200 / 32700410799, -68118460800 / 10900136933, 87487479700 / 32700410799],
        [0.0, -1754552775 / 470086768, 14199869525 / 1410260304, -10690763975 / 1880347072],
        [
            0.0,
            127303824393 / 49829197408,
            -318862633887 / 49829197408,
            701980252875 / 199316789632,
        ],
        [0.0, -282668133 / 205662961, 2019193451 / 616988883, -1453857185 / 822651844],
        [0.0, 40617522 / 29380423, -110615467 / 29380423, 69997945 / 29380423],
    ]
)
ORDER = 5

SAFETY = 0.9
MIN_FACTOR = 0.2
MAX_FACTOR = 5.0
#: Passes of a step longer than the smallest delay before it is halved instead.
MAX_PASSES = 12
#: Two passes agree when their difference is this fraction of the error tolerance.
PASS_AGREEMENT = 0.1
DEFAULT_BREAKING_ORDER = 5


def _powers(theta: float) -> np.ndarray:
    t2 = theta * theta
    return np.array([theta, t2, t2 * theta, t2 * t2])


@dataclass
class _Segment:
    """One step's interpolating polynomial: x(t + theta h) = y + h * q @ powers(theta)."""

    t: float
    h: float
    y: np.ndarray
    q: np.ndarray

    def __call__(self, s: float) -> np.ndarray:
        return self.y + self.h * (self.q @ _powers((s - self.t) / self.h))


class _Past:
    """The initial history followed by the polynomials of the accepted steps."""

    def __init__(self, t0: float, initial: History):
        self.t0 = t0
        self.initial = initial
        self.starts: list[float] = []
        self.segments: list[_Segment] = []
        #: Polynomial used for times beyond the last accepted step (a step being iterated).
        self.ahead: _Segment | None = None

    @property
    def end(self) -> float:
        return self.t0 if not self.segments else self.segments[-1].t + self.segments[-1].h

    def append(self, segment: _Segment) -> None:
        self.starts.append(segment.t)
        self.segments.append(segment)

    def __call__(self, s: float) -> np.ndarray:
        if s <= self.t0:
            return self.initial(s)
        if s > self.end:
            if self.ahead is None:
                raise InternalError(f"delayed argument {s!r} beyond the computed solution")
            return self.ahead(s)
        return self.segments[bisect_right(self.starts, s) - 1](s)

    def evaluate(self, times: np.ndarray) -> np.ndarray:
        """Rows x(s) for the sorted or unsorted 1-d array ``times`` (vectorized lookup)."""
        if not self.segments:
            return np.array([self.initial(float(s)) for s in times])
        out = np.empty((times.size, self.segments[0].y.size))
        starts = np.array(self.starts)
        h = np.array([seg.h for seg in self.segments])
        y = np.array([seg.y for seg in self.segments])
        q = np.array([seg.q for seg in self.segments])
        before = times <= self.t0
        for j in np.flatnonzero(before):
            out[j] = self.initial(float(times[j]))
        after = np.flatnonzero(~before)
        i = np.clip(np.searchsorted(starts, times[after], side="right") - 1, 0, None)
        theta = (times[after] - starts[i]) / h[i]
        powers = np.stack([theta, theta**2, theta**3, theta**4], axis=1)
        out[after] = y[i] + h[i, None] * np.einsum("kjp,kp->kj", q[i], powers)
        return out


@dataclass
class DelaySolution:
    """Result of :func:`integrate_delay`.

    ``t`` and ``x`` are the accepted mesh points (rows of ``x``); ``sol(times)`` evaluates
    the continuous solution (the initial history before ``t0``) with scipy's shape
    convention: ``(n,)`` for a scalar time, ``(n, k)`` for ``k`` times.
    """

    t: np.ndarray
    x: np.ndarray
    status: int
    message: str
    stopped_by: str | None
    nfev: int
    rejected: int
    breaking_points: np.ndarray
    _past: _Past = field(repr=False)

    def sol(self, times: float | Sequence[float] | np.ndarray) -> np.ndarray:
        ts = np.asarray(times, dtype=float)
        out = self._past.evaluate(ts.ravel())
        return out.T if ts.ndim else out[0]

    @property
    def max_step(self) -> float:
        return float(np.max(np.diff(self.t))) if self.t.size > 1 else 0.0


def breaking_points(t0: float, delays: Sequence[float], t_end: float, order: int) -> np.ndarray:
    """Sorted ``t0 + n_1 tau_1 + ... + n_m tau_m`` in ``(t0, t_end]`` with
    ``1 <= n_1 + ... + n_m <= order`` (coincident points merged)."""
    points = set()
    for count in range(1, order + 1):
        for combo in itertools.combinations_with_replacement(delays, count):
            point = t0 + math.fsum(combo)
            if point <= t_end:
                points.add(point)
    merged: list[float] = []
    scale = max(abs(t0), abs(t_end), 1.0) * 1e-12
    for point in sorted(points):
        if not merged or point - merged[-1] > scale:
            merged.append(point)
    return np.array(merged)


def _as_history(history: History | Sequence[float] | np.ndarray) -> History:
    if callable(history):
        return lambda s: np.asarray(history(s), dtype=float).ravel()
    value = np.array(history, dtype=float).ravel()
    return lambda _s: value


def integrate_delay(
    rhs: Rhs,
    delays: Sequence[float],
    history: History | Sequence[float] | np.ndarray,
    t_span: tuple[float, float],
    *,
    rtol: float = 1e-8,
    atol: float = 1e-10,
    max_step: float = math.inf,
    first_step: float | None = None,
    breaking_order: int = DEFAULT_BREAKING_ORDER,
    stop: StopCondition | None = None,
    max_steps: int = 2_000_000,
) -> DelaySolution:
    """Integrate ``x' = rhs(t, x, delayed)`` over ``t_span`` from the history ``history``.

    ``delayed`` is a tuple with ``x(t - tau_k)`` for every ``tau_k`` in ``delays`` (in that
    order). ``history`` is a constant state or a callable ``phi(s)`` for ``s <= t0``; the
    solution starts at ``x(t0) = phi(t0)``. ``stop(t, x, dxdt)`` is asked after every
    accepted step; a label it returns ends the run (``status`` 1, ``stopped_by`` the label).
    ``status`` is 0 when ``t_end`` was reached and -1 when the step size collapsed, the
    state stopped being finite or ``max_steps`` was exceeded (``message`` says which).
    """
    t0, t_end = float(t_span[0]), float(t_span[1])
    taus = tuple(float(tau) for tau in delays)
    if not t_end > t0:
        raise StudyError("the integration interval must have t_end > t0")
    if not taus or not all(tau > 0 and math.isfinite(tau) for tau in taus):
        raise StudyError(f"delays must be positive finite numbers, got {taus}")
    if not (rtol > 0 and atol > 0):
        raise StudyError("rtol and atol must be positive")
    phi = _as_history(history)
    past = _Past(t0, phi)
    tau_min = min(taus)
    bps = breaking_points(t0, taus, t_end, breaking_order)
    targets = [*bps.tolist(), t_end] if not bps.size or bps[-1] < t_end else bps.tolist()

    y = np.array(phi(t0), dtype=float).ravel()
    n = y.size
    nfev = 0

    def f(t: float, x: np.ndarray) -> np.ndarray:
        nonlocal nfev
        nfev += 1
        delayed = tuple(past(t - tau) for tau in taus)
        return np.asarray(rhs(t, x, delayed), dtype=float).reshape(n)

    def scaled_norm(v: np.ndarray, a: np.ndarray, b: np.ndarray) -> float:
        scale = atol + rtol * np.maximum(np.abs(a), np.abs(b))
        return float(np.sqrt(np.mean((v / scale) ** 2)))

    t = t0
    k1 = f(t, y)
    if first_step is None:
        first_step = _first_step(f, t, y, k1, rtol, atol, min(tau_min, t_end - t0))
    h = min(first_step, max_step, tau_min)
    ts, xs = [t], [y.copy()]
    rejected = 0
    target = 0
    previous: _Segment | None = None

    def attempt(h: float) -> tuple[np.ndarray, np.ndarray, np.ndarray, bool]:
        """One step of length h: (new state, stages K, error estimate, passes agreed)."""
        K = np.empty((7, n))
        K[0] = k1
        passes = 1 if h <= tau_min else MAX_PASSES
        # first pass beyond the computed past: the previous polynomial, extended
        past.ahead = previous if previous is not None else _Segment(t, h, y, np.zeros((n, 4)))
        y_last = None
        for _ in range(passes):
            for i in range(1, 6):
                yi = y + h * (_A[i] @ K[:i])
                K[i] = f(t + _C[i] * h, yi)
            y_new = y + h * (_B @ K[:6])
            K[6] = f(t + h, y_new)
            if passes == 1:
                break
            if y_last is not None and scaled_norm(y_new - y_last, y, y_new) <= PASS_AGREEMENT:
                break
            y_last = y_new
            past.ahead = _Segment(t, h, y, K.T @ _P)
        else:
            past.ahead = None
            return y_new, K, np.zeros(n), False
        past.ahead = None
        return y_new, K, h * (_E @ K), True

    while t < t_end:
        if len(ts) > max_steps:
            return _finish(
                ts, xs, -1, f"more than {max_steps} steps", None, nfev, rejected, bps, past
            )
        while target < len(targets) and targets[target] <= t:
            target += 1
        goal = targets[target]
        # land exactly on the next breaking point (or t_end); stretch a step that would
        # stop just short of it instead of leaving a sliver
        landing = t + h >= goal or (goal - (t + h) < 0.05 * h and goal - t <= max_step)
        step = goal - t if landing else h
        y_new, K, err_vec, agreed = attempt(step)
        err = scaled_norm(err_vec, y, y_new) if agreed else math.inf
        if not math.isfinite(err):
            err = math.inf
        if err <= 1.0:
            segment = _Segment(t, step, y.copy(), K.T @ _P)
            past.append(segment)
            previous = segment
            t = goal if landing else t + step
            y = y_new
            k1 = K[6]
            ts.append(t)
            xs.append(y.copy())
            factor = MAX_FACTOR if err == 0 else min(MAX_FACTOR, SAFETY * err ** (-1 / ORDER))
            h = min(max(step, h) * factor, max_step) if landing else min(step * factor, max_step)
            label = stop(t, y, k1) if stop is not None else None
            if label is not None:
                return _finish(ts, xs, 1, f"stopped: {label}", label, nfev, rejected, bps, past)
        else:
            rejected += 1
            if math.isfinite(err):
                h = step * max(MIN_FACTOR, SAFETY * err ** (-1 / ORDER))
            else:
                h = 0.5 * step
            if h < 1e-14 * max(abs(t), 1.0):
                if not np.all(np.isfinite(y_new)):
                    message = f"the state stopped being finite near t = {t:.6g}"
                else:
                    message = f"the step size collapsed at t = {t:.6g}"
                return _finish(ts, xs, -1, message, None, nfev, rejected, bps, past)
    return _finish(ts, xs, 0, "reached the end of the interval", None, nfev, rejected, bps, past)


def _first_step(
    f, t: float, y: np.ndarray, k1: np.ndarray, rtol: float, atol: float, cap: float
) -> float:
    """Hairer, Norsett & Wanner's starting step (Solving ODEs I, Springer 1993, sec. II.4),
    its trial step capped so that the delayed values still come from the history."""
    scale = atol + rtol * np.abs(y)
    d0 = float(np.sqrt(np.mean((y / scale) ** 2)))
    d1 = float(np.sqrt(np.mean((k1 / scale) ** 2)))
    h0 = min(1e-6 if d0 < 1e-5 or d1 < 1e-5 else 0.01 * d0 / d1, cap)
    k2 = f(t + h0, y + h0 * k1)
    d2 = float(np.sqrt(np.mean(((k2 - k1) / scale) ** 2))) / h0
    if max(d1, d2) <= 1e-15:
        h1 = max(1e-6, h0 * 1e-3)
    else:
        h1 = (0.01 / max(d1, d2)) ** (1 / ORDER)
    return min(100 * h0, h1)


def _finish(ts, xs, status, message, label, nfev, rejected, bps, past) -> DelaySolution:
    return DelaySolution(
        t=np.array(ts),
        x=np.array(xs),
        status=status,
        message=message,
        stopped_by=label,
        nfev=nfev,
        rejected=rejected,
        breaking_points=bps,
        _past=past,
    )
