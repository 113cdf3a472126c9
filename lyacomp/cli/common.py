"""Shared command-line plumbing: loading the model and --set overrides."""

from __future__ import annotations

import argparse
import math

from ..errors import LyacompError
from ..model import Model, load_model


def add_model_args(parser: argparse.ArgumentParser, with_set: bool = True) -> None:
    """The positional MODEL file and repeated ``--set NAME=VALUE``."""
    parser.add_argument("model", metavar="MODEL", help="model file (TOML)")
    if with_set:
        parser.add_argument(
            "--set",
            dest="overrides",
            action="append",
            default=[],
            metavar="NAME=VALUE",
            help="set a parameter (on the bifurcation parameter: its starting guess); repeatable",
        )


def model_from_args(args: argparse.Namespace) -> Model:
    return load_model(args.model)


def overrides_from_args(args: argparse.Namespace, model: Model | None = None) -> dict[str, float]:
    """Parse ``--set`` values; with a model, also check the names."""
    values: dict[str, float] = {}
    for item in getattr(args, "overrides", []):
        name, sep, text = item.partition("=")
        name = name.strip()
        if not sep or not name:
            raise LyacompError(f"--set {item!r}: expected NAME=VALUE, e.g. --set k=2.1")
        try:
            value = float(text)
        except ValueError:
            raise LyacompError(f"--set {item!r}: {text.strip()!r} is not a number") from None
        if not math.isfinite(value):
            raise LyacompError(f"--set {item!r}: the value must be finite")
        if model is not None and name not in model.parameters:
            raise LyacompError(
                f"--set {name}: unknown parameter; the model has {list(model.parameters)}"
            )
        values[name] = value
    return values
