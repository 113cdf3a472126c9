"""`lyacomp emit`: write the standalone C source and header of a model."""

from __future__ import annotations

import argparse
import re
import sys
from pathlib import Path

from ..errors import LyacompError
from ..model.expr_parser import MAX_NAME_LENGTH, is_valid_name
from ..pipeline import generate
from .common import add_model_args, model_from_args

EXAMPLE = (
    "example:\n  lyacomp emit examples/belt_friction_pad.toml -o generated/\n"
    "  cc -O2 -fopenmp -c generated/belt_friction_pad.c   # then link with -lm"
)


def register(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "emit",
        help="write standalone C (.c and .h) for use in your own program",
        description="Write DIR/<name>.c and DIR/<name>.h: the evaluator as one C99 unit "
        "with no Python dependency. The header documents the functions and structs.",
        epilog=EXAMPLE,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    add_model_args(parser, with_set=False)
    parser.add_argument("-o", "--output", required=True, metavar="DIR", help="output directory")
    parser.add_argument(
        "--prefix",
        default="lyc",
        help="prefix of every C identifier (default: lyc); choose distinct prefixes to "
        "link several models into one program",
    )
    parser.set_defaults(func=run)


def file_stem(name: str) -> str:
    """A file name made from the model name that passes the name whitelist."""
    stem = re.sub(r"[^a-z0-9]+", "_", name.lower()).strip("_")
    if not stem[:1].isalpha():
        stem = "model_" + stem
    stem = stem[:MAX_NAME_LENGTH].rstrip("_")
    return stem if is_valid_name(stem) else "model"


def run(args: argparse.Namespace) -> int:
    if not is_valid_name(args.prefix) or len(args.prefix) > 31:
        raise LyacompError(
            f"--prefix {args.prefix!r}: use a letter then letters, digits or underscores "
            "(at most 31 characters)"
        )
    model = model_from_args(args)
    stem = file_stem(model.name)
    out = Path(args.output)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise LyacompError(f"cannot create output directory {out}: {exc}") from None
    sources = generate(model, key=model.fingerprint(), prefix=args.prefix, header_name=f"{stem}.h")
    (out / f"{stem}.c").write_text(sources.standalone, encoding="utf-8")
    (out / f"{stem}.h").write_text(sources.header, encoding="utf-8")
    print(f"wrote {out / (stem + '.c')} and {out / (stem + '.h')}", file=sys.stderr)
    return 0
