"""Stage 8: the `lyacomp` command line."""

from __future__ import annotations

import argparse
import logging
import sys
from collections.abc import Sequence

from .._version import __version__
from ..errors import LyacompError
from . import cache_cmd, demo_cmd, emit_cmd, eval_cmd, map_cmd, robustness_cmd, verify_cmd

# Packages of the `studies` extra: the core runs without them.
_OPTIONAL = ("scipy", "matplotlib", "tqdm")

SUBCOMMANDS = [eval_cmd, robustness_cmd, map_cmd, verify_cmd, demo_cmd, emit_cmd, cache_cmd]


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="lyacomp",
        description="Compile a model x' = F(x, params) and classify its Hopf onset "
        "(first Lyapunov coefficient) for any parameter values.",
    )
    parser.add_argument("--version", action="version", version=f"lyacomp {__version__}")
    parser.add_argument("-v", "--verbose", action="store_true", help="log builds and cache use")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for module in SUBCOMMANDS:
        module.register(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``lyacomp`` command; returns the exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help(sys.stderr)
        return 2
    logging.basicConfig(
        level=logging.INFO if args.verbose else logging.WARNING,
        format="lyacomp: %(message)s",
    )
    if sys.stderr.isatty():  # progress notes only for a person watching
        logging.getLogger("lyacomp.progress").setLevel(logging.INFO)
    try:
        return int(args.func(args) or 0)
    except LyacompError as exc:
        message = str(exc).strip().replace("\n", " | ") if len(str(exc)) < 2000 else str(exc)
        print(f"lyacomp: error: {message}", file=sys.stderr)
        return 2
    except ModuleNotFoundError as exc:
        root = (exc.name or "").split(".")[0]
        if root not in _OPTIONAL:
            raise
        print(
            f"lyacomp: error: this command needs {root}, an optional part of lyacomp; "
            "install it with: pip install 'lyacomp[studies]'",
            file=sys.stderr,
        )
        return 2
    except KeyboardInterrupt:
        print("lyacomp: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:  # output piped into e.g. `head`, which stopped reading
        sys.stderr.close()
        return 141
