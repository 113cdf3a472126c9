"""The compiler driver: parse -> derive -> lower -> render -> build -> load."""

from __future__ import annotations

import logging
import time
from pathlib import Path

from .build import (
    build_extension,
    cache_key,
    entry_dir,
    install_entry,
    key_lock,
    load_extension,
    new_build_dir,
    read_entry,
    toolchain,
)
from .codegen import CSources, lower, render, templates_digest_input
from .config import BuildConfig
from .derive import derive
from .model import Model, load_model
from .runtime import Evaluator, Tolerances
from .runtime.evaluator import PREFIX

log = logging.getLogger("lyacomp")
#: Progress notes (the CLI shows them on a terminal): a cold build takes seconds.
progress_log = logging.getLogger("lyacomp.progress")


def generate(
    model: Model, key: str = "0" * 64, prefix: str = PREFIX, header_name: str = "model.h"
) -> CSources:
    """Derive and render the C sources of a model (no compilation)."""
    derivatives = derive(model.symbolic())
    lowered = lower(derivatives)
    return render(model, lowered, prefix=prefix, key=key, header_name=header_name)


def model_key(model: Model, config: BuildConfig) -> str:
    """Cache key: model, lyacomp version, templates, compiler and flags, Python ABI."""
    tc = toolchain(config)
    return cache_key(model.canonical(), templates_digest_input(), tc.identity())


def compile_model(
    model: Model | str | Path,
    *,
    config: BuildConfig | None = None,
    tolerances: Tolerances | None = None,
) -> Evaluator:
    """Compile a model (or a model file) into an :class:`Evaluator`, using the cache."""
    if not isinstance(model, Model):
        model = load_model(model)
    config = config or BuildConfig.from_environment()
    tc = toolchain(config)
    key = model_key(model, config)
    start = time.perf_counter()
    meta = read_entry(config.cache_dir, key)
    if meta is None:
        with key_lock(config.cache_dir, key, config.lock_timeout):
            meta = read_entry(config.cache_dir, key)  # another process may have finished it
            if meta is None:
                progress_log.info("compiling %r (first use; a few seconds) ...", model.name)
                sources = generate(model, key)
                build_dir = new_build_dir(config.cache_dir, key)
                meta = build_extension(sources, tc, build_dir, key)
                meta["model"] = model.name
                install_entry(build_dir, config.cache_dir, key, meta, config.keep_build)
                if config.keep_build:
                    log.info("build directory kept at %s", build_dir)
                log.info("compiled %r in %.2f s", model.name, time.perf_counter() - start)
    else:
        log.info("loaded %r from cache", model.name)
    module = load_extension(entry_dir(config.cache_dir, key), meta)
    return Evaluator(model, module, key, tolerances or Tolerances(), config)
