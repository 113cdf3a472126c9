"""`lyacomp cache`: where compiled models are kept, how much space they take."""

from __future__ import annotations

import argparse

from ..build import clear_cache
from ..config import default_cache_dir

EXAMPLE = "example:\n  lyacomp cache            # show location and size\n  lyacomp cache --clear"


def register(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "cache",
        help="show or clear the cache of compiled models",
        description="Show the cache directory (LYACOMP_CACHE_DIR overrides it) and its size.",
        epilog=EXAMPLE,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument(
        "--clear", action="store_true", help="delete the cached builds (only what lyacomp created)"
    )
    parser.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    root = default_cache_dir()
    if args.clear:
        removed = clear_cache(root)
        print(f"cleared {root}: {removed} build(s) removed")
        return 0
    entries = list(root.glob("??/*/meta.json")) if root.is_dir() else []
    size = sum(f.stat().st_size for f in root.rglob("*") if f.is_file()) if root.is_dir() else 0
    print(f"cache: {root}\nbuilds: {len(entries)}\nsize: {size / 1e6:.1f} MB")
    return 0
