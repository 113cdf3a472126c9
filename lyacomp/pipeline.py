"""The compiler driver: parse -> derive -> lower -> render -> build -> load."""

from __future__ import annotations

import dataclasses
import hashlib
import logging
import tempfile
import time
from functools import lru_cache
from pathlib import Path

from .build import (
    Entry,
    Toolchain,
    build_extension,
    cache_key,
    check_entry,
    entry_dir,
    forget_probe,
    install_entry,
    key_lock,
    load_extension,
    new_build_dir,
    toolchain,
)
from .codegen import CSources, lower, lower_sensitivity, render, templates_digest_input
from .codegen.lower_higher import lower_higher
from .config import BuildConfig
from .derive import derive, derive_sensitivity
from .derive.higher import derive_higher
from .errors import BuildError, LyacompError
from .model import Model, load_model
from .runtime import Evaluator, Tolerances
from .runtime.evaluator import PREFIX, register_rebuild

log = logging.getLogger("lyacomp")
#: Progress notes (the CLI shows them on a terminal): a cold build takes seconds.
progress_log = logging.getLogger("lyacomp.progress")

PACKAGE_ROOT = Path(__file__).resolve().parent
GENERATOR_SOURCES = (
    "model",
    "derive",
    "codegen",
    "build",
    "status.py",
    "config.py",
    "pipeline.py",
    "runtime/evaluator.py",
)
"""The parts of the package that shape the generated code (their bytes enter the key)."""


@lru_cache(maxsize=4)
def generator_digest_input(root: Path) -> bytes:
    """SHA-256 of every generator module under ``root``, file by file (for the cache key)."""
    digest = hashlib.sha256()
    for part in GENERATOR_SOURCES:
        path = root / part
        files = sorted(path.rglob("*.py")) if path.is_dir() else [path]
        for file in files:
            name = file.relative_to(root).as_posix().encode()
            data = file.read_bytes()
            digest.update(len(name).to_bytes(8, "little") + name)
            digest.update(len(data).to_bytes(8, "little") + data)
    return digest.digest()


def generate(
    model: Model,
    key: str = "0" * 64,
    prefix: str = PREFIX,
    header_name: str = "model.h",
    derivatives: bool = False,
) -> CSources:
    """Derive and render the C sources of a model (no compilation); ``derivatives`` adds
    the entry points with exact parameter derivatives (models with a bifurcation parameter;
    their symbolic work grows quickly with the model, so it is built only when asked for)."""
    derived = derive(model.symbolic())
    lowered = lower(derived)
    higher = lower_higher(derive_higher(derived))
    # Exact parameter derivatives follow the Hopf point, so they need a bifurcation parameter.
    sensitivity = None
    if derivatives and model.bifurcation is not None:
        sensitivity = lower_sensitivity(derived, derive_sensitivity(derived))
    return render(
        model,
        lowered,
        prefix=prefix,
        key=key,
        header_name=header_name,
        higher=higher,
        sensitivity=sensitivity,
    )


def model_key(model: Model, config: BuildConfig, derivatives: bool = False) -> str:
    """Cache key: model, generator code, templates, compiler and flags, version, Python ABI
    (and whether the derivative entry points are in)."""
    return _key(model, toolchain(config), derivatives)


def _key(model: Model, tc: Toolchain, derivatives: bool = False) -> str:
    return cache_key(
        model.canonical(),
        "with derivative entry points" if derivatives else "plain",
        generator_digest_input(PACKAGE_ROOT),
        templates_digest_input(),
        tc.identity(),
    )


def compile_model(
    model: Model | str | Path,
    *,
    config: BuildConfig | None = None,
    tolerances: Tolerances | None = None,
    derivatives: bool = False,
) -> Evaluator:
    """Compile a model (or a model file) into an :class:`Evaluator`, using the cache.

    ``derivatives=True`` builds the exact-derivative entry points right away; otherwise
    the first call that asks for derivatives builds them (a second cached library).

    A damaged cache entry (torn metadata, a library whose size or SHA-256 differs from
    the install record, a file where a folder belongs) is rebuilt with one warning.
    """
    if not isinstance(model, Model):
        model = load_model(model)
    config = config or BuildConfig.from_environment()
    tc = toolchain(config)
    try:
        key, module = _build_or_load(model, config, tc, derivatives)
    except BuildError:
        if not tc.remembered:
            raise
        # Remembered probe flags that no longer work (a changed compiler or an edited
        # record) must not fail every later build: probe once more and retry.
        log.warning("the build failed with remembered compiler flags; probing the compiler again")
        forget_probe(tc, config)
        key, module = _build_or_load(model, config, toolchain(config), derivatives)
    return Evaluator(model, module, key, tolerances or Tolerances(), config)


def _build_or_load(
    model: Model, config: BuildConfig, tc: Toolchain, derivatives: bool = False
) -> tuple[str, object]:
    key = _key(model, tc, derivatives)
    start = time.perf_counter()
    entry, _problem = check_entry(config.cache_dir, key)
    if entry is None:
        with key_lock(config.cache_dir, key, config.lock_timeout, model.name):
            entry, problem = check_entry(config.cache_dir, key)  # another process may be done
            if entry is None:
                progress_log.info("compiling %r (first use; a few seconds) ...", model.name)
                if problem is not None:
                    log.warning(
                        "cache entry %s is damaged (%s); rebuilding it",
                        entry_dir(config.cache_dir, key),
                        problem,
                    )
                # plain builds keep the four-argument call (tests stand in for _build)
                entry = (
                    _build(model, config, tc, key, derivatives)
                    if derivatives
                    else _build(model, config, tc, key)
                )
                log.info("compiled %r in %.2f s", model.name, time.perf_counter() - start)
    else:
        log.info("loaded %r from cache", model.name)
    return key, load_extension(entry, lambda: _scratch_dir(config, key))


def _build(
    model: Model, config: BuildConfig, tc: Toolchain, key: str, derivatives: bool = False
) -> Entry:
    sources = generate(model, key, derivatives=derivatives)
    build_dir = new_build_dir(config.cache_dir, key)
    meta = build_extension(sources, tc, build_dir, key)
    meta["model"] = model.name
    entry = install_entry(build_dir, config.cache_dir, key, meta, config.keep_build)
    if config.keep_build:
        log.info("build directory kept at %s", build_dir)
    return entry


def _scratch_dir(config: BuildConfig, key: str) -> Path:
    """A private folder to load a library from: in the cache (known to allow executable
    mappings, since builds run there), else in the system's temporary directory."""
    try:
        return new_build_dir(config.cache_dir, key, prefix="load-")
    except (OSError, LyacompError):
        return Path(tempfile.mkdtemp(prefix="lyacomp-load-"))


def _rebuild(
    model: Model, tolerances: Tolerances, sender: BuildConfig | None, state_guess: dict
) -> Evaluator:
    """Rebuild an unpickled evaluator with the receiving process's settings.

    Where the cache lives, which compiler runs, the lock timeout and keep-build are the
    receiver's (from its environment); the sender's choices that shape the binary and so
    possibly the numbers (extra flags, -march=native, OpenMP) travel with the evaluator.
    """
    config = BuildConfig.from_environment()
    if isinstance(sender, BuildConfig):
        config = dataclasses.replace(
            config, extra_flags=sender.extra_flags, native=sender.native, openmp=sender.openmp
        )
    ev = compile_model(model, config=config, tolerances=tolerances)
    return ev.with_guess(**state_guess)


def _derivative_build(
    model: Model, tolerances: Tolerances, config: BuildConfig, state_guess: dict
) -> Evaluator:
    """The same model with the exact-derivative entry points (built on first use)."""
    ev = compile_model(model, config=config, tolerances=tolerances, derivatives=True)
    return ev.with_guess(**state_guess)


register_rebuild(_rebuild, _derivative_build)
