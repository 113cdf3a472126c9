"""Stage 5: turning generated C into a loaded cffi extension module (API mode)."""

from __future__ import annotations

import contextlib
import importlib.machinery
import importlib.util
import io
import logging
import shutil
import time
from collections.abc import Callable
from pathlib import Path
from types import ModuleType
from typing import Any

import cffi

from ..codegen import CSources
from ..errors import BuildError
from .cache import Entry
from .compiler import (
    Compilation,
    Toolchain,
    Unit,
    python_include_dirs,
    shared_library_suffix,
    wrapper_flags,
)

log = logging.getLogger("lyacomp")


def module_name(key: str) -> str:
    return f"_lyacomp_{key[:24]}"


def build_extension(sources: CSources, tc: Toolchain, build_dir: Path, key: str) -> dict[str, Any]:
    """Write the C files into ``build_dir`` and compile the extension there.

    The model's translation units and the cffi wrapper are compiled side by side (at
    most as many compiler runs at once as there are usable cores) and then linked. The
    model is ``model.c`` (the file ``lyacomp emit`` writes) or, when the sources come in
    parts, ``model_<part>.c`` for each part (``model.c`` is still written, for the reader),
    at the full flags; the wrapper only includes ``model.h`` (at :func:`wrapper_flags`).
    The model's symbols are hidden: the library exports nothing but the module's init
    function. Returns the metadata that describes the build.
    """
    name = module_name(key)
    model_c = build_dir / "model.c"
    model_c.write_text(sources.standalone, encoding="utf-8")
    (build_dir / "model.h").write_text(sources.header, encoding="utf-8")
    units = [model_c]
    if sources.parts:
        units = [build_dir / f"model_{part}.c" for part, _ in sources.parts]
        for path, (_, text) in zip(units, sources.parts):
            path.write_text(text, encoding="utf-8")
    model_flags = (*tc.compile_flags, "-fvisibility=hidden")
    job = Compilation(tc)
    try:
        # The model is most of the compiler's work: it starts before cffi parses the
        # declarations and writes the wrapper.
        for path in units:
            job.add(Unit(path, path.with_suffix(".o"), model_flags))
        ffi = cffi.FFI()
        try:
            ffi.cdef(sources.cdef)
        except cffi.CDefError as exc:  # a template bug, not user input
            raise BuildError(f"internal error in the generated declarations: {exc}") from exc
        ffi.set_source(name, '#include "model.h"\n')
        wrapper = build_dir / f"{name}.c"
        with contextlib.redirect_stdout(io.StringIO()):  # cffi announces the file it writes
            ffi.emit_c_code(str(wrapper))
        cold = (*wrapper_flags(tc), *(f"-I{d}" for d in python_include_dirs()))
        job.add(Unit(wrapper, build_dir / f"{name}.o", cold))
        library = build_dir / f"{name}{shared_library_suffix()}"
        seconds = job.link(library)
    finally:
        job.close()
    return {
        "module": name,
        "library": library.name,
        "prefix": sources.prefix,
        "compile_seconds": round(seconds, 3),
        "compiler": list(tc.command),
        "compiler_version": tc.version,
        "flags": list(model_flags),
        "wrapper_flags": list(cold),
        "openmp": tc.openmp,
        "built_at": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
    }


_LOADED: dict[str, ModuleType] = {}


def load_extension(entry: Entry, scratch: Callable[[], Path]) -> ModuleType:
    """Import the compiled module of a checked cache entry (once per process).

    The checked bytes are written to a private file in a new folder from ``scratch()``
    and loaded from there, so a library changed on disk after its check is never mapped.
    """
    name = entry.meta["module"]
    if name in _LOADED:
        return _LOADED[name]
    folder = scratch()
    path = folder / entry.meta["library"]
    try:
        path.write_bytes(entry.library)
        loader = importlib.machinery.ExtensionFileLoader(name, str(path))
        spec = importlib.util.spec_from_file_location(name, str(path), loader=loader)
        if spec is None:
            raise BuildError(f"cannot load the compiled model {name}")
        module = importlib.util.module_from_spec(spec)
        loader.exec_module(module)
    except (ImportError, OSError) as exc:
        raise BuildError(f"cannot load the compiled model {name}: {exc}") from exc
    finally:
        shutil.rmtree(folder, ignore_errors=True)  # the mapping outlives the file
    _LOADED[name] = module
    return module
