"""The on-disk cache of compiled evaluators: keys, per-key locks, checked entries.

Layout of a cache root::

    LYACOMP_CACHE          marker: this directory is a lyacomp cache (``--clear`` needs it)
    <key[:2]>/<key>/       one entry: the shared library, the generated C, ``meta.json``
    locks/<key>.lock       kernel locks (flock) of builds in progress
    tmp/                   private build and load directories
    toolchains/            remembered compiler probes

``meta.json`` is written last and records the size and SHA-256 of the library: an entry
is used only after both match, so a torn, truncated or corrupt entry is rebuilt instead
of being loaded. Entries appear by ``os.replace`` of a finished temporary directory.
"""

from __future__ import annotations

import errno
import hashlib
import json
import logging
import os
import re
import shutil
import sys
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import cffi

from .. import _version
from ..errors import CacheLockTimeout, LyacompError

log = logging.getLogger("lyacomp")

META_NAME = "meta.json"
MARKER_NAME = "LYACOMP_CACHE"
_MARKER_TEXT = "This directory is a cache of lyacomp builds; `lyacomp cache --clear` empties it.\n"
STALE_SECONDS = 24 * 3600
"""Temporary folders older than this are left over from killed builds and are swept."""

_KEY = re.compile(r"[0-9a-f]{64}")
_TMP_NAME = re.compile(r"(?:load-)?[0-9a-f]{16}-\d+-\d+")
_LIBRARY_NAME = re.compile(r"[A-Za-z0-9_.-]+")
_REQUIRED = {"module": str, "library": str, "library_size": int, "library_sha256": str}


def cache_key(*parts: str | bytes) -> str:
    """SHA-256 over everything that shapes the binary."""
    digest = hashlib.sha256()
    for part in (
        _version.__version__,
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


@dataclass(frozen=True)
class Entry:
    """A checked cache entry: its metadata and the library bytes that matched them."""

    meta: dict[str, Any]
    library: bytes


def check_entry(cache_dir: Path, key: str) -> tuple[Entry | None, str | None]:
    """The entry of ``key`` if it is intact; else None and what is wrong (None: absent)."""
    entry = entry_dir(cache_dir, key)
    if not os.path.lexists(entry):
        return None, None
    if not entry.is_dir() or entry.is_symlink():
        return None, "the entry path is not a directory"
    try:
        meta = json.loads((entry / META_NAME).read_text(encoding="utf-8"))
    except FileNotFoundError:
        return None, "the metadata file is missing (an unfinished build)"
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        return None, f"the metadata file is unreadable ({type(exc).__name__})"
    if not isinstance(meta, dict):
        return None, "the metadata file does not hold a JSON object"
    for name, kind in _REQUIRED.items():
        if not isinstance(meta.get(name), kind) or isinstance(meta.get(name), bool):
            return None, f"the metadata lacks a valid {name!r}"
    if not _LIBRARY_NAME.fullmatch(meta["library"]):
        return None, "the metadata names an invalid library file"
    try:
        # Read once and load exactly these bytes later: a file checked and then read
        # again could change in between (a truncated library mapped by dlopen is SIGBUS).
        data = (entry / meta["library"]).read_bytes()
    except OSError as exc:
        return None, f"the library is unreadable ({type(exc).__name__})"
    if len(data) != meta["library_size"]:
        return None, f"the library has {len(data)} bytes, {meta['library_size']} were installed"
    if hashlib.sha256(data).hexdigest() != meta["library_sha256"]:
        return None, "the library's SHA-256 differs from the one recorded at install"
    return Entry(meta, data), None


def mark_root(cache_dir: Path) -> None:
    """Create the cache root with its marker (idempotent)."""
    _ensure_dir(cache_dir)
    marker = cache_dir / MARKER_NAME
    if not marker.is_file():
        try:
            marker.write_text(_MARKER_TEXT, encoding="utf-8")
        except OSError:
            pass  # a read-only cache can still serve its entries


def _ensure_dir(path: Path) -> None:
    try:
        path.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise LyacompError(
            f"cannot create the cache directory {path}: {exc}; set "
            "LYACOMP_CACHE_DIR to a writable directory"
        ) from None


@contextmanager
def key_lock(cache_dir: Path, key: str, timeout: float, model_name: str = "") -> Iterator[None]:
    """Hold the kernel lock (flock on an open file) of one cache key.

    The kernel drops the lock when its holder exits, however it exits, so a lock file
    left on disk is harmless and is never to be deleted by hand.
    """
    lock_dir = cache_dir / "locks"
    path = lock_dir / f"{key}.lock"
    what = f"model {model_name!r}" if model_name else "this model"
    try:
        mark_root(cache_dir)
        _ensure_dir(lock_dir)
        fh = open(path, "a+")  # noqa: SIM115 - closed in finally
    except (OSError, LyacompError) as exc:
        reason = exc.strerror if isinstance(exc, OSError) else "not writable"
        raise LyacompError(
            f"the cache {cache_dir} has no usable build of {what} and cannot take a new one "
            f"({reason}); set LYACOMP_CACHE_DIR to a writable directory"
        ) from None
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
                            f"{what} waited {timeout:g} s for another process that is "
                            "building it right now (the lock is released as soon as that "
                            "process finishes or exits); wait and retry, or raise "
                            "LYACOMP_LOCK_TIMEOUT (seconds)"
                        ) from None
                    time.sleep(0.05)
        yield
    finally:
        fh.close()  # closing releases the flock


def _sweep_stale(tmp_root: Path) -> None:
    """Remove temporary folders of builds killed more than a day ago."""
    cutoff = time.time() - STALE_SECONDS
    try:
        children = list(tmp_root.iterdir())
    except OSError:
        return
    for child in children:
        try:
            if _TMP_NAME.fullmatch(child.name) and child.lstat().st_mtime < cutoff:
                if child.is_dir() and not child.is_symlink():
                    shutil.rmtree(child, ignore_errors=True)
                else:
                    child.unlink()
        except OSError:
            pass  # a concurrent sweep got there first


def new_build_dir(cache_dir: Path, key: str, prefix: str = "") -> Path:
    """A private temporary directory on the cache's file system (for an atomic rename)."""
    tmp_root = cache_dir / "tmp"
    mark_root(cache_dir)
    _ensure_dir(tmp_root)
    _sweep_stale(tmp_root)
    path = tmp_root / f"{prefix}{key[:16]}-{os.getpid()}-{time.monotonic_ns()}"
    path.mkdir()
    return path


def _remove(path: Path) -> None:
    if path.is_dir() and not path.is_symlink():
        shutil.rmtree(path, ignore_errors=True)
    elif os.path.lexists(path):
        path.unlink()


def install_entry(
    build_dir: Path, cache_dir: Path, key: str, meta: dict[str, Any], keep_build: bool
) -> Entry:
    """Record the library's size and hash, write the metadata last, move the build in place.

    Call with the key lock held. Returns the entry as built (the bytes that were hashed).
    """
    data = (build_dir / meta["library"]).read_bytes()
    meta = {**meta, "library_size": len(data), "library_sha256": hashlib.sha256(data).hexdigest()}
    (build_dir / META_NAME).write_text(json.dumps(meta, indent=2, sort_keys=True), encoding="utf-8")
    target = entry_dir(cache_dir, key)
    _ensure_dir(target.parent)
    for attempt in range(3):
        _remove(target)  # a damaged or unfinished leftover
        try:
            if keep_build:
                shutil.copytree(build_dir, target)
            else:
                os.replace(build_dir, target)
            break
        except OSError as exc:  # something else wrote the path in between: try again
            if attempt == 2:
                raise LyacompError(f"cannot install the build at {target}: {exc}") from None
    return Entry(meta, data)


def clear_cache(cache_dir: Path) -> int:
    """Remove what lyacomp created in ``cache_dir``; returns the number of builds removed.

    Refuses a path that is not a marked lyacomp cache; files lyacomp did not create are
    left in place.
    """
    if not os.path.lexists(cache_dir):
        return 0
    if not cache_dir.is_dir():
        raise LyacompError(f"{cache_dir} is not a directory; nothing was removed")
    if not (cache_dir / MARKER_NAME).is_file():
        raise LyacompError(
            f"{cache_dir} is not a lyacomp cache (it has no {MARKER_NAME} marker file); "
            "nothing was removed. Check LYACOMP_CACHE_DIR"
        )
    removed = 0
    for shard in cache_dir.iterdir():
        if not re.fullmatch(r"[0-9a-f]{2}", shard.name) or not shard.is_dir():
            continue
        for entry in shard.iterdir():
            if _KEY.fullmatch(entry.name) and entry.name.startswith(shard.name):
                _remove(entry)
                removed += 1
        _rmdir_if_empty(shard)
    patterns = {
        "locks": r"[0-9a-f]{64}\.lock",
        "toolchains": r"[0-9a-f]{32}(\.json|\.vecmath-[0-9a-f]{16}|\.\d+\.tmp)",
    }
    for folder, pattern in patterns.items():
        for item in _children(cache_dir / folder):
            if re.fullmatch(pattern, item.name) and item.is_file():
                item.unlink()
        _rmdir_if_empty(cache_dir / folder)
    for item in _children(cache_dir / "tmp"):
        if _TMP_NAME.fullmatch(item.name):
            _remove(item)
    _rmdir_if_empty(cache_dir / "tmp")
    (cache_dir / MARKER_NAME).unlink()
    _rmdir_if_empty(cache_dir)
    return removed


def _children(path: Path) -> list[Path]:
    return list(path.iterdir()) if path.is_dir() and not path.is_symlink() else []


def _rmdir_if_empty(path: Path) -> None:
    try:
        path.rmdir()
    except OSError:
        pass  # not empty (files lyacomp did not create) or already gone
