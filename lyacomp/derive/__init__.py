"""Stage 2: symbolic derivation."""

from .derivatives import Derivatives, derive

__all__ = ["Derivatives", "derive"]
