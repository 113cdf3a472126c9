"""The on-disk cache of compiled evaluators: keys, per-key locks, atomic installs.

Layout: ``<cache>/<key[:2]>/<key>/`` holds the shared library, the generated C and
``meta.json``. ``meta.json`` is written last: an entry without it is unfinished
(a crash mid-build) and is rebuilt. Entries appear by ``os.replace`` of a finished
temporary directory, so a reader never sees a half-written library.
"""

from __future__ import annotations

import errno
import hashlib
import json
import os
import shutil
import sys
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import cffi

from .._version import __version__
from ..errors import CacheLockTimeout, LyacompError

META_NAME = "meta.json"


def cache_key(*parts: str | bytes) -> str:
    """SHA-256 over everything that shapes the binary."""
    digest = hashlib.sha256()
    for part in (
        __version__,
        cffi.__version__,
        sys.implementation.cache_tag or "",
        sys.version,
        *parts,
    ):
        data = part.encode() if isinstance(part, str) else part
        digest.update(len(data).to_bytes(8, "little"))
        digest.update(data)
    return digest.hexdigest()


def entry_dir(cache_dir: Path, key: str) -> Path:
    return cache_dir / key[:2] / key


def read_entry(cache_dir: Path, key: str) -> dict[str, Any] | None:
    """Metadata of a finished entry, or None."""
    meta = entry_dir(cache_dir, key) / META_NAME
    try:
        return json.loads(meta.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError):
        return None  # absent, unreadable or torn: (re)build


def _ensure_dir(path: Path) -> None:
    try:
        path.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise LyacompError(
            f"cannot create the cache directory {path}: {exc}; set "
            "LYACOMP_CACHE_DIR to a writable directory"
        ) from None


@contextmanager
def key_lock(cache_dir: Path, key: str, timeout: float) -> Iterator[None]:
    """Hold the lock of one cache key (other keys build in parallel)."""
    lock_dir = cache_dir / "locks"
    _ensure_dir(lock_dir)
    path = lock_dir / f"{key}.lock"
    fh = open(path, "a+")  # noqa: SIM115 - closed in finally
    try:
        import fcntl
    except ImportError:  # pragma: no cover - non-POSIX: no cross-process lock
        fcntl = None
    try:
        if fcntl is not None:
            deadline = time.monotonic() + timeout
            while True:
                try:
                    fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
                    break
                except OSError as exc:
                    if exc.errno not in (errno.EAGAIN, errno.EACCES, errno.EWOULDBLOCK):
                        raise
                    if time.monotonic() > deadline:
                        raise CacheLockTimeout(
                            f"waited {timeout:.0f} s for another process building the same "
                            f"model (lock file {path}); if no such process runs, delete the "
                            "lock file, or raise LYACOMP_LOCK_TIMEOUT"
                        ) from None
                    time.sleep(0.05)
        yield
    finally:
        fh.close()  # closing releases the flock


def new_build_dir(cache_dir: Path, key: str) -> Path:
    """A private temporary directory on the cache's file system (for an atomic rename)."""
    tmp_root = cache_dir / "tmp"
    _ensure_dir(tmp_root)
    path = tmp_root / f"{key[:16]}-{os.getpid()}-{time.monotonic_ns()}"
    path.mkdir()
    return path


def install_entry(
    build_dir: Path, cache_dir: Path, key: str, meta: dict[str, Any], keep_build: bool
) -> Path:
    """Write the metadata (commit marker) and move the finished build into place."""
    (build_dir / META_NAME).write_text(json.dumps(meta, indent=2, sort_keys=True), encoding="utf-8")
    target = entry_dir(cache_dir, key)
    _ensure_dir(target.parent)
    if target.exists():  # an unfinished leftover (no metadata): replace it
        shutil.rmtree(target, ignore_errors=True)
    if keep_build:
        shutil.copytree(build_dir, target)
    else:
        os.replace(build_dir, target)
    return target
