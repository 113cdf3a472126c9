"""Monte Carlo robustness: how likely is a hard (subcritical) onset under uncertainty?

The study streams chunks of samples through ``Evaluator.batch``. Memory stays
bounded whatever the sample count: per chunk the draws and outputs
(``chunk_size`` rows), plus a uniform random subset of at most ``keep`` ok samples
(bottom-k on a random key) on which quantiles and the driver ranking are computed;
below ``keep`` samples that subset is every ok sample and the quantiles are exact.
Counts (status breakdown, subcritical fraction) always cover every sample.

Reproducibility: chunk ``i`` draws from its own generator seeded by ``(seed, i)``
and the evaluator is deterministic per sample, so a seed fixes every bit of the
result, whatever the thread count. The chunk size is part of the recipe (with
Latin hypercube sampling each chunk is a design of its own).
"""

from __future__ import annotations

import math
import signal
import sys
import threading
from collections.abc import Iterator, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from lyacomp.errors import StudyError
from lyacomp.status import Criticality, Status
from lyacomp.studies.maps import first_loss_of
from lyacomp.studies.reliability import (
    ReliabilityResult,
    Sensitivity,
    local_sensitivities,
    reliability_index,
)
from lyacomp.studies.sample_store import open_store
from lyacomp.studies.uncertainty import (
    METHODS,
    UncertaintySpec,
    chunk_rng,
    draw_scores,
    parse_uncertainty,
)

DEFAULT_CHUNK = 1 << 16
DEFAULT_KEEP = 1_000_000
#: hard-onset samples kept (a uniform random subset of them) for inspection
DEFAULT_KEEP_HARD = 10_000
DEFAULT_LEVELS = (0.01, 0.05, 0.25, 0.5, 0.75, 0.95, 0.99)
SCALAR_OUTPUTS = ("l1", "critical_value", "omega")

#: Steps of the continuation from the nominal Hopf point that checks each sample's branch.
BRANCH_STEPS = 4
#: The continued and the directly solved Hopf point are the same point when their critical
#: values and frequencies agree to this relative accuracy (both are converged to ~1e-12).
BRANCH_RTOL = 1e-6


def wilson_interval(successes: int, trials: int, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval for a binomial proportion.

    Wilson, E. B. (1927), "Probable inference, the law of succession, and
    statistical inference", J. Amer. Statist. Assoc. 22:209-212. With no trials
    nothing is known and the interval is [0, 1].
    """
    if not 0.0 < confidence < 1.0:
        raise StudyError(f"confidence must lie strictly between 0 and 1; got {confidence}")
    if trials < 0 or not 0 <= successes <= max(trials, 0):
        raise StudyError(f"need 0 <= successes <= trials; got {successes} of {trials}")
    if trials == 0:
        return 0.0, 1.0
    from scipy.special import ndtri

    z = float(ndtri(0.5 + confidence / 2.0))
    p = successes / trials
    z2n = z * z / trials
    centre = (p + z2n / 2.0) / (1.0 + z2n)
    half = z / (1.0 + z2n) * math.sqrt(p * (1.0 - p) / trials + z2n / (4.0 * trials))
    # Clamp rounding: at p = 0 or 1 the interval touches the boundary exactly.
    return max(0.0, centre - half), min(1.0, centre + half)


@dataclass(frozen=True)
class Driver:
    """How strongly one uncertain parameter drives an output.

    ``spearman``: rank correlation with the output. ``srrc``: standardized rank
    regression coefficient (all parameters together, so correlated inputs share
    less of the credit). The sign says the direction: positive raises the output.
    """

    name: str
    spearman: float
    srrc: float

    def to_dict(self) -> dict[str, Any]:
        return {
            "parameter": self.name,
            "spearman": _jsonable(self.spearman),
            "srrc": _jsonable(self.srrc),
        }


def average_ranks(values: np.ndarray) -> np.ndarray:
    """Ranks 1..n of a 1-D array; tied values share the average of their ranks."""
    order = np.argsort(values)
    ordered = values[order]
    first = np.r_[True, ordered[1:] != ordered[:-1]]
    starts = np.flatnonzero(first)
    sizes = np.diff(np.r_[starts, len(values)])
    ranks = np.empty(len(values))
    ranks[order] = np.repeat(starts + (sizes + 1) / 2.0, sizes)
    return ranks


def rank_drivers(inputs: np.ndarray, output: np.ndarray, names: Sequence[str]) -> list[Driver]:
    """Rank the columns of ``inputs`` (n, d) by how strongly they drive ``output``.

    Sorted by |srrc|, largest first; parameters without spread (or too few
    samples to fit) get NaN and come last.
    """
    inputs = np.asarray(inputs, dtype=float)
    output = np.asarray(output, dtype=float)
    n, d = inputs.shape
    if n < d + 2:
        drivers = [Driver(name, math.nan, math.nan) for name in names]
        return drivers
    ranks = np.column_stack([average_ranks(c) for c in (*inputs.T, output)])
    ranks -= ranks.mean(axis=0)
    spread = np.sqrt((ranks**2).mean(axis=0))
    live = spread > 0.0
    std = np.zeros_like(ranks)
    std[:, live] = ranks[:, live] / spread[live]
    rho = np.full(d, math.nan)
    srrc = np.full(d, math.nan)
    if live[-1]:
        rho[live[:d]] = (std[:, :d][:, live[:d]] * std[:, -1:]).mean(axis=0)
        coef, *_ = np.linalg.lstsq(std[:, :d][:, live[:d]], std[:, -1], rcond=None)
        srrc[live[:d]] = coef
    drivers = [Driver(n, float(r), float(s)) for n, r, s in zip(names, rho, srrc, strict=True)]
    return sorted(drivers, key=lambda dr: -abs(dr.srrc) if math.isfinite(dr.srrc) else math.inf)


class _Reservoir:
    """Uniform random subset of at most ``capacity`` rows: keep the smallest keys."""

    def __init__(self, capacity: int, width: int):
        self.capacity = capacity
        self.keys = np.empty(capacity)
        self.rows = np.empty((capacity, width))
        self.size = 0
        self.threshold = math.inf
        self._pending_keys: list[np.ndarray] = []
        self._pending_rows: list[np.ndarray] = []
        self._pending = 0

    def offer(self, keys: np.ndarray, rows: np.ndarray) -> None:
        free = min(self.capacity - self.size, len(keys))
        if free:
            self.keys[self.size : self.size + free] = keys[:free]
            self.rows[self.size : self.size + free] = rows[:free]
            self.size += free
            keys, rows = keys[free:], rows[free:]
            if self.size == self.capacity:
                self.threshold = float(self.keys.max())
        if len(keys) == 0:
            return
        # Only keys below the current largest kept key can ever enter.
        mask = keys < self.threshold
        self._pending_keys.append(keys[mask])
        self._pending_rows.append(rows[mask])
        self._pending += int(mask.sum())
        if self._pending > self.capacity // 4:
            self._merge()

    def _merge(self) -> None:
        if not self._pending:
            return
        new_keys = np.concatenate(self._pending_keys)
        new_rows = np.concatenate(self._pending_rows)
        self._pending_keys, self._pending_rows, self._pending = [], [], 0
        all_keys = np.concatenate([self.keys, new_keys])
        chosen = np.argpartition(all_keys, self.capacity - 1)[: self.capacity]
        incoming = np.sort(chosen[chosen >= self.capacity]) - self.capacity
        kept = np.zeros(self.capacity, dtype=bool)
        kept[chosen[chosen < self.capacity]] = True
        evicted = np.flatnonzero(~kept)
        self.keys[evicted] = new_keys[incoming]
        self.rows[evicted] = new_rows[incoming]
        self.threshold = float(self.keys.max())

    def contents(self) -> np.ndarray:
        """The kept rows in increasing key order: the same array whatever order the
        rows were offered in (chunk order on a cluster is arbitrary)."""
        self._merge()
        order = np.argsort(self.keys[: self.size], kind="stable")
        return self.rows[: self.size][order]


@dataclass
class RobustnessResult:
    """What a robustness study found. ``samples`` counts the samples evaluated."""

    model: str
    samples: int
    requested: int
    interrupted: bool
    seed: int
    method: str
    chunk_size: int
    uncertain: tuple[str, ...]
    distributions: list[str]
    fixed: dict[str, float]
    status_counts: dict[str, int]
    ok: int
    #: ok samples whose Hopf point is the first loss of stability of a stable equilibrium:
    #: the base of the hard-onset probability (equal to ``ok`` from a build without the
    #: stability context)
    first_loss: int
    #: ok samples whose equilibrium is already unstable at the Hopf point (no onset type)
    unstable_equilibrium: int
    subcritical: int
    degenerate: int
    #: ok samples whose Hopf point is not reached by continuation from the nominal one
    #: (another Hopf branch; see ``off_nominal_branch``); counted, not excluded
    off_branch: int
    #: continuation steps of that check (0: not checked)
    branch_steps: int
    confidence: float
    interval: tuple[float, float]
    quantiles: dict[str, dict[str, float]]
    quantile_basis: int
    ranking: list[Driver]
    kept: dict[str, np.ndarray] = field(repr=False)
    #: a uniform random subset (at most ``keep_hard``) of the first-loss samples with a
    #: hard onset, columns as ``kept``: the designs to look at first
    hard_samples: dict[str, np.ndarray] = field(repr=False, default_factory=dict)
    #: FORM answer beside the Monte Carlo estimate (None: not asked for or not available)
    reliability: ReliabilityResult | None = None
    #: why there is no FORM answer, when there is none
    reliability_note: str | None = None
    #: uncertain parameters ranked by |dl1/dp * spread| at the nominal design
    sensitivity: list[Sensitivity] = field(default_factory=list)

    @property
    def probability_subcritical(self) -> float:
        """Fraction of first-loss-of-stability samples with a hard (subcritical) onset;
        NaN if there is none."""
        return self.subcritical / self.first_loss if self.first_loss else math.nan

    @property
    def fraction_not_ok(self) -> float:
        return 1.0 - self.ok / self.samples if self.samples else math.nan

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready summary (NaN becomes null)."""
        return {
            "model": self.model,
            "samples": self.samples,
            "requested": self.requested,
            "interrupted": self.interrupted,
            "seed": self.seed,
            "method": self.method,
            "chunk_size": self.chunk_size,
            "uncertainty": self.distributions,
            "fixed": self.fixed,
            "ok": self.ok,
            "first_loss": self.first_loss,
            "unstable_equilibrium": self.unstable_equilibrium,
            "subcritical": self.subcritical,
            "degenerate": self.degenerate,
            "off_branch": self.off_branch,
            "branch_steps": self.branch_steps,
            "probability_subcritical": _jsonable(self.probability_subcritical),
            "confidence": self.confidence,
            "interval": [self.interval[0], self.interval[1]],
            "fraction_not_ok": _jsonable(self.fraction_not_ok),
            "status_counts": dict(self.status_counts),
            "quantiles": {
                k: {lv: _jsonable(v) for lv, v in q.items()} for k, q in self.quantiles.items()
            },
            "quantile_basis": self.quantile_basis,
            "ranking": [d.to_dict() for d in self.ranking],
            "hard_samples_kept": len(next(iter(self.hard_samples.values()), ())),
            **self._form_dict(),
            "sensitivity": [item.to_dict() for item in self.sensitivity],
        }

    def _form_dict(self) -> dict[str, Any]:
        if self.reliability is None:
            return {"reliability_index": None, "design_point": None, "reliability": None}
        details = self.reliability.to_dict()
        return {
            "reliability_index": details.pop("reliability_index"),
            "design_point": details.pop("design_point"),
            "reliability": details,
        }

    def write_hard_samples(self, path: str | Path) -> int:
        """Write ``hard_samples`` to ``path`` (.csv or .npz, the layout of ``save``);
        returns the number of rows written."""
        columns = list(self.hard_samples)
        rows = np.column_stack([self.hard_samples[c] for c in columns])
        store = open_store(path, columns, len(self.uncertain), _status_labels())
        try:
            store.write(rows, np.zeros(len(rows), dtype=np.int32))
        except BaseException:
            store.abort()
            raise
        store.close()
        return len(rows)

    def summary(self) -> str:
        """Human-readable report."""
        lo, hi = self.interval
        pct = f"{100 * self.confidence:g}%"
        lines = [
            f"Robustness of '{self.model}': {self.samples} samples "
            f"({self.method} sampling, seed {self.seed})"
        ]
        if self.interrupted:
            lines.append(
                f"  INTERRUPTED after {self.samples} of {self.requested} samples;"
                " the figures below cover those only"
            )
        lines += [f"  {line}" for line in self.distributions]
        if self.fixed:
            lines.append("  fixed: " + ", ".join(f"{k}={v:g}" for k, v in self.fixed.items()))
        lines.append(
            f"Hard (subcritical) onset: probability {self.probability_subcritical:.6g}"
            f" ({self.subcritical} of {self.first_loss} samples where the Hopf point is the"
            f" first loss of stability; {pct} Wilson interval {lo:.6g} .. {hi:.6g})"
        )
        if self.reliability is not None:
            lines += ["  " + line for line in self.reliability.summary_lines()]
        elif self.reliability_note:
            lines.append(f"  no reliability index: {self.reliability_note}")
        if self.unstable_equilibrium:
            lines.append(
                f"  Hopf point on an already unstable equilibrium (no soft/hard onset, not"
                f" counted above): {self.unstable_equilibrium}"
            )
        if self.degenerate:
            lines.append(f"  degenerate (l1 = 0 exactly): {self.degenerate}")
        kept_hard = len(next(iter(self.hard_samples.values()), ()))
        if kept_hard:
            lines.append(
                f"  hard-onset samples kept for inspection: {kept_hard}"
                + (" (all of them)" if kept_hard == self.subcritical else " (a random subset)")
            )
        if self.branch_steps:
            lines.append(
                f"  Hopf point not on the nominal branch (a continuation from the nominal"
                f" point in {self.branch_steps} steps ends elsewhere; counted above):"
                f" {self.off_branch}"
            )
        not_ok = {k: v for k, v in self.status_counts.items() if k != "ok" and v}
        lines.append(
            f"No usable Hopf point: {self.samples - self.ok} samples"
            + (" (" + ", ".join(f"{k}: {v}" for k, v in not_ok.items()) + ")" if not_ok else "")
        )
        basis = (
            "all ok samples"
            if self.quantile_basis == self.ok
            else f"a random subset of {self.quantile_basis} ok samples"
        )
        lines.append(f"Quantiles (over {basis}):")
        levels = list(next(iter(self.quantiles.values()), {}))
        lines.append("  " + f"{'':<22}" + "".join(f"{lv:>12}" for lv in levels))
        for name, q in self.quantiles.items():
            lines.append("  " + f"{name:<22}" + "".join(f"{v:>12.4g}" for v in q.values()))
        lines.append("What drives l1 (rank regression; + pushes toward hard onset):")
        for d in self.ranking:
            lines.append(f"  {d.name:<20} srrc {d.srrc:+.3f}   spearman {d.spearman:+.3f}")
        if self.sensitivity:
            lines.append(
                "Local sensitivity at the nominal design (exact dl1/dp times the parameter's"
                " spread, dp per unit normal score; + pushes toward hard onset):"
            )
            for item in self.sensitivity:
                lines.append(
                    f"  {item.name:<20} {item.scaled:+.4g}   (dl1/dp {item.derivative:+.4g},"
                    f" spread {item.spread:.4g})"
                )
        lines.append(
            "Caution: a local, near-onset analysis of the model as written; no substitute "
            "for testing and for the codes and licensed practice of the field."
        )
        return "\n".join(lines)


def _jsonable(x: float) -> float | None:
    return None if not math.isfinite(x) else float(x)


def _status_labels() -> dict[int, str]:
    return {int(s): s.label for s in Status}


class _StopFlag:
    stop = False


@contextmanager
def _stop_on_interrupt() -> Iterator[_StopFlag]:
    """First Ctrl-C: finish the current chunk and stop. A second one aborts at once."""
    flag = _StopFlag()
    if threading.current_thread() is not threading.main_thread():
        yield flag
        return

    def handler(signum: int, frame: object) -> None:
        if flag.stop:
            raise KeyboardInterrupt
        flag.stop = True

    previous = signal.signal(signal.SIGINT, handler)
    try:
        yield flag
    finally:
        signal.signal(signal.SIGINT, previous)


def _progress(total: int, enabled: bool | None):
    if enabled is None:
        enabled = sys.stderr.isatty()
    if not enabled:
        return None
    try:
        from tqdm import tqdm
    except ImportError:
        return None
    return tqdm(total=total, unit="sample", unit_scale=True, file=sys.stderr, leave=False)


def _check_count(value: object, what: str, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum:
        raise StudyError(f"{what} must be an integer >= {minimum}; got {value!r}")
    return int(value)


def resolve_seed(seed: int | None) -> int:
    """The seed to use: the given one, or fresh entropy (reported so the run can be repeated)."""
    if seed is None:
        return int(np.random.SeedSequence().entropy)
    return _check_count(seed, "seed", 0)


def fixed_values(fixed: Mapping[str, object] | None) -> dict[str, float]:
    """Check that fixed parameter values are numbers."""
    out: dict[str, float] = {}
    for name, value in (fixed or {}).items():
        if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
            raise StudyError(f"fixed value of '{name}' must be a number; got {value!r}")
        out[str(name)] = float(value)
    return out


def study_setup(
    ev: Any, uncertainty: Mapping[str, object] | None, fixed: Mapping[str, float] | None
) -> tuple[UncertaintySpec, dict[str, float]]:
    """Parse the uncertainty for ``ev`` and check the fixed overrides."""
    fixed = fixed_values(fixed)
    unknown = [k for k in fixed if k not in ev.parameters]
    if unknown:
        raise StudyError(
            f"unknown parameter(s) {', '.join(unknown)}; the model has {', '.join(ev.parameters)}"
        )
    table = ev.model.uncertainty if uncertainty is None else uncertainty
    spec = parse_uncertainty(
        table, {**ev.nominal, **fixed}, parameters=ev.parameters, bifurcation=ev.bifurcation
    )
    return spec, fixed


def output_columns(spec: UncertaintySpec, states: Sequence[str]) -> list[str]:
    """Names of the kept / saved columns: parameters first, then outputs."""
    outputs = [*SCALAR_OUTPUTS, *(f"amplitude_{s}" for s in states)]
    return [f"input_{n}" if n in outputs else n for n in spec.names] + outputs


def _output_block(batch: Any) -> np.ndarray:
    return np.column_stack(
        [batch.l1, batch.critical_value, batch.omega, np.asarray(batch.amplitude, dtype=float)]
    )


def add_counts(counts: np.ndarray, found: np.ndarray) -> np.ndarray:
    """``counts + found`` for per-status counts of different lengths (codes 0..k)."""
    if len(found) > len(counts):
        counts = np.pad(counts, (0, len(found) - len(counts)))
    counts[: len(found)] += found
    return counts


def evaluate_chunk(
    ev: Any,
    spec: UncertaintySpec,
    base: Mapping[str, float],
    seed: int,
    chunk: int,
    m: int,
    method: str,
    threads: int | None,
    branch_steps: int = BRANCH_STEPS,
    buffers: ChunkBuffers | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, dict[str, int]]:
    """Draw and evaluate the ``m`` samples of chunk ``chunk``: keys, block, status, the
    mask of hard onsets, tallies (arrays of their own, also with ``buffers``).

    The tallies count the samples whose Hopf point is a first loss of stability
    (``first_loss``) and, among them, the hard and degenerate onsets, and the ok samples
    whose Hopf point is not on the nominal branch (``off_branch``, see
    :func:`off_nominal_branch`; ``branch_steps`` 0 skips that check); the mask marks
    the hard ones (first loss of stability, subcritical).

    A pure function of its arguments (the stream is keyed by ``(seed, chunk)``), so the
    local loop and a cluster worker compute the same bits. ``buffers`` (made for at least
    ``m`` samples) only change where the batch outputs are written.
    """
    rng = chunk_rng(seed, chunk)
    values = spec.values(draw_scores(rng, m, spec.dimension, method))
    keys = rng.random(m)
    inputs = {**base, **{n: values[:, j] for j, n in enumerate(spec.names)}}
    batch = ev.batch(
        inputs, threads=threads, **({} if buffers is None else {"out": buffers.samples})
    )
    block = np.column_stack([values, _output_block(batch)])
    status = np.array(batch.status)
    crit = np.asarray(batch.criticality)
    first = (status == 0) & first_loss_of(batch)
    hard = first & (crit == Criticality.SUBCRITICAL)
    tallies = {
        "first_loss": int(np.count_nonzero(first)),
        "subcritical": int(np.count_nonzero(hard)),
        "degenerate": int(np.count_nonzero(first & (crit == Criticality.DEGENERATE))),
        "off_branch": int(
            np.count_nonzero(
                off_nominal_branch(
                    ev,
                    spec,
                    base,
                    values,
                    batch,
                    branch_steps,
                    threads,
                    None if buffers is None else buffers.steps,
                )
            )
        ),
    }
    return keys, block, status, hard, tallies


@dataclass(frozen=True)
class ChunkBuffers:
    """Batch outputs kept from chunk to chunk (``Evaluator.batch_buffers``): the samples'
    own solves and the branch check's steps (which read the samples' results while they
    run, so they need buffers of their own). Kept memory is mapped once, fresh arrays on
    every call (a page fault per 4 KiB)."""

    samples: Any
    steps: Any

    @classmethod
    def make(cls, ev: Any, capacity: int) -> ChunkBuffers:
        """Buffers for chunks of up to ``capacity`` samples of ``ev``."""
        return cls(ev.batch_buffers(capacity), ev.batch_buffers(capacity))


def off_nominal_branch(
    ev: Any,
    spec: UncertaintySpec,
    base: Mapping[str, float],
    values: np.ndarray,
    batch: Any,
    steps: int = BRANCH_STEPS,
    threads: int | None = None,
    buffers: Any = None,
) -> np.ndarray:
    """Which ok samples have a Hopf point that is not on the nominal Hopf branch.

    The test: follow the Hopf point from the nominal parameters to each sample's along the
    straight line between them, in ``steps`` equal steps, every step started from the
    previous step's equilibrium and critical value. A sample is on the nominal branch when
    that continuation arrives and meets the Hopf point the sample's own solve found
    (critical value and frequency equal to ``BRANCH_RTOL``); otherwise it is marked (another
    Hopf point, or a branch that ends or turns back between nominal and sample). Nominal
    values are ``base`` where given, else the model's. Without a bifurcation parameter,
    with ``steps`` 0, or when the nominal point has no Hopf point, nothing is marked.
    ``buffers`` (``Evaluator.batch_buffers``, not those of ``batch``) take the steps' outputs.
    """
    ok = np.asarray(batch.status) == Status.OK
    marked = np.zeros(ok.shape, bool)
    if steps <= 0 or ev.bifurcation is None or not ok.any():
        return marked
    centre = np.array([float(base.get(n, ev.nominal[n])) for n in spec.names])
    nominal = ev.batch({**base, **{n: centre[j : j + 1] for j, n in enumerate(spec.names)}})
    if not nominal.ok[0]:
        return marked
    rows = np.flatnonzero(ok)
    # State-major and parameter-major rows: every input column of the steps is contiguous,
    # so batch copies none of them (the same numbers as sample-major arrays).
    eq = np.repeat(np.asarray(nominal.equilibrium, float).reshape(-1, 1), rows.size, axis=1)
    mu0 = np.full(rows.size, float(nominal.critical_value[0]))
    omega = np.full(rows.size, float(nominal.omega[0]))
    arrived = np.ones(rows.size, bool)
    offset = np.ascontiguousarray((values[rows] - centre).T)
    point = np.empty_like(offset)  # written in place by every step: its pages mapped once
    for k in range(1, steps + 1):
        np.add(centre[:, None], np.multiply(offset, k / steps, out=point), out=point)
        guess: dict[str, Any] = {s: eq[i] for i, s in enumerate(ev.states)}
        guess[ev.bifurcation] = mu0
        step = ev.batch(
            {**base, **{n: point[j] for j, n in enumerate(spec.names)}},
            guess=guess,
            threads=threads,
            **({} if buffers is None else {"out": buffers}),
        )
        good = np.asarray(step.ok, bool)
        arrived &= good
        np.copyto(eq, np.asarray(step.equilibrium, float).T, where=good)
        np.copyto(mu0, step.critical_value, where=good)
        np.copyto(omega, step.omega, where=good)
    direct_mu = np.asarray(batch.critical_value)[rows]
    direct_omega = np.asarray(batch.omega)[rows]
    mu_size = np.maximum(np.abs(mu0), np.abs(direct_mu))
    same = (
        arrived
        & (np.abs(mu0 - direct_mu) <= BRANCH_RTOL * mu_size)
        & (np.abs(omega - direct_omega) <= BRANCH_RTOL * np.maximum(omega, direct_omega))
    )
    marked[rows] = ~same
    return marked


def run_robustness(
    ev: Any,
    samples: int,
    *,
    seed: int | None = None,
    uncertainty: Mapping[str, object] | None = None,
    method: str = "random",
    fixed: Mapping[str, float] | None = None,
    threads: int | None = None,
    chunk_size: int = DEFAULT_CHUNK,
    keep: int = DEFAULT_KEEP,
    keep_hard: int = DEFAULT_KEEP_HARD,
    quantile_levels: Sequence[float] = DEFAULT_LEVELS,
    confidence: float = 0.95,
    progress: bool | None = None,
    save: str | Path | None = None,
    client: Any = None,
    branch_steps: int = BRANCH_STEPS,
    reliability: bool = True,
) -> RobustnessResult:
    """Monte Carlo over the uncertain parameters of a compiled model.

    ``uncertainty`` defaults to the model's ``[uncertainty]`` table; ``fixed``
    overrides nominal values of other parameters (and re-centres defaults such as
    a normal's mean). The bifurcation parameter's value only seeds the search for
    the critical value. ``progress`` None shows a bar only on a terminal. Ctrl-C
    stops after the current chunk and returns what was evaluated
    (``interrupted`` is then True). ``save`` (.csv or .npz) writes every sample;
    ``keep_hard`` hard-onset samples (a uniform random subset) come back in any case,
    as ``hard_samples``.
    ``client`` (a ``distributed.Client``) runs the chunks on a Dask cluster with the
    same result, bit for bit; ``save`` is then not available (only summaries travel).
    ``branch_steps`` sets the continuation that tells whether each sample's Hopf point is
    on the nominal branch (:func:`off_nominal_branch`; it costs ``branch_steps`` more
    evaluations per sample; 0 skips it).
    ``reliability`` adds the FORM reliability index and the local sensitivity ranking
    (models with a bifurcation parameter; :mod:`lyacomp.studies.reliability`).
    """
    samples = _check_count(samples, "samples", 1)
    chunk_size = _check_count(chunk_size, "chunk_size", 1)
    keep = _check_count(keep, "keep", 0)
    keep_hard = _check_count(keep_hard, "keep_hard", 0)
    branch_steps = _check_count(branch_steps, "branch_steps", 0)
    if method not in METHODS:
        raise StudyError(f"sampling method must be one of {', '.join(METHODS)}; got {method!r}")
    levels = [float(q) for q in quantile_levels]
    if not all(0.0 < q < 1.0 for q in levels):
        raise StudyError(f"quantile levels must lie strictly between 0 and 1; got {levels}")
    if not 0.0 < confidence < 1.0:
        raise StudyError(f"confidence must lie strictly between 0 and 1; got {confidence}")
    if client is not None and save is not None:
        raise StudyError(
            "save= is not available on a cluster (only summaries travel back); run locally"
        )
    seed = resolve_seed(seed)
    spec, fixed = study_setup(ev, uncertainty, fixed)
    columns = output_columns(spec, ev.states)
    labels = _status_labels()
    # fixed values of uncertain parameters re-centre their distributions: they are the
    # nominal point of the branch check, and every draw overrides them in the inputs
    base = dict(fixed)

    reservoir = _Reservoir(min(keep, samples), len(columns))
    hard_reservoir = _Reservoir(min(keep_hard, samples), len(columns))
    counts = np.zeros(max(labels) + 1, dtype=np.int64)
    done = subcritical = degenerate = n_first = off_branch = 0
    store = open_store(save, columns, spec.dimension, labels) if save is not None else None
    bar = _progress(samples, progress)
    stopped = False
    buffers = ChunkBuffers.make(ev, min(chunk_size, samples)) if client is None else None
    try:
        with _stop_on_interrupt() as flag:
            if client is not None:
                from lyacomp.studies.cluster import robustness_on_cluster

                done, counts, n_first, subcritical, degenerate, off_branch = robustness_on_cluster(
                    client,
                    ev,
                    spec,
                    base,
                    seed,
                    samples,
                    chunk_size,
                    method,
                    threads,
                    counts,
                    reservoir,
                    hard_reservoir,
                    bar,
                    flag,
                    branch_steps,
                )
            # with a client the cluster did every chunk and this loop has none left
            local_starts = range(0, samples if client is None else 0, chunk_size)
            for chunk, start in enumerate(local_starts):
                if flag.stop:
                    stopped = True
                    break
                m = min(chunk_size, samples - start)
                keys, block, status, hard, tallies = evaluate_chunk(
                    ev, spec, base, seed, chunk, m, method, threads, branch_steps, buffers
                )
                ok = status == 0
                if store is not None:
                    store.write(block, status)
                counts = add_counts(counts, np.bincount(status))
                n_first += tallies["first_loss"]
                subcritical += tallies["subcritical"]
                degenerate += tallies["degenerate"]
                off_branch += tallies["off_branch"]
                if reservoir.capacity:
                    reservoir.offer(keys[ok], block[ok])
                if hard_reservoir.capacity:
                    hard_reservoir.offer(keys[hard], block[hard])
                done += m
                if bar is not None:
                    bar.update(m)
            stopped = stopped or (flag.stop and done < samples)
        if store is not None:
            store.close()
            store = None
    finally:
        if bar is not None:
            bar.close()
        if store is not None:
            store.abort()

    kept_rows = reservoir.contents()
    kept = {name: kept_rows[:, j].copy() for j, name in enumerate(columns)}
    hard_rows = hard_reservoir.contents()
    hard_samples = {name: hard_rows[:, j].copy() for j, name in enumerate(columns)}
    n_ok = int(counts[0])
    quantiles = _quantiles(kept, columns[spec.dimension :], levels)
    ranking = rank_drivers(kept_rows[:, : spec.dimension], kept["l1"], spec.names)
    form, note, sensitivity = _first_order(ev, spec, fixed) if reliability else (None, None, [])
    return RobustnessResult(
        model=ev.model.name,
        samples=done,
        requested=samples,
        interrupted=stopped,
        seed=seed,
        method=method,
        chunk_size=chunk_size,
        uncertain=spec.names,
        distributions=spec.describe(),
        fixed=fixed,
        status_counts={labels.get(i, f"status_{i}"): int(c) for i, c in enumerate(counts)},
        ok=n_ok,
        first_loss=n_first,
        unstable_equilibrium=n_ok - n_first,
        subcritical=subcritical,
        degenerate=degenerate,
        off_branch=off_branch,
        branch_steps=branch_steps,
        confidence=confidence,
        interval=wilson_interval(subcritical, n_first, confidence),
        quantiles=quantiles,
        quantile_basis=len(kept_rows),
        ranking=ranking,
        kept=kept,
        hard_samples=hard_samples,
        reliability=form,
        reliability_note=note,
        sensitivity=sensitivity,
    )


#: Why a delay model gets no FORM answer: FORM needs exact derivatives, which delay
#: kernels do not compute yet (the Monte Carlo estimate does not need them).
DELAY_FORM_NOTE = (
    "FORM needs exact derivatives, not available for models with delays yet; the Monte Carlo"
    " estimate above stands alone"
)


def _first_order(
    ev: Any, spec: UncertaintySpec, fixed: Mapping[str, float]
) -> tuple[ReliabilityResult | None, str | None, list[Sensitivity]]:
    """FORM index and local sensitivities, or the reason there are none."""
    if ev.model.delays:
        return None, DELAY_FORM_NOTE, []
    try:
        form = reliability_index(ev, spec, fixed)
    except StudyError as exc:
        return None, str(exc), []
    return form, None, local_sensitivities(ev, spec, fixed)


def _quantiles(
    kept: Mapping[str, np.ndarray], outputs: Sequence[str], levels: Sequence[float]
) -> dict[str, dict[str, float]]:
    out: dict[str, dict[str, float]] = {}
    for name in outputs:
        values = kept[name]
        if len(values):
            qs = np.quantile(values, levels)
        else:
            qs = np.full(len(levels), math.nan)
        out[name] = {f"{lv:g}": float(v) for lv, v in zip(levels, qs, strict=True)}
    return out
