"""Stage 5: compiling generated C and keeping the results in a cache."""

from .cache import cache_key, entry_dir, install_entry, key_lock, new_build_dir, read_entry
from .compiler import Toolchain, toolchain
from .extension import build_extension, load_extension

__all__ = [
    "Toolchain",
    "build_extension",
    "cache_key",
    "entry_dir",
    "install_entry",
    "key_lock",
    "load_extension",
    "new_build_dir",
    "read_entry",
    "toolchain",
]
