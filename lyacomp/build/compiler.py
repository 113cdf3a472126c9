"""Finding the C compiler, probing what it supports, and running it."""

from __future__ import annotations

import hashlib
import json
import os
import platform
import shlex
import shutil
import subprocess
import sys
import sysconfig
import tempfile
import threading
import time
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path

from ..config import BASE_FLAGS, BuildConfig
from ..errors import BuildError, CompilerNotFoundError

_INSTALL_HINT = (
    "lyacomp compiles each model to C at run time and needs a C compiler. Install one: "
    "Debian/Ubuntu: 'sudo apt-get install gcc'; Fedora/RHEL: 'sudo dnf install gcc'; "
    "macOS: 'xcode-select --install'; conda: 'conda install -c conda-forge c-compiler'. "
    "Or point LYACOMP_CC (or CC) at a compiler."
)


@dataclass(frozen=True)
class Toolchain:
    """A working compiler and the exact flags lyacomp uses with it."""

    command: tuple[str, ...]
    version: str
    compile_flags: tuple[str, ...]
    link_flags: tuple[str, ...]
    openmp: bool
    remembered: bool = field(default=False, compare=False)
    """The optional flags came from a probe record in the cache (not probed now)."""

    def identity(self) -> str:
        """Everything about the toolchain that changes the binary (for the cache key)."""
        return "\n".join(
            [
                shlex.join(self.command),
                self.version,
                shlex.join(self.compile_flags),
                shlex.join(self.link_flags),
                _cpu_identity(),
            ]
        )


def _cpu_identity() -> str:
    text = platform.machine()
    try:
        with open("/proc/cpuinfo", encoding="utf-8", errors="replace") as fh:
            for line in fh:
                if line.startswith(("flags", "Features", "model name")):
                    text += "|" + line.strip()
                if text.count("|") >= 2:
                    break
    except OSError:
        pass
    return hashlib.sha256(text.encode()).hexdigest()[:16]


def _find_command(config: BuildConfig) -> tuple[str, ...]:
    if config.compiler:
        parts = tuple(shlex.split(config.compiler))
        if not parts or shutil.which(parts[0]) is None:
            raise CompilerNotFoundError(
                f"the C compiler {config.compiler!r} (from LYACOMP_CC, "
                f"CC or the build settings) was not found. {_INSTALL_HINT}"
            )
        return parts
    for name in ("cc", "gcc", "clang"):
        path = shutil.which(name)
        if path:
            return (path,)
    raise CompilerNotFoundError(f"no C compiler (cc, gcc or clang) on PATH. {_INSTALL_HINT}")


def _run(
    cmd: list[str], cwd: str | None = None, timeout: float = 600
) -> subprocess.CompletedProcess:
    return subprocess.run(cmd, cwd=cwd, capture_output=True, text=True, timeout=timeout)


def _probe(command: tuple[str, ...], flags: list[str], source: str) -> bool:
    with tempfile.TemporaryDirectory(prefix="lyacomp-probe-") as tmp:
        src = Path(tmp) / "probe.c"
        src.write_text(source)
        try:
            out = _run(
                [*command, *flags, str(src), "-o", str(Path(tmp) / "probe.so")], cwd=tmp, timeout=60
            )
        except (OSError, subprocess.TimeoutExpired):
            return False
        return out.returncode == 0


def _probe_flags(command: tuple[str, ...], config: BuildConfig) -> tuple[list[str], bool]:
    """Which optional flags the compiler accepts: -march=native, -fopenmp, -fno-split-loops.

    -Werror: a compiler that only warns about a flag it ignores does not get it."""
    compile_flags = list(BASE_FLAGS)
    shared = _shared_flags()
    test_src = "int lyacomp_probe(void) { return 0; }\n"
    omp_src = (
        "#include <omp.h>\nint lyacomp_probe(void) { int s = 0;\n"
        "#pragma omp parallel for reduction(+:s)\n"
        "for (int i = 0; i < 4; i++) s += omp_get_thread_num() >= 0;\n return s; }\n"
    )
    wanted = _wanted_flags(config)
    src = omp_src if config.openmp else test_src
    if _probe(command, [*compile_flags, *wanted, "-Werror", *shared], src):
        return compile_flags + wanted, config.openmp  # the usual case: one compiler run
    if not _probe(command, [*compile_flags, *shared], test_src):
        raise CompilerNotFoundError(
            f"the C compiler {command[0]} cannot build a shared library "
            f"with {shlex.join(compile_flags + shared)}. {_INSTALL_HINT}"
        )
    if config.native and _probe(command, [*compile_flags, "-march=native", *shared], test_src):
        compile_flags.append("-march=native")
    openmp = False
    if config.openmp:
        openmp = _probe(command, [*compile_flags, "-fopenmp", *shared], omp_src)
    if openmp:
        compile_flags.append("-fopenmp")
    if _probe(command, [*compile_flags, NO_SPLIT_LOOPS, "-Werror", *shared], test_src):
        compile_flags.append(NO_SPLIT_LOOPS)
    return compile_flags, openmp


def _wanted_flags(config: BuildConfig) -> list[str]:
    """The optional flags asked for (a compiler that takes them all is the usual case)."""
    wanted = (["-march=native"] if config.native else []) + (["-fopenmp"] if config.openmp else [])
    return [*wanted, NO_SPLIT_LOOPS]


def _shared_flags() -> list[str]:
    return ["-shared", "-undefined", "dynamic_lookup"] if sys.platform == "darwin" else ["-shared"]


NO_SPLIT_LOOPS = "-fno-split-loops"
"""GCC's loop splitting at -O3 copies the loops of the lane blocks (a loop over the lanes
with a test of the lane index becomes two loops): about a quarter of the compiler's time
on the benchmark models M2 and M3 (CPU seconds measured with gcc 12), no change measured
in the per-sample times (benchmarks/run.py --quick). Probed: other compilers may lack it."""

_OPTIONAL_FLAGS = ("-march=native", "-fopenmp", NO_SPLIT_LOOPS)


def _probe_record(command: tuple[str, ...], version: str, config: BuildConfig) -> Path:
    """Where the probe results of this compiler and these settings are remembered."""
    path = shutil.which(command[0]) or command[0]
    try:
        stat = os.stat(path)
        stamp = f"{os.path.realpath(path)}|{stat.st_size}|{stat.st_mtime_ns}"
    except OSError:
        stamp = path
    ident = "|".join(
        [
            *command,
            stamp,
            version,
            *BASE_FLAGS,
            *_OPTIONAL_FLAGS,  # a record from before a flag was added is probed again
            str(config.native),
            str(config.openmp),
            _cpu_identity(),
            sys.platform,
        ]
    )
    return (
        config.cache_dir
        / "toolchains"
        / (hashlib.sha256(ident.encode()).hexdigest()[:32] + ".json")
    )


def _valid_record(data: object, config: BuildConfig) -> tuple[list[str], bool] | None:
    """The flags of a probe record if it is one a probe could have written, else None."""
    if not isinstance(data, dict) or not isinstance(data.get("openmp"), bool):
        return None
    flags = data.get("compile_flags")
    if not isinstance(flags, list) or tuple(flags[: len(BASE_FLAGS)]) != BASE_FLAGS:
        return None
    optional = flags[len(BASE_FLAGS) :]
    allowed = [
        flag
        for flag, wanted in zip(_OPTIONAL_FLAGS, (config.native, config.openmp, True))
        if wanted and flag in optional
    ]
    if optional != allowed or data["openmp"] != ("-fopenmp" in optional):
        return None
    return list(flags), data["openmp"]


def _remembered_probe(
    command: tuple[str, ...], version: str, config: BuildConfig
) -> tuple[list[str], bool, bool]:
    """Probe results, remembered in the cache: probing costs a few compiler runs.

    Returns the flags, whether OpenMP works, and whether they came from the record.
    A record that a probe could not have written (edited, damaged) is probed again.
    """
    record = _probe_record(command, version, config)
    try:
        found = _valid_record(json.loads(record.read_text(encoding="utf-8")), config)
    except (OSError, UnicodeDecodeError, ValueError):
        found = None
    if found is not None:
        return found[0], found[1], True
    flags, openmp = _probe_flags(command, config)
    try:
        record.parent.mkdir(parents=True, exist_ok=True)
        tmp = record.with_suffix(f".{os.getpid()}.tmp")
        tmp.write_text(json.dumps({"compile_flags": flags, "openmp": openmp}), encoding="utf-8")
        os.replace(tmp, record)
    except OSError:
        pass  # an unwritable cache only costs the probes next time
    return flags, openmp, False


def _probe_vector_math(command: tuple[str, ...], flags: list[str]) -> bool:
    """Whether glibc's vector math links for the lane width of ``flags`` and agrees with libm."""
    from ..codegen.render import vector_math_probe_source  # codegen imports build's users

    with tempfile.TemporaryDirectory(prefix="lyacomp-probe-") as tmp:
        src, exe = Path(tmp) / "vecmath.c", Path(tmp) / "vecmath"
        src.write_text(vector_math_probe_source())
        try:
            built = _run(
                [*command, *flags, "-DLYACOMP_MVEC", str(src), "-o", str(exe), "-lm", "-lmvec"],
                cwd=tmp,
                timeout=60,
            )
            return built.returncode == 0 and _run([str(exe)], cwd=tmp, timeout=30).returncode == 0
        except (OSError, subprocess.TimeoutExpired):
            return False


def _vector_math_record(
    command: tuple[str, ...], version: str, flags: list[str], config: BuildConfig
) -> tuple[Path, bool | None]:
    """Where the vector math probe for ``flags`` is remembered, and its result if it is."""
    digest = hashlib.sha256("\n".join(flags).encode()).hexdigest()[:16]
    # Not *.json: the flag probe's record stays the one JSON file per toolchain.
    record = _probe_record(command, version, config).with_suffix(f".vecmath-{digest}")
    try:
        found = json.loads(record.read_text(encoding="utf-8")).get("vector_math")
    except (OSError, UnicodeDecodeError, ValueError, AttributeError):
        found = None
    return record, found if isinstance(found, bool) else None


def _remembered_vector_math(
    command: tuple[str, ...],
    version: str,
    flags: list[str],
    config: BuildConfig,
    ahead: tuple[list[str], Future[bool]] | None = None,
) -> bool:
    """The vector math probe, remembered next to the flag probe (it depends on the flags).

    ``ahead``: flags and the probe already running with them (used if they are ``flags``).
    """
    if sys.platform != "linux":
        return False  # libmvec is glibc's
    record, found = _vector_math_record(command, version, flags, config)
    if found is not None:
        return found
    if ahead is not None and ahead[0] == flags:
        works = ahead[1].result()
    else:
        works = _probe_vector_math(command, flags)
    try:
        record.parent.mkdir(parents=True, exist_ok=True)
        tmp = record.with_suffix(f".{os.getpid()}.tmp")
        tmp.write_text(json.dumps({"vector_math": works}), encoding="utf-8")
        os.replace(tmp, record)
    except OSError:
        pass  # an unwritable cache only costs the probe next time
    return works


def _vector_math_ahead(
    command: tuple[str, ...], version: str, config: BuildConfig, pool: ThreadPoolExecutor
) -> tuple[list[str], Future[bool]] | None:
    """Start the vector math probe with the flags the flag probe usually finds, so that
    the two probes of a first build run side by side (None: nothing to probe)."""
    if not config.vector_math or sys.platform != "linux":
        return None
    flags = [*BASE_FLAGS, *_wanted_flags(config)]
    if config.lanes:
        flags.append(f"-DLYACOMP_LANES={config.lanes}")
    if _vector_math_record(command, version, flags, config)[1] is not None:
        return None
    return flags, pool.submit(_probe_vector_math, command, flags)


def forget_probe(tc: Toolchain, config: BuildConfig) -> None:
    """Drop the remembered probe of ``tc`` so that the next :func:`toolchain` probes again."""
    try:
        _probe_record(tc.command, tc.version, config).unlink()
    except OSError:
        pass  # already gone, or a read-only cache: the probe runs again anyway
    toolchain.cache_clear()


@lru_cache(maxsize=8)
def toolchain(config: BuildConfig) -> Toolchain:
    """Find and check the compiler once per process and configuration."""
    command = _find_command(config)
    try:
        out = _run([*command, "--version"], timeout=30)
    except (OSError, subprocess.TimeoutExpired) as exc:
        raise CompilerNotFoundError(
            f"the C compiler {command[0]} does not run: {exc}. {_INSTALL_HINT}"
        ) from None
    text = (out.stdout or out.stderr).strip()
    version = text.splitlines()[0] if text else "unknown"
    with ThreadPoolExecutor(max_workers=1) as pool:
        ahead = _vector_math_ahead(command, version, config, pool)
        compile_flags, openmp, remembered = _remembered_probe(command, version, config)
        if config.lanes:
            compile_flags.append(f"-DLYACOMP_LANES={config.lanes}")
        vector_math = config.vector_math and _remembered_vector_math(
            command, version, compile_flags, config, ahead
        )
    if vector_math:
        compile_flags.append("-DLYACOMP_MVEC")
    compile_flags.extend(config.extra_flags)
    link_flags = [*_shared_flags(), "-lm"] + (["-lmvec"] if vector_math else [])
    link_flags += ["-fopenmp"] if openmp else []
    return Toolchain(command, version, tuple(compile_flags), tuple(link_flags), openmp, remembered)


def python_include_dirs() -> list[str]:
    paths = sysconfig.get_paths()
    return sorted({paths["include"], paths.get("platinclude", paths["include"])})


def wrapper_flags(tc: Toolchain) -> tuple[str, ...]:
    """The flags of the cffi wrapper: those of the model at -O1.

    The wrapper only converts arguments and calls the model's entry points, so -O3 buys
    it nothing but compile time; flags the user added (LYACOMP_CFLAGS) still come last.
    """
    return tuple("-O1" if flag == "-O3" else flag for flag in tc.compile_flags)


@dataclass(frozen=True)
class Unit:
    """One translation unit of a library: its source, its object file and its flags."""

    source: Path
    output: Path
    flags: tuple[str, ...]


def _failure(cmd: list[str], source: Path, returncode: int, text: str) -> BuildError:
    return BuildError(
        f"the C compiler rejected the generated code for {source.name} "
        f"(exit {returncode}); source kept at {source}\n"
        f"command: {shlex.join(cmd)}\n{text[-4000:]}",
        shlex.join(cmd),
        text,
        str(source),
    )


def _start(cmd: list[str], source: Path) -> subprocess.Popen:
    try:
        return subprocess.Popen(
            cmd,
            cwd=str(source.parent),
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
        )
    except OSError as exc:
        raise CompilerNotFoundError(f"cannot run {cmd[0]}: {exc}. {_INSTALL_HINT}") from None


def _finish(proc: subprocess.Popen, cmd: list[str], source: Path, deadline: float) -> None:
    try:
        stdout, stderr = proc.communicate(timeout=max(deadline - time.monotonic(), 0.0))
    except subprocess.TimeoutExpired:
        proc.kill()
        proc.communicate()
        raise BuildError(
            f"the C compiler took more than {_TIMEOUT:g} s on {source}",
            shlex.join(cmd),
            "",
            str(source),
        ) from None
    if proc.returncode != 0:
        raise _failure(cmd, source, proc.returncode, (stderr + stdout).strip())


_TIMEOUT = 600.0


def compile_jobs() -> int:
    """How many compiler runs of one library may run at once: the usable cores."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):  # pragma: no cover - platforms without affinity
        return max(1, os.cpu_count() or 1)


class Compilation:
    """Compiler runs of the units of one library, run side by side, at most ``jobs`` at once.

    :meth:`add` queues a unit and returns at once (so Python can prepare the next unit
    meanwhile); units start in the order added. :meth:`link` waits for all of them and
    links the library. The first unit to fail stops the others; :meth:`link` then raises
    its error and links nothing.
    """

    def __init__(self, tc: Toolchain, jobs: int | None = None) -> None:
        self._tc = tc
        self._objects: list[Path] = []
        self._futures: list[Future[None]] = []
        self._procs: list[subprocess.Popen] = []
        self._lock = threading.Lock()
        self._failure: BaseException | None = None
        self._closed = False
        self._pool = ThreadPoolExecutor(max_workers=max(1, jobs or compile_jobs()))
        self._start = time.perf_counter()
        self._deadline = time.monotonic() + _TIMEOUT

    def add(self, unit: Unit) -> None:
        """Queue compiling ``unit`` to its object file."""
        cmd = [
            *self._tc.command,
            *unit.flags,
            "-c",
            str(unit.source),
            "-o",
            str(unit.output),
        ]
        self._objects.append(unit.output)
        self._futures.append(self._pool.submit(self._run, cmd, unit.source))

    def _run(self, cmd: list[str], source: Path) -> None:
        with self._lock:
            if self._failure is not None or self._closed:
                return  # another unit failed, or the build was abandoned: not started
            try:
                proc = _start(cmd, source)
            except CompilerNotFoundError as exc:
                self._fail(exc)
                return
            self._procs.append(proc)
        try:
            _finish(proc, cmd, source, self._deadline)
        except (BuildError, OSError) as exc:
            with self._lock:
                self._fail(exc)  # a unit killed because another failed is not reported

    def _fail(self, exc: BaseException) -> None:
        """Record the first failure and kill the runs still going (call with the lock)."""
        if self._failure is None:
            self._failure = exc
        for proc in self._procs:
            if proc.poll() is None:
                proc.kill()

    def close(self) -> None:
        """Stop the runs still going or queued (none are left after :meth:`link`) and
        release the workers."""
        with self._lock:
            self._closed = True
            for proc in self._procs:
                if proc.poll() is None:
                    proc.kill()
        self._pool.shutdown(wait=True)

    def link(self, output: Path) -> float:
        """Wait for every unit, link them into the shared library ``output``; returns the
        seconds since the first unit was added."""
        try:
            for future in self._futures:
                future.result()
        except BaseException as exc:  # interrupted while waiting: stop the compilers
            with self._lock:
                self._fail(exc)
            raise
        finally:
            self._pool.shutdown(wait=True)
        if self._failure is not None:
            raise self._failure
        cmd = [
            *self._tc.command,
            *self._tc.compile_flags,
            *map(str, self._objects),
            "-o",
            str(output),
            *self._tc.link_flags,
        ]
        proc = _start(cmd, self._objects[0])
        _finish(proc, cmd, self._objects[0], self._deadline)
        for obj in self._objects:  # the cache entry keeps the sources and the library
            obj.unlink(missing_ok=True)
        return time.perf_counter() - self._start


def shared_library_suffix() -> str:
    return sysconfig.get_config_var("EXT_SUFFIX") or (".pyd" if os.name == "nt" else ".so")
