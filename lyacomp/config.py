"""Build settings: one frozen dataclass, filled from the environment.

- LYACOMP_CACHE_DIR: where compiled evaluators are kept
  (default $XDG_CACHE_HOME/lyacomp, else ~/.cache/lyacomp).
- LYACOMP_CC: the C compiler (default: CC, else cc, gcc or clang on PATH).
- LYACOMP_CFLAGS: extra compiler flags, appended (default: none).
- LYACOMP_NATIVE: 1 tunes for this CPU with -march=native, 0 is portable (default 1).
- LYACOMP_OPENMP: 1 uses OpenMP threads in batch calls when supported, 0 not (default 1).
- LYACOMP_KEEP_BUILD: 1 keeps the temporary build directory for debugging (default 0).
- LYACOMP_LOCK_TIMEOUT: seconds to wait for another process's build (default 600).
- LYACOMP_LANES: samples per SIMD lane block, 1, 2, 4 or 8 (default: from the target).
- LYACOMP_VECTOR_MATH: 1 uses glibc's vector math in lane blocks when a build probe
  finds it agreeing with libm, 0 calls libm lane by lane (default 1).

Every setting that changes the generated binary is part of the cache key. A pickled
evaluator is rebuilt with the receiver's cache directory, compiler, lock timeout and
keep-build setting; the sender's extra flags, native and OpenMP choices travel with it.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path

from .errors import LyacompError

BASE_FLAGS = ("-std=c99", "-O3", "-fPIC", "-fno-math-errno", "-fcx-limited-range")
"""Flags always used. -fno-math-errno lets sqrt inline; -fcx-limited-range makes complex
multiply and divide plain arithmetic. NaN and infinity handling stays on (statuses
rely on it), so no -ffast-math."""


def _flag(name: str, default: bool) -> bool:
    value = os.environ.get(name)
    if value is None or value.strip() == "":
        return default
    if value.strip() in ("1", "true", "yes", "on"):
        return True
    if value.strip() in ("0", "false", "no", "off"):
        return False
    raise LyacompError(f"environment variable {name}={value!r}: use 1 or 0")


def default_cache_dir() -> Path:
    """Per-user cache directory following the XDG convention."""
    explicit = os.environ.get("LYACOMP_CACHE_DIR")
    if explicit:
        return Path(explicit).expanduser()
    xdg = os.environ.get("XDG_CACHE_HOME")
    base = Path(xdg).expanduser() if xdg else Path.home() / ".cache"
    return base / "lyacomp"


@dataclass(frozen=True)
class BuildConfig:
    """How generated C is compiled and where it is kept."""

    cache_dir: Path = field(default_factory=default_cache_dir)
    """Root of the cache of compiled evaluators."""
    compiler: str | None = None
    """Compiler command; None: LYACOMP_CC, CC, then cc/gcc/clang on PATH."""
    extra_flags: tuple[str, ...] = ()
    """Flags appended after the defaults (LYACOMP_CFLAGS)."""
    native: bool = True
    """Tune for the CPU of this machine (-march=native)."""
    openmp: bool = True
    """Use OpenMP threads in batch calls when the compiler supports them."""
    keep_build: bool = False
    """Keep the temporary build directory (for debugging the generated code)."""
    lock_timeout: float = 600.0
    """Seconds to wait for another process building the same model."""
    lanes: int = 0
    """Samples per lane block of the SIMD stage; 0 picks it from the target (8 AVX-512,
    4 AVX2, 2 SSE2/NEON, 1 otherwise); 1 or 2 force a narrower one (for testing)."""
    vector_math: bool = True
    """Let lane blocks call glibc's vector math when a build probe finds it."""

    def __post_init__(self) -> None:
        if self.lanes not in (0, 1, 2, 4, 8):
            raise LyacompError(f"lanes={self.lanes!r}: use 0 (from the target), 1, 2, 4 or 8")

    @classmethod
    def from_environment(cls) -> BuildConfig:
        """The defaults, overridden by the LYACOMP_* environment variables."""
        try:
            timeout = float(os.environ.get("LYACOMP_LOCK_TIMEOUT", "600"))
        except ValueError:
            raise LyacompError("LYACOMP_LOCK_TIMEOUT must be a number of seconds") from None
        lanes = os.environ.get("LYACOMP_LANES", "").strip() or "0"
        if lanes not in ("0", "1", "2", "4", "8"):
            raise LyacompError(f"environment variable LYACOMP_LANES={lanes!r}: use 1, 2, 4 or 8")
        return cls(
            cache_dir=default_cache_dir(),
            compiler=os.environ.get("LYACOMP_CC") or os.environ.get("CC") or None,
            extra_flags=tuple(os.environ.get("LYACOMP_CFLAGS", "").split()),
            native=_flag("LYACOMP_NATIVE", True),
            openmp=_flag("LYACOMP_OPENMP", True),
            keep_build=_flag("LYACOMP_KEEP_BUILD", False),
            lock_timeout=timeout,
            lanes=int(lanes),
            vector_math=_flag("LYACOMP_VECTOR_MATH", True),
        )
