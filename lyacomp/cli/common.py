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


def add_guess_args(parser: argparse.ArgumentParser) -> None:
    """Repeated ``--guess STATE=VALUE``: starting guesses for the equilibrium."""
    parser.add_argument(
        "--guess",
        dest="guesses",
        action="append",
        default=[],
        metavar="STATE=VALUE",
        help="starting guess for a state (chooses among several equilibria); repeatable",
    )


def _pairs(items: list[str], option: str) -> dict[str, float]:
    values: dict[str, float] = {}
    for item in items:
        name, sep, text = item.partition("=")
        name = name.strip()
        if not sep or not name:
            raise LyacompError(f"{option} {item!r}: expected NAME=VALUE, e.g. {option} k=2.1")
        try:
            value = float(text)
        except ValueError:
            raise LyacompError(f"{option} {item!r}: {text.strip()!r} is not a number") from None
        if not math.isfinite(value):
            raise LyacompError(f"{option} {item!r}: the value must be finite")
        values[name] = value
    return values


def guesses_from_args(args: argparse.Namespace, model: Model) -> dict[str, float]:
    """Parse ``--guess`` values and check the state names."""
    values = _pairs(getattr(args, "guesses", []), "--guess")
    for name in values:
        if name not in model.states:
            raise LyacompError(f"--guess {name}: unknown state; the model has {model.state_names}")
    return values


def model_from_args(args: argparse.Namespace) -> Model:
    return load_model(args.model)


def overrides_from_args(args: argparse.Namespace, model: Model | None = None) -> dict[str, float]:
    """Parse ``--set`` values; with a model, also check the names."""
    values = _pairs(getattr(args, "overrides", []), "--set")
    for name in values:
        if model is not None and name not in model.parameters:
            raise LyacompError(
                f"--set {name}: unknown parameter; the model has {list(model.parameters)}"
            )
    return values
