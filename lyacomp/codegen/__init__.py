"""Stages 3 and 4: lowering to C fragments and rendering the templates."""

from .lower import Lowered, lower
from .render import CSources, render, templates_digest_input

__all__ = ["CSources", "Lowered", "lower", "render", "templates_digest_input"]
