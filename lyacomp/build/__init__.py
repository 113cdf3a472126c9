"""Stage 5: compiling generated C and keeping the results in a cache."""

from .cache import (
    Entry,
    cache_key,
    check_entry,
    clear_cache,
    entry_dir,
    install_entry,
    key_lock,
    mark_root,
    new_build_dir,
)
from .compiler import Toolchain, forget_probe, toolchain
from .extension import build_extension, load_extension

__all__ = [
    "Entry",
    "Toolchain",
    "build_extension",
    "cache_key",
    "check_entry",
    "clear_cache",
    "entry_dir",
    "forget_probe",
    "install_entry",
    "key_lock",
    "load_extension",
    "mark_root",
    "new_build_dir",
    "toolchain",
]
