"""Scenarios of our own (invented values) shipped inside the package for the demo and tests."""

from __future__ import annotations

from pathlib import Path

from lyacomp.errors import ModelError

_HERE = Path(__file__).resolve().parent

#: The scenario that ``lyacomp demo`` runs.
DEMO = "tank_exciter"


def names() -> list[str]:
    """Names of the bundled scenarios."""
    return sorted(p.stem for p in _HERE.glob("*.toml"))


def path(name: str = DEMO) -> Path:
    """Path of a bundled scenario's model file."""
    candidate = _HERE / f"{name}.toml"
    if not candidate.is_file():
        raise ModelError(f"no bundled scenario {name!r}; available: {', '.join(names())}")
    return candidate
