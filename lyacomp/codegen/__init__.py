"""Stages 3 and 4: lowering to C fragments and rendering the templates."""

from .lower import Lowered, lower
from .lower_sensitivity import SensitivityLowered, lower_sensitivity
from .render import CSources, render, templates_digest_input

__all__ = [
    "CSources",
    "Lowered",
    "SensitivityLowered",
    "lower",
    "lower_sensitivity",
    "render",
    "templates_digest_input",
]
