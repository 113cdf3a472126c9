"""Uncertain parameters: distributions, a Gaussian copula, and seeded sampling.

Every draw starts as a vector of standard normal scores ``z`` (plain random or
Latin hypercube), is correlated by the Cholesky factor of the copula matrix and
is then mapped through each parameter's marginal. Working in normal scores keeps
the marginals exact whatever the correlation, and lets the robust optimizer
re-use the same scores for every design (common random numbers).

The keys of the ``[uncertainty]`` table are documented in ``docs/uncertainty.md``.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from lyacomp.errors import StudyError

METHODS = ("random", "lhs")

# Smallest and largest uniform values handed to an inverse CDF: keeps a score
# of exactly 0 or 1 (possible with a 53-bit uniform) away from +-inf.
_U_MIN = 2.0**-60


def _special():
    """Import scipy.special, with an error that says how to get it."""
    try:
        from scipy import special
    except ImportError as exc:  # scipy is an optional extra
        raise StudyError(
            "Monte Carlo studies need scipy; install it with `pip install lyacomp[studies]`"
        ) from exc
    return special


@dataclass(frozen=True)
class Normal:
    """Normal distribution with the given mean and standard deviation."""

    mean: float
    sd: float

    def from_scores(self, z: np.ndarray) -> np.ndarray:
        return self.mean + self.sd * z

    def describe(self) -> str:
        return f"normal(mean={self.mean:g}, sd={self.sd:g})"


@dataclass(frozen=True)
class TruncatedNormal:
    """Normal(mean, sd) restricted to [low, high] (mean and sd before truncation)."""

    mean: float
    sd: float
    low: float
    high: float

    def from_scores(self, z: np.ndarray) -> np.ndarray:
        sp = _special()
        a = (self.low - self.mean) / self.sd
        b = (self.high - self.mean) / self.sd
        if a > 0.0:
            # Work with upper tails when the whole window lies above the mean;
            # Phi(a) would round to 1 and lose every digit of the window.
            ta, tb = sp.ndtr(-a), sp.ndtr(-b)
            tail = tb + sp.ndtr(-z) * (ta - tb)
            x = -sp.ndtri(np.clip(tail, _U_MIN, None))
        else:
            pa, pb = sp.ndtr(a), sp.ndtr(b)
            x = sp.ndtri(np.clip(pa + sp.ndtr(z) * (pb - pa), _U_MIN, 1.0 - _U_MIN))
        return np.clip(self.mean + self.sd * x, self.low, self.high)

    def describe(self) -> str:
        return (
            f"truncated_normal(mean={self.mean:g}, sd={self.sd:g}, "
            f"low={self.low:g}, high={self.high:g})"
        )


@dataclass(frozen=True)
class LogNormal:
    """Lognormal distribution: ln X ~ Normal(ln median, sigma)."""

    median: float
    sigma: float

    def from_scores(self, z: np.ndarray) -> np.ndarray:
        return self.median * np.exp(self.sigma * z)

    def describe(self) -> str:
        return f"lognormal(median={self.median:g}, sigma={self.sigma:g})"


@dataclass(frozen=True)
class Uniform:
    """Uniform distribution on [low, high]."""

    low: float
    high: float

    def from_scores(self, z: np.ndarray) -> np.ndarray:
        u = _special().ndtr(z)
        return self.low + (self.high - self.low) * u

    def describe(self) -> str:
        return f"uniform(low={self.low:g}, high={self.high:g})"


@dataclass(frozen=True)
class Triangular:
    """Triangular distribution on [low, high] with its peak at mode."""

    low: float
    mode: float
    high: float

    def from_scores(self, z: np.ndarray) -> np.ndarray:
        sp = _special()
        u = sp.ndtr(z)
        upper = sp.ndtr(-z)  # 1 - u without cancellation near the top
        width = self.high - self.low
        split = (self.mode - self.low) / width
        rising = self.low + np.sqrt(u * width * (self.mode - self.low))
        falling = self.high - np.sqrt(upper * width * (self.high - self.mode))
        return np.where(u < split, rising, falling)

    def describe(self) -> str:
        return f"triangular(low={self.low:g}, mode={self.mode:g}, high={self.high:g})"


Distribution = Normal | TruncatedNormal | LogNormal | Uniform | Triangular

# distribution name -> (required keys, optional keys); "mean", "median" and
# "mode" default to the parameter's nominal value.
_KEYS: dict[str, tuple[tuple[str, ...], tuple[str, ...]]] = {
    "normal": (("sd",), ("mean",)),
    "truncated_normal": (("sd",), ("mean", "low", "high")),
    "lognormal": (("sigma",), ("median",)),
    "uniform": (("low", "high"), ()),
    "triangular": (("low", "high"), ("mode",)),
}
_COMMON_KEYS = ("distribution", "correlation")


@dataclass(frozen=True)
class UncertaintySpec:
    """Parsed uncertainty: parameter names, their marginals and the copula matrix."""

    names: tuple[str, ...]
    marginals: tuple[Distribution, ...]
    correlation: np.ndarray

    def __post_init__(self) -> None:
        self.correlation.setflags(write=False)

    @property
    def dimension(self) -> int:
        return len(self.names)

    @property
    def correlated(self) -> bool:
        return not np.array_equal(self.correlation, np.eye(self.dimension))

    def values(self, scores: np.ndarray) -> np.ndarray:
        """Map independent standard normal scores (n, d) to parameter values (n, d)."""
        z = scores @ _cholesky(self.correlation, self.names).T if self.correlated else scores
        out = np.empty_like(z)
        for j, marginal in enumerate(self.marginals):
            out[:, j] = marginal.from_scores(z[:, j])
        return out

    def describe(self) -> list[str]:
        """One line per uncertain parameter (and per correlated pair), for reports."""
        lines = [f"{n} ~ {m.describe()}" for n, m in zip(self.names, self.marginals, strict=True)]
        for i, j in zip(*np.triu_indices(self.dimension, 1), strict=True):
            if self.correlation[i, j]:
                rho = self.correlation[i, j]
                lines.append(f"corr({self.names[i]}, {self.names[j]}) = {rho:g} (normal scores)")
        return lines


def _number(value: object, where: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise StudyError(f"{where}: expected a number, got {value!r}")
    x = float(value)
    if math.isnan(x):
        raise StudyError(f"{where}: NaN is not a usable value")
    return x


def _marginal(name: str, entry: Mapping[str, object], nominal: float | None) -> Distribution:
    where = f"[uncertainty] {name}"
    kind = entry.get("distribution")
    if kind not in _KEYS:
        known = ", ".join(f'"{k}"' for k in _KEYS)
        raise StudyError(f"{where}: distribution must be one of {known}; got {kind!r}")
    required, optional = _KEYS[kind]
    unknown = sorted(set(entry) - set(required) - set(optional) - set(_COMMON_KEYS))
    if unknown:
        allowed = ", ".join((*required, *optional, "correlation"))
        raise StudyError(f"{where}: unknown key(s) {', '.join(unknown)} for {kind}; use {allowed}")
    missing = [k for k in required if k not in entry]
    if missing:
        raise StudyError(f"{where}: {kind} needs the key(s) {', '.join(missing)}")
    v = {k: _number(entry[k], f"{where}.{k}") for k in (*required, *optional) if k in entry}
    for key in ("mean", "median", "mode"):
        if key in optional and key not in v:
            if nominal is None:
                raise StudyError(f"{where}: give '{key}' (the parameter has no nominal value)")
            v[key] = nominal

    def positive(key: str) -> None:
        if not (v[key] > 0.0 and math.isfinite(v[key])):
            raise StudyError(f"{where}.{key} must be a positive finite number; got {v[key]:g}")

    if kind == "normal":
        positive("sd")
        return Normal(v["mean"], v["sd"])
    if kind == "truncated_normal":
        positive("sd")
        low, high = v.get("low", -math.inf), v.get("high", math.inf)
        if math.isinf(low) and math.isinf(high):
            raise StudyError(f"{where}: truncated_normal needs 'low', 'high' or both")
        if not low < high:
            raise StudyError(f"{where}: needs low < high; got low={low:g}, high={high:g}")
        # The window must hold some probability mass, or every draw is rounding noise.
        if (low - v["mean"]) / v["sd"] > 30.0 or (high - v["mean"]) / v["sd"] < -30.0:
            raise StudyError(f"{where}: the window [{low:g}, {high:g}] lies > 30 sd from the mean")
        return TruncatedNormal(v["mean"], v["sd"], low, high)
    if kind == "lognormal":
        positive("sigma")
        positive("median")
        return LogNormal(v["median"], v["sigma"])
    if not (math.isfinite(v["low"]) and math.isfinite(v["high"]) and v["low"] < v["high"]):
        got = f"low={v['low']:g}, high={v['high']:g}"
        raise StudyError(f"{where}: needs finite low < high; got {got}")
    if kind == "uniform":
        return Uniform(v["low"], v["high"])
    if not v["low"] <= v["mode"] <= v["high"]:
        raise StudyError(
            f"{where}: mode {v['mode']:g} lies outside [{v['low']:g}, {v['high']:g}]"
            " (mode defaults to the nominal value)"
        )
    return Triangular(v["low"], v["mode"], v["high"])


def _correlation(names: Sequence[str], table: Mapping[str, Mapping[str, object]]) -> np.ndarray:
    index = {n: i for i, n in enumerate(names)}
    r = np.eye(len(names))
    given = np.zeros_like(r, dtype=bool)
    for name in names:
        pairs = table[name].get("correlation", {})
        if not isinstance(pairs, Mapping):
            raise StudyError(
                f"[uncertainty] {name}.correlation must be a table like {{ other = 0.3 }}"
            )
        for other, value in pairs.items():
            where = f"[uncertainty] {name}.correlation.{other}"
            if other not in index:
                raise StudyError(f"{where}: '{other}' is not an uncertain parameter")
            if other == name:
                raise StudyError(f"{where}: a parameter is not correlated with itself")
            rho = _number(value, where)
            if not -1.0 < rho < 1.0:
                raise StudyError(f"{where}: a correlation lies strictly between -1 and 1")
            i, j = index[name], index[other]
            if given[i, j] and r[i, j] != rho:
                raise StudyError(f"{where}: given twice with different values")
            r[i, j] = r[j, i] = rho
            given[i, j] = given[j, i] = True
    _cholesky(r, names)
    return r


def _cholesky(r: np.ndarray, names: Sequence[str]) -> np.ndarray:
    try:
        return np.linalg.cholesky(r)
    except np.linalg.LinAlgError:
        raise StudyError(
            f"the correlations among {', '.join(names)} do not form a valid (positive definite)"
            " matrix; lower some of them"
        ) from None


def parse_uncertainty(
    table: Mapping[str, object],
    nominal: Mapping[str, float] | None = None,
    *,
    parameters: Sequence[str] | None = None,
    bifurcation: str | None = None,
) -> UncertaintySpec:
    """Parse an ``[uncertainty]`` table (or the same dict built in Python).

    Values may also be distribution objects (``Normal(1.0, 0.1)``, ...).
    ``parameters`` (the model's names) and ``bifurcation`` are checked when given:
    the bifurcation parameter cannot be uncertain because its critical value is
    what the evaluator computes.
    """
    if not isinstance(table, Mapping) or not table:
        raise StudyError(
            "no uncertain parameters: add an [uncertainty] table to the model, e.g."
            ' k = { distribution = "normal", sd = 0.05 }'
        )
    nominal = dict(nominal or {})
    names: list[str] = []
    marginals: list[Distribution] = []
    entries: dict[str, Mapping[str, object]] = {}
    for name, entry in table.items():
        if parameters is not None and name not in parameters:
            raise StudyError(
                f"[uncertainty] {name}: not a parameter of the model"
                f" (parameters: {', '.join(parameters)})"
            )
        if name == bifurcation:
            raise StudyError(
                f"[uncertainty] {name}: is the bifurcation parameter; its critical value is"
                " computed, not sampled"
            )
        if isinstance(entry, Normal | TruncatedNormal | LogNormal | Uniform | Triangular):
            marginals.append(entry)
            entries[name] = {}
        elif isinstance(entry, Mapping):
            marginals.append(_marginal(name, entry, nominal.get(name)))
            entries[name] = entry
        else:
            raise StudyError(
                f"[uncertainty] {name}: expected a table such as"
                f' {{ distribution = "normal", sd = 0.1 }}; got {entry!r}'
            )
        names.append(name)
    return UncertaintySpec(tuple(names), tuple(marginals), _correlation(names, entries))


def chunk_rng(seed: int, chunk: int) -> np.random.Generator:
    """The generator of one chunk: independent of every other chunk and of threads."""
    return np.random.Generator(np.random.PCG64(np.random.SeedSequence(seed, spawn_key=(chunk,))))


def draw_scores(rng: np.random.Generator, n: int, d: int, method: str = "random") -> np.ndarray:
    """Independent standard normal scores, shape (n, d): plain random or Latin hypercube.

    A Latin hypercube design covers the n draws it is asked for; the streamed study
    asks per chunk, so each chunk is a Latin hypercube of its own.
    """
    if method == "random":
        return rng.standard_normal((n, d))
    if method == "lhs":
        from scipy.stats import qmc

        try:
            design = qmc.LatinHypercube(d, rng=rng)
        except TypeError:  # scipy < 1.15 names the generator argument `seed`
            design = qmc.LatinHypercube(d, seed=rng)
        u = design.random(n) if n else np.empty((0, d))
        return _special().ndtri(np.clip(u, _U_MIN, 1.0 - _U_MIN))
    raise StudyError(f"sampling method must be one of {', '.join(METHODS)}; got {method!r}")


def sample(
    spec: UncertaintySpec, n: int, seed: int, *, method: str = "random", chunk: int = 0
) -> np.ndarray:
    """Draw ``n`` parameter vectors (n, d) reproducibly from ``seed`` (and chunk index)."""
    if n < 0:
        raise StudyError(f"the number of samples must be >= 0; got {n}")
    return spec.values(draw_scores(chunk_rng(seed, chunk), n, spec.dimension, method))
