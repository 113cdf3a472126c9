"""Reading a model file (TOML, standard library parser)."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Any

from ..errors import ModelError
from .model import Model

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised only on Python 3.10
    import tomli as tomllib

_TOP_KEYS = {
    "name",
    "description",
    "states",
    "parameters",
    "definitions",
    "equations",
    "bifurcation",
    "equilibrium",
    "uncertainty",
}
_BIFURCATION_KEYS = {"parameter", "guess", "critical_value", "operating", "direction"}


def _table(doc: dict[str, Any], key: str, src: str, required: bool) -> dict[str, Any] | None:
    value = doc.get(key)
    if value is None:
        if required:
            raise ModelError(f"{src}: missing required table [{key}]")
        return None
    if not isinstance(value, dict):
        raise ModelError(f"{src}: '{key}' must be a table ([{key}])")
    return value


def model_from_dict(doc: dict[str, Any], source: str = "<dict>") -> Model:
    """Build a model from the parsed contents of a model file."""
    unknown = set(doc) - _TOP_KEYS
    if unknown:
        raise ModelError(
            f"{source}: unknown top-level key(s) {sorted(unknown)}; "
            f"expected some of {sorted(_TOP_KEYS)}"
        )
    if "name" not in doc:
        raise ModelError(f"{source}: missing 'name = \"...\"' at the top of the file")
    bif = _table(doc, "bifurcation", source, required=False) or {}
    extra = set(bif) - _BIFURCATION_KEYS
    if extra:
        raise ModelError(
            f"{source}: [bifurcation] unknown key(s) {sorted(extra)}; "
            f"expected some of {sorted(_BIFURCATION_KEYS)}"
        )
    if bif and "parameter" not in bif:
        raise ModelError(f"{source}: [bifurcation] needs 'parameter = \"NAME\"'")
    return Model(
        name=doc["name"],
        states=_table(doc, "states", source, required=True),
        parameters=_table(doc, "parameters", source, required=False) or {},
        equations=_table(doc, "equations", source, required=True),
        definitions=_table(doc, "definitions", source, required=False),
        bifurcation=bif.get("parameter"),
        guess=bif.get("guess"),
        critical_value=bif.get("critical_value"),
        operating=bif.get("operating"),
        direction=bif.get("direction"),
        equilibrium=_table(doc, "equilibrium", source, required=False),
        uncertainty=_table(doc, "uncertainty", source, required=False),
        source=source,
    )


def load_model(path: str | Path) -> Model:
    """Read a model file (TOML) and return the validated :class:`Model`."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ModelError(f"model file not found: {path}") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ModelError(f"cannot read model file {path}: {exc}") from None
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ModelError(f"{path}: not valid TOML: {exc}") from None
    return model_from_dict(doc, source=str(path))
