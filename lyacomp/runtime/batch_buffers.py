"""Output arrays of ``Evaluator.batch`` that a caller keeps from one call to the next."""

from __future__ import annotations

import threading
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

import numpy as np

from ..errors import EvaluationError
from .derivatives import SCALAR_QUANTITIES

#: The per-sample outputs of the batch driver and their dtypes (``lyc_batch_out``).
SAMPLE_FIELDS = (
    ("status", np.int32),
    ("criticality", np.int8),
    ("cycle_side", np.int8),
    ("unstable_count", np.int32),
    ("stable_side", np.int8),
    ("l1", np.float64),
    ("omega", np.float64),
    ("period", np.float64),
    ("critical_value", np.float64),
    ("transversality", np.float64),
)
#: The per-sample, per-state outputs (state-major in C: ``[j * count + i]``).
STATE_FIELDS = ("equilibrium", "amplitude")
#: The operating-point search's outputs.
OPERATING_FIELDS = (("loss_value", np.float64), ("search_steps", np.int32))


class BatchBuffers:
    """Output arrays for batches of up to ``capacity`` samples, for ``ev.batch(..., out=)``.

    Made by :meth:`Evaluator.batch_buffers`. A call with ``out=buffers`` writes every output
    of its ``count <= capacity`` samples into the first ``count`` places of these arrays
    instead of fresh ones, so a loop over chunks writes into memory already mapped: fresh
    arrays cost one page fault (and a page zeroed by the kernel) per 4 KiB of output, about
    a third of the time of a light model. The numbers are the same, bit for bit.

    The arrays of the result such a call returns are views on these buffers: the next call
    with the same buffers overwrites them (copy what must outlive it). One call at a time
    may use a set of buffers (a second, concurrent one is refused): give each thread its own.
    """

    __slots__ = (
        "capacity",
        "states",
        "parameters",
        "derivatives",
        "_flat",
        "_der",
        "_owners",
        "_busy",
    )

    def __init__(
        self,
        capacity: int,
        states: tuple[str, ...],
        parameters: tuple[str, ...],
        *,
        derivatives: bool = False,
        operating: bool = True,
    ):
        self.capacity = capacity
        self.states = states
        self.parameters = parameters
        self.derivatives = derivatives
        n, m = len(states), len(parameters)
        try:
            flat = {name: np.empty(capacity, dtype) for name, dtype in SAMPLE_FIELDS}
            flat.update({name: np.empty(n * capacity) for name in STATE_FIELDS})
            if operating:
                flat.update({name: np.empty(capacity, dtype) for name, dtype in OPERATING_FIELDS})
            der = None
            if derivatives:
                der = {"status": np.empty(capacity, np.int32)}
                der.update({q: np.empty(m * capacity) for q in SCALAR_QUANTITIES})
                der["equilibrium"] = np.empty(m * n * capacity)
        except MemoryError:
            raise EvaluationError(
                f"cannot allocate output buffers for {capacity} samples; ask for fewer"
                " (a chunk of 10^5 to 10^6 samples is plenty to keep the cores busy)"
            ) from None
        self._flat: dict[str, np.ndarray] = flat
        self._der: dict[str, np.ndarray] | None = der
        self._owners = {id(a) for a in self.arrays()}
        self._busy = threading.Lock()

    def __repr__(self) -> str:
        extra = ", derivatives" if self.derivatives else ""
        return f"<lyacomp.BatchBuffers: {self.capacity} samples, {len(self.states)} states{extra}>"

    def arrays(self) -> Iterator[np.ndarray]:
        """Every array of the buffers."""
        yield from self._flat.values()
        if self._der is not None:
            yield from self._der.values()

    def overlaps(self, array: np.ndarray) -> bool:
        """Whether ``array`` may share memory with the buffers (for an input of a call)."""
        root = array
        while isinstance(root.base, np.ndarray):
            root = root.base
        if root.base is None:
            # memory numpy allocated: the array owning it tells (a view on a result of an
            # earlier call leads to one of these arrays), in a set lookup
            return id(root) in self._owners
        # memory of another object (a memory map, a memoryview): compare the address ranges
        return any(np.may_share_memory(array, b) for b in self.arrays())

    def check(self, evaluator: Any, count: int, derivatives: bool) -> None:
        """EvaluationError unless a batch of ``count`` samples of ``evaluator`` fits."""
        if (self.states, self.parameters) != (evaluator.states, evaluator.parameters):
            raise EvaluationError(
                f"out= buffers were made for states {list(self.states)} and parameters"
                f" {list(self.parameters)}; this model has states {list(evaluator.states)}"
                f" and parameters {list(evaluator.parameters)}: make them with this"
                " evaluator's batch_buffers(capacity)"
            )
        if count > self.capacity:
            raise EvaluationError(
                f"out= buffers hold {self.capacity} samples, this batch has {count}: make them"
                f" with batch_buffers({count}) or more, or split the batch into chunks"
            )
        if derivatives and self._der is None:
            raise EvaluationError(
                "derivatives=True needs out= buffers with room for the derivatives: make them"
                " with batch_buffers(capacity, derivatives=True)"
            )

    @contextmanager
    def claimed(self) -> Iterator[BatchBuffers]:
        """Hold the buffers for one call; EvaluationError if another call holds them."""
        if not self._busy.acquire(blocking=False):
            raise EvaluationError(
                "these out= buffers are in use by another batch call (another thread): give"
                " each thread its own ev.batch_buffers(capacity)"
            )
        try:
            yield self
        finally:
            self._busy.release()

    def outputs(self, count: int) -> dict[str, np.ndarray]:
        """The driver's outputs for ``count`` samples: 1-d, the state fields ``(states, count)``."""
        out = {name: self._flat[name][:count] for name, _ in SAMPLE_FIELDS}
        n = len(self.states)
        out.update({name: self._flat[name][: n * count].reshape(n, count) for name in STATE_FIELDS})
        return out

    def operating(self, count: int) -> tuple[np.ndarray, np.ndarray]:
        """The operating search's loss values and step counts for ``count`` samples."""
        return self._flat["loss_value"][:count], self._flat["search_steps"][:count]

    def derivative_outputs(self, count: int) -> dict[str, np.ndarray]:
        """The derivative outputs for ``count`` samples, parameter-major as C fills them."""
        der = self._der or {}  # check() has refused buffers without them
        m, n = len(self.parameters), len(self.states)
        out = {"status": der["status"][:count]}
        out.update({q: der[q][: m * count].reshape(m, count) for q in SCALAR_QUANTITIES})
        out["equilibrium"] = der["equilibrium"][: m * n * count].reshape(m, n, count)
        return out
