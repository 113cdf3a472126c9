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
from .runtime.evaluator import EXTENDED, PLAIN, PREFIX, VARIANTS, register_rebuild

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
    variant: str = EXTENDED,
) -> CSources:
    """Derive and render the C sources of a model (no compilation).

    ``variant`` chooses the stages: ``"plain"`` (the Hopf point, l1, the batch drivers and
    the operating-point search: what a first ``compile`` builds, kept small so that it
    compiles fast) or ``"extended"`` (everything: also the second Lyapunov coefficient,
    the degenerate point and, for models with a bifurcation parameter, the exact parameter
    derivatives; the evaluator builds it on first use, ``lyacomp emit`` writes it).
    """
    if variant not in VARIANTS:
        raise LyacompError(f"unknown variant {variant!r}; choose one of {list(VARIANTS)}")
    derived = derive(model.symbolic())
    lowered = lower(derived)
    higher = sensitivity = None
    # The fourth and fifth derivatives (l2) and the parameter derivatives are most of the
    # symbolic and C compiler work of a small model, so the plain variant leaves them out.
    if variant == EXTENDED and not model.delays:  # delay kernels have neither stage yet
        higher = lower_higher(derive_higher(derived))
        # Exact parameter derivatives follow the Hopf point: they need a bifurcation parameter.
        if model.bifurcation is not None:
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


def model_key(model: Model, config: BuildConfig, variant: str = PLAIN) -> str:
    """Cache key: model, variant, generator code, templates, compiler and flags, version,
    Python ABI."""
    return _key(model, toolchain(config), variant)


_VARIANT_KEY_TEXT = {
    PLAIN: "plain",
    EXTENDED: "extended: l2, degenerate point, derivative entry points",
}


def _key(model: Model, tc: Toolchain, variant: str = PLAIN) -> str:
    return cache_key(
        model.canonical(),
        _VARIANT_KEY_TEXT[variant],
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

    The first build holds the plain variant (see :func:`generate`); the first call that
    asks for l2, the degenerate point or derivatives builds the extended one (a second
    cached library). ``derivatives=True`` builds the extended variant right away.

    A damaged cache entry (torn metadata, a library whose size or SHA-256 differs from
    the install record, a file where a folder belongs) is rebuilt with one warning.
    """
    return _compile(model, config, tolerances, EXTENDED if derivatives else PLAIN)


def _compile(
    model: Model | str | Path,
    config: BuildConfig | None,
    tolerances: Tolerances | None,
    variant: str,
) -> Evaluator:
    if not isinstance(model, Model):
        model = load_model(model)
    config = config or BuildConfig.from_environment()
    tc = toolchain(config)
    try:
        key, module = _build_or_load(model, config, tc, variant)
    except BuildError:
        if not tc.remembered:
            raise
        # Remembered probe flags that no longer work (a changed compiler or an edited
        # record) must not fail every later build: probe once more and retry.
        log.warning("the build failed with remembered compiler flags; probing the compiler again")
        forget_probe(tc, config)
        key, module = _build_or_load(model, config, toolchain(config), variant)
    return Evaluator(model, module, key, tolerances or Tolerances(), config)


def _build_or_load(
    model: Model, config: BuildConfig, tc: Toolchain, variant: str = PLAIN
) -> tuple[str, object]:
    key = _key(model, tc, variant)
    start = time.perf_counter()
    entry, _problem = check_entry(config.cache_dir, key)
    if entry is None:
        with key_lock(config.cache_dir, key, config.lock_timeout, model.name):
            entry, problem = check_entry(config.cache_dir, key)  # another process may be done
            if entry is None:
                what = "first use" if variant == PLAIN else "l2, degenerate point, derivatives"
                progress_log.info("compiling %r (%s; a few seconds) ...", model.name, what)
                if problem is not None:
                    log.warning(
                        "cache entry %s is damaged (%s); rebuilding it",
                        entry_dir(config.cache_dir, key),
                        problem,
                    )
                entry = _build(model, config, tc, key, variant)
                log.info(
                    "compiled %r (%s) in %.2f s", model.name, variant, time.perf_counter() - start
                )
    else:
        log.info("loaded %r (%s) from cache", model.name, variant)
    return key, load_extension(entry, lambda: _scratch_dir(config, key))


def _build(
    model: Model, config: BuildConfig, tc: Toolchain, key: str, variant: str = PLAIN
) -> Entry:
    sources = generate(model, key, variant=variant)
    build_dir = new_build_dir(config.cache_dir, key)
    meta = build_extension(sources, tc, build_dir, key)
    meta["model"] = model.name
    meta["variant"] = variant
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


def _twin_build(
    model: Model, tolerances: Tolerances, config: BuildConfig, state_guess: dict, variant: str
) -> Evaluator:
    """The same model built as another variant (on the first call that needs it)."""
    ev = _compile(model, config, tolerances, variant)
    return ev.with_guess(**state_guess)


register_rebuild(_rebuild, _twin_build)
