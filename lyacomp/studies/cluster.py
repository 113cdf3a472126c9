"""Running robustness studies and maps on a Dask cluster (the optional ``cluster`` extra).

The evaluator travels with each task as its pickle (model plus build settings); each
worker compiles it into its own cache or loads it from there, under the cache's per-key
lock. Robustness chunks draw from streams keyed by ``(seed, chunk index)`` and map blocks
evaluate every grid point on its own, so the answer does not depend on the number of
workers, on threads or on the order in which chunks finish. Only summaries travel back:
per chunk the status counts, the hard / degenerate counts, the ok rows whose random
keys can still enter the kept subset (at most ``keep`` per chunk) and likewise the
hard-onset rows (at most ``keep_hard``); the client holds one subset of each, so its
memory does not grow with the sample count.
"""

from __future__ import annotations

import hashlib
import math
import pickle
import sys
import threading
from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from typing import Any

import numpy as np

from lyacomp.errors import CompilerNotFoundError, StudyError

INSTALL_HINT = "install it with: pip install 'lyacomp[cluster]'"

#: Dask recomputes a chunk whose task raised this many times (a worker that died is
#: handled by the scheduler on top of this).
RETRIES = 3

#: Rows of a map evaluated per task are chosen to give about this many grid points.
MAP_BLOCK_POINTS = 1 << 14

_evaluators: dict[str, Any] = {}
_evaluators_lock = threading.Lock()


def require_distributed() -> Any:
    """The ``distributed`` module, or a one-line StudyError saying how to install it."""
    try:
        import distributed
    except ImportError:
        raise StudyError(
            f"running on a cluster needs dask and distributed; {INSTALL_HINT}"
        ) from None
    return distributed


@contextmanager
def open_client(scheduler: str | None, workers: int | None) -> Iterator[Any]:
    """A client for ``scheduler``, or for a LocalCluster of ``workers`` processes, or None."""
    if scheduler is None and workers is None:
        yield None
        return
    if scheduler is not None and workers is not None:
        raise StudyError("give either --scheduler ADDRESS or --workers N, not both")
    distributed = require_distributed()
    if scheduler is not None:
        try:
            client = distributed.Client(scheduler, timeout="20s")
        except (OSError, TimeoutError) as exc:
            raise StudyError(f"cannot reach the Dask scheduler at {scheduler}: {exc}") from None
        with client:
            yield client
        return
    if isinstance(workers, bool) or not isinstance(workers, int) or workers < 1:
        raise StudyError(f"--workers must be an integer >= 1; got {workers!r}")
    with (
        distributed.LocalCluster(
            n_workers=workers, threads_per_worker=1, processes=True, dashboard_address=":0"
        ) as cluster,
        distributed.Client(cluster) as client,
    ):
        yield client


def add_cluster_args(parser: Any) -> None:
    """``--scheduler`` and ``--workers`` (the CLI's way to pass a Dask client)."""
    group = parser.add_mutually_exclusive_group()
    group.add_argument(
        "--scheduler",
        metavar="ADDRESS",
        default=None,
        help="run on the Dask cluster at ADDRESS (e.g. tcp://host:8786); same answer, bit"
        " for bit (needs the cluster extra)",
    )
    group.add_argument(
        "--workers",
        type=int,
        default=None,
        metavar="N",
        help="start a local Dask cluster of N worker processes (needs the cluster extra)",
    )


def _ship(ev: Any) -> tuple[bytes, str]:
    """The pickled evaluator (about a kilobyte: model plus settings) and its digest.

    It rides along with every task rather than being scattered once, so a worker that
    dies takes no shared data with it and a restarted one needs nothing from the others.
    """
    payload = pickle.dumps(ev)
    return payload, hashlib.sha256(payload).hexdigest()


def _worker_evaluator(payload: bytes, digest: str) -> Any:
    """The evaluator on this worker: built (or loaded from the cache) once per process."""
    ev = _evaluators.get(digest)
    if ev is not None:
        return ev
    with _evaluators_lock:
        ev = _evaluators.get(digest)
        if ev is None:
            try:
                ev = pickle.loads(payload)
            except CompilerNotFoundError as exc:
                raise CompilerNotFoundError(f"on Dask worker {_worker_name()}: {exc}") from None
            _evaluators[digest] = ev
    return ev


def _worker_threads(threads: int | None) -> int | None:
    """Batch threads on a worker: by default its Dask thread count, not every core of a
    machine it may share with other worker processes."""
    if threads is not None:
        return threads
    try:
        from distributed import get_worker

        return int(get_worker().state.nthreads)
    except (ImportError, ValueError, AttributeError):
        return None


def _worker_name() -> str:
    try:
        from distributed import get_worker

        return str(get_worker().address)
    except (ImportError, ValueError):
        return "(not a Dask worker)"


def _robustness_task(
    payload: bytes,
    digest: str,
    spec: Any,
    base: Mapping[str, float],
    seed: int,
    chunk: int,
    m: int,
    method: str,
    threads: int | None,
    keep: int,
    keep_hard: int,
    branch_steps: int,
) -> dict[str, Any]:
    from lyacomp.studies.robustness import evaluate_chunk

    ev = _worker_evaluator(payload, digest)
    threads = _worker_threads(threads)
    keys, block, status, hard, tallies = evaluate_chunk(
        ev, spec, base, seed, chunk, m, method, threads, branch_steps
    )
    ok_keys, ok_rows = _smallest_keys(keys[status == 0], block[status == 0], keep)
    hard_keys, hard_rows = _smallest_keys(keys[hard], block[hard], keep_hard)
    return {
        "m": m,
        "counts": np.bincount(status),
        **tallies,
        "keys": ok_keys,
        "rows": ok_rows,
        "hard_keys": hard_keys,
        "hard_rows": hard_rows,
    }


def _smallest_keys(keys: np.ndarray, rows: np.ndarray, keep: int) -> tuple[np.ndarray, np.ndarray]:
    # only a chunk's smallest keys can be among the smallest overall
    if len(keys) <= keep:
        return keys, rows
    chosen = np.argpartition(keys, keep - 1)[:keep] if keep else np.arange(0)
    return keys[chosen], rows[chosen]


def _in_flight(client: Any) -> int:
    threads = sum(client.nthreads().values()) or 1
    return 4 * threads


def _wait_some(distributed: Any, pending: set, timeout: float) -> set:
    try:
        done, _ = distributed.wait(list(pending), timeout=timeout, return_when="FIRST_COMPLETED")
    except TimeoutError:
        return set()
    return set(done)


def robustness_on_cluster(
    client: Any,
    ev: Any,
    spec: Any,
    base: Mapping[str, float],
    seed: int,
    samples: int,
    chunk_size: int,
    method: str,
    threads: int | None,
    counts: np.ndarray,
    reservoir: Any,
    hard_reservoir: Any,
    bar: Any,
    flag: Any,
    branch_steps: int,
) -> tuple[int, np.ndarray, int, int, int, int]:
    """Run every chunk of a robustness study on the cluster and merge the summaries.

    Adds to a copy of ``counts`` and offers the kept rows to ``reservoir`` (the hard-onset
    ones also to ``hard_reservoir``); returns
    (samples done, status counts, first-loss-of-stability samples, and among those the
    subcritical and degenerate ones, and the samples off the nominal branch). When
    ``flag.stop`` is set (Ctrl-C) the outstanding futures are cancelled and the chunks
    finished so far make the partial result.
    """
    from lyacomp.studies.robustness import add_counts

    distributed = require_distributed()
    payload, digest = _ship(ev)
    starts = iter(enumerate(range(0, samples, chunk_size)))
    pending: set = set()
    counts = counts.copy()
    done = n_first = subcritical = degenerate = off_branch = 0

    def submit_more() -> None:
        for chunk, start in starts:
            m = min(chunk_size, samples - start)
            pending.add(
                client.submit(
                    _robustness_task,
                    payload,
                    digest,
                    spec,
                    base,
                    seed,
                    chunk,
                    m,
                    method,
                    threads,
                    reservoir.capacity,
                    hard_reservoir.capacity,
                    branch_steps,
                    retries=RETRIES,
                    pure=False,
                )
            )
            if len(pending) >= limit:
                return

    limit = _in_flight(client)
    try:
        submit_more()
        while pending:
            if flag.stop:
                break
            finished = _wait_some(distributed, pending, 0.25)
            for future in finished:
                pending.discard(future)
                part = future.result()
                counts = add_counts(counts, part["counts"])
                n_first += part["first_loss"]
                subcritical += part["subcritical"]
                degenerate += part["degenerate"]
                off_branch += part["off_branch"]
                if reservoir.capacity:
                    reservoir.offer(part["keys"], part["rows"])
                if hard_reservoir.capacity:
                    hard_reservoir.offer(part["hard_keys"], part["hard_rows"])
                done += part["m"]
                if bar is not None:
                    bar.update(part["m"])
            if not flag.stop:
                submit_more()
    finally:
        if pending:
            client.cancel(list(pending))
    return done, counts, n_first, subcritical, degenerate, off_branch


def _map_task(
    payload: bytes,
    digest: str,
    fixed: Mapping[str, float],
    x: Any,
    y: Any,
    first: int,
    stop: int,
    threads: int | None,
) -> dict[str, np.ndarray]:
    from lyacomp.studies.maps import map_rows

    ev = _worker_evaluator(payload, digest)
    return map_rows(ev, fixed, x, y, first, stop, _worker_threads(threads))


def map_on_cluster(
    client: Any,
    ev: Any,
    fixed: Mapping[str, float],
    x: Any,
    y: Any,
    threads: int | None,
) -> dict[str, np.ndarray]:
    """Evaluate a map grid in blocks of rows on the cluster; the grids as ``map_rows``."""
    payload, digest = _ship(ev)
    rows = max(1, min(math.ceil(MAP_BLOCK_POINTS / x.n), math.ceil(y.n / _in_flight(client))))
    futures = [
        client.submit(
            _map_task,
            payload,
            digest,
            fixed,
            x,
            y,
            first,
            min(first + rows, y.n),
            threads,
            retries=RETRIES,
            pure=False,
        )
        for first in range(0, y.n, rows)
    ]
    distributed = require_distributed()
    bar = _rows_bar(y.n)
    parts: list[Any] = [None] * len(futures)
    index = {future.key: k for k, future in enumerate(futures)}
    try:
        for future in distributed.as_completed(futures):
            parts[index[future.key]] = future.result()
            if bar is not None:
                bar.update(len(parts[index[future.key]]["status"]))
    finally:
        client.cancel(futures)
        if bar is not None:
            bar.close()
    return {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}


def _rows_bar(rows: int) -> Any:
    # progress from the futures, on a terminal only (like the local map and robustness)
    if not sys.stderr.isatty():
        return None
    try:
        from tqdm import tqdm
    except ImportError:
        return None
    return tqdm(total=rows, desc="map rows (cluster)", unit="row", file=sys.stderr, leave=False)


#: Samples evaluated per task by :func:`batch_on_cluster`.
BATCH_BLOCK = 1 << 14


def _batch_task(
    payload: bytes,
    digest: str,
    inputs: Mapping[str, Any],
    fields: tuple[str, ...],
    threads: int | None,
) -> dict[str, np.ndarray]:
    ev = _worker_evaluator(payload, digest)
    batch = ev.batch(inputs, threads=_worker_threads(threads))
    return {f: np.asarray(getattr(batch, f)) for f in fields}


def batch_on_cluster(
    client: Any,
    ev: Any,
    inputs: Mapping[str, Any],
    fields: tuple[str, ...],
    threads: int | None = None,
) -> dict[str, np.ndarray]:
    """``ev.batch(inputs)`` split into blocks of samples evaluated on the cluster; the
    requested result ``fields`` (e.g. ``("l1", "status")``) as arrays, equal bit for bit
    to the local call (every sample is evaluated on its own)."""
    arrays = {k: np.asarray(v, dtype=float) for k, v in inputs.items()}
    sizes = {a.size for a in arrays.values() if a.ndim}
    if len(sizes) != 1:
        raise StudyError("batch_on_cluster needs at least one input array, all of one length")
    (count,) = sizes
    payload, digest = _ship(ev)
    futures = [
        client.submit(
            _batch_task,
            payload,
            digest,
            {
                k: (a[start : start + BATCH_BLOCK] if a.ndim else float(a))
                for k, a in arrays.items()
            },
            fields,
            threads,
            retries=RETRIES,
            pure=False,
        )
        for start in range(0, count, BATCH_BLOCK)
    ]
    try:
        parts = client.gather(futures)
    finally:
        client.cancel(futures)
    return {f: np.concatenate([part[f] for part in parts]) for f in fields}
